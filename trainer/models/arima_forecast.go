package models

import (
	"math"

	"almanac.dev/almanac/trainer/numeric/kalman"
)

// Forecast returns h steps of the mean and, for each level, the normal quantile
// mean + z_p sqrt(sigma^2 V_h). Mean and V_h come from the Kalman forecasting recursions
// (Durbin & Koopman 2012, section 4.11) on the state augmented with the last d + mD
// observations, so that integration is part of the state:
//
//	z_t = (a_t, y_{t-1}, ..., y_{t-nd}),   y_t = mu + a_t[0] + sum_k delta_k y_{t-k}
//	z_{t+1} = T* z_t + R* e_{t+1},   P_{t+1} = T* P_t T*' + R* R*'
//
// with (1-B)^d (1-B^m)^D = 1 - sum_k delta_k B^k, starting from the filtered a_{n+1}, P_{n+1}
// of the differenced series and the known last observations (zero variance). V_h = Z* P Z*'
// with Z* = (1, 0, ..., 0, delta_1, ..., delta_nd). R's stats::predict.Arima uses the same
// recursions (with its diffuse prior in place of the explicit differencing).
func (f *ARIMAFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	mean, v := f.forecastMoments(h)
	se := make([]float64, h)
	for k := range se {
		se[k] = math.Sqrt(f.sigma2 * v[k])
	}
	return Forecast{Mean: mean, Levels: copyLevels(levels), Quantiles: gaussianBands(mean, se, levels, zQuantile)}
}

// forecastMoments returns the forecast means and the variances V_h for unit sigma^2.
func (f *ARIMAFit) forecastMoments(h int) (mean, vars []float64) {
	o := f.order
	var sp kalman.ARMA
	phi := expand(make([]float64, o.P+f.m*o.SP), f.coef.AR, f.coef.SAR, f.m, -1)
	theta := expand(make([]float64, o.Q+f.m*o.SQ), f.coef.MA, f.coef.SMA, f.m, 1)
	x := make([]float64, len(f.w))
	for t, v := range f.w {
		x[t] = v - f.c
	}
	sp.Setup(phi, theta)
	sp.Filter(x, nil)
	delta := diffPoly(o.D, o.SD, f.m)
	r, nd := sp.Dim(), len(delta)
	N := r + nd
	z := make([]float64, N)
	copy(z, sp.State())
	n := len(f.y)
	for k := 0; k < nd; k++ {
		z[r+k] = f.y[n-1-k]
	}
	P := make([]float64, N*N)
	spP := sp.Cov()
	for i := 0; i < r; i++ {
		for j := i; j < r; j++ {
			P[i*N+j] = spP[i*r+j] // Filter keeps the upper triangle
			P[j*N+i] = spP[i*r+j]
		}
	}
	// Z* and T*.
	Z := make([]float64, N)
	Z[0] = 1
	copy(Z[r:], delta)
	T := make([]float64, N*N)
	for i := 0; i < r; i++ {
		T[i*N] = sp.Phi()[i+1]
		if i+1 < r {
			T[i*N+i+1] = 1
		}
	}
	if nd > 0 {
		copy(T[r*N:(r+1)*N], Z)
		for k := 1; k < nd; k++ {
			T[(r+k)*N+r+k-1] = 1
		}
	}
	R := make([]float64, N)
	copy(R, sp.Theta()[:r])
	// The mean mu_t of the differenced series is f.c; for the level it enters through y_t.
	mean, vars = make([]float64, h), make([]float64, h)
	zn := make([]float64, N)
	TP := make([]float64, N*N)
	for s := 0; s < h; s++ {
		yhat := f.c
		for j, zj := range Z {
			yhat += zj * z[j]
		}
		v := 0.0
		for i, zi := range Z {
			if zi == 0 {
				continue
			}
			for j, zj := range Z {
				v += zi * P[i*N+j] * zj
			}
		}
		mean[s], vars[s] = yhat, v
		// z <- T* z (+ c in the new y_{t} slot); P <- T* P T*' + R* R*'.
		for i := 0; i < N; i++ {
			acc := 0.0
			for j := 0; j < N; j++ {
				acc += T[i*N+j] * z[j]
			}
			zn[i] = acc
		}
		if nd > 0 {
			zn[r] += f.c
		}
		copy(z, zn)
		for i := 0; i < N; i++ {
			for j := 0; j < N; j++ {
				acc := 0.0
				for k := 0; k < N; k++ {
					if t := T[i*N+k]; t != 0 {
						acc += t * P[k*N+j]
					}
				}
				TP[i*N+j] = acc
			}
		}
		for i := 0; i < N; i++ {
			for j := 0; j < N; j++ {
				acc := 0.0
				for k := 0; k < N; k++ {
					if t := T[j*N+k]; t != 0 {
						acc += TP[i*N+k] * t
					}
				}
				P[i*N+j] = acc + R[i]*R[j]
			}
		}
	}
	return mean, vars
}
