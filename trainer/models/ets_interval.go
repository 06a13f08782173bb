package models

import (
	"math"
	"math/rand/v2"
	"slices"
)

// etsPaths is the number of simulated sample paths for the forms without an analytic
// forecast variance (multiplicative season).
const etsPaths = 2000

// etsSeed seeds the PCG generator of the simulation, so that a forecast is reproducible.
const etsSeed = 0x616c6d616e6163

// Forecast returns the forecast means and, for each level, the quantile path. For the linear
// forms (season N or A) the mean is the point forecast of HKOS 2008 Table 2.2; for
// multiplicative-season forms it is the exact mean of class 3 (see class3Mean), which equals
// the point forecast for the first m steps and exceeds it slightly afterwards.
//
// Quantiles are analytic for the linear forms. For class 1 (additive error, season N or A;
// HKOS 2008 section 6.2, Table 6.1 / eq. 6.4):
//
//	v_1 = sigma^2,  v_h = sigma^2 (1 + sum_{j=1}^{h-1} c_j^2),  c_j = alpha + beta phi_j + gamma d_{j,m}
//
// with phi_j = phi + ... + phi^j (j undamped, 0 without trend) and d_{j,m} = 1 when m divides
// j. For class 2 (multiplicative error, season N or A; HKOS 2008 chapter 6, the class 2 recursion,
// from memory):
//
//	theta_1 = mu_1^2,  theta_h = mu_h^2 + sigma^2 sum_{j=1}^{h-1} c_j^2 theta_{h-j},
//	v_h = (1 + sigma^2) theta_h - mu_h^2.
//
// Both use the normal quantile mu_h + z_p sqrt(v_h). Multiplicative-season forms (class 3)
// are simulated: etsPaths paths of the model with Gaussian innovations of variance sigma^2,
// from a PCG generator with a fixed seed, and the empirical quantile (linear interpolation of
// the order statistics, Hyndman & Fan 1996 type 7) at each step.
func (f *ETSFit) Forecast(h int, levels []float64) Forecast {
	if h < 0 {
		panic("models: ETS: negative horizon")
	}
	for _, p := range levels {
		if !(p > 0 && p < 1) {
			panic("models: ETS: quantile level outside (0,1)")
		}
	}
	out := Forecast{Mean: make([]float64, h), Levels: append([]float64(nil), levels...)}
	if f.season == etsMul {
		f.class3Mean(out.Mean)
	} else {
		etsPoint(f.endL, f.endB, f.endS, f.m, f.trend, f.season, f.par.Phi, out.Mean)
	}
	if len(levels) == 0 {
		return out
	}
	out.Quantiles = make([][]float64, len(levels))
	for j := range out.Quantiles {
		out.Quantiles[j] = make([]float64, h)
	}
	if f.season == etsMul {
		f.simulateQuantiles(h, levels, out.Quantiles)
		return out
	}
	v := f.variance(out.Mean)
	for j, p := range levels {
		z := math.Sqrt2 * math.Erfinv(2*p-1)
		for k := range v {
			out.Quantiles[j][k] = out.Mean[k] + z*math.Sqrt(v[k])
		}
	}
	return out
}

// variance returns the analytic forecast variances of a linear form for the point forecasts mu
// (see Forecast).
func (f *ETSFit) variance(mu []float64) []float64 {
	h := len(mu)
	c := make([]float64, h) // c[j] = c_j, j >= 1
	phij, pw := 0.0, 1.0
	for j := 1; j < h; j++ {
		switch f.trend {
		case etsAdd:
			phij = float64(j)
		case etsDamped:
			pw *= f.par.Phi
			phij += pw
		}
		c[j] = f.par.Alpha + f.par.Beta*phij
		if f.season != etsNone && j%f.m == 0 {
			c[j] += f.par.Gamma
		}
	}
	s2 := f.sigma2
	v := make([]float64, h)
	if f.errT == etsAdd {
		acc := 0.0
		for k := range v {
			if k > 0 {
				acc += c[k] * c[k]
			}
			v[k] = s2 * (1 + acc)
		}
		return v
	}
	theta := make([]float64, h)
	for k := range v {
		t := mu[k] * mu[k]
		for j := 1; j <= k; j++ {
			t += s2 * c[j] * c[j] * theta[k-j]
		}
		theta[k] = t
		v[k] = (1+s2)*t - mu[k]*mu[k]
	}
	return v
}

// simulateQuantiles fills q[j][k] with the level-levels[j] quantile of simulated values of
// y_{n+k+1}; see Forecast.
func (f *ETSFit) simulateQuantiles(h int, levels []float64, q [][]float64) {
	rng := rand.New(rand.NewPCG(etsSeed, uint64(h)))
	sd := math.Sqrt(f.sigma2)
	m := f.m
	paths := make([]float64, etsPaths*h) // step-major: paths[k*etsPaths+i]
	buf := make([]float64, m)
	phi := f.par.Phi
	for i := 0; i < etsPaths; i++ {
		l, b := f.endL, f.endB
		// Circular buffer whose oldest state (next used) sits at index 0.
		for j := 0; j < m; j++ {
			buf[j] = f.endS[m-1-j]
		}
		j := 0
		for k := 0; k < h; k++ {
			trendTerm := 0.0
			if f.trend != etsNone {
				trendTerm = phi * b
			}
			mu := l + trendTerm
			if f.season == etsAdd {
				mu += buf[j]
			} else if f.season == etsMul {
				mu *= buf[j]
			}
			e := sd * rng.NormFloat64()
			var y float64
			if f.errT == etsAdd {
				y = mu + e
			} else {
				y = mu * (1 + e)
			}
			paths[k*etsPaths+i] = y
			l, b, j = etsStep(l, b, buf, j, m, f.trend, f.season, phi, f.par.Alpha, f.par.Beta, f.par.Gamma, y)
		}
	}
	for k := 0; k < h; k++ {
		col := paths[k*etsPaths : (k+1)*etsPaths]
		slices.Sort(col)
		for jl, p := range levels {
			q[jl][k] = quantileSorted(col, p)
		}
	}
}

// quantileSorted returns the type-7 sample quantile (Hyndman & Fan 1996) of sorted x.
func quantileSorted(x []float64, p float64) float64 {
	pos := p * float64(len(x)-1)
	lo := int(math.Floor(pos))
	if lo >= len(x)-1 {
		return x[len(x)-1]
	}
	frac := pos - float64(lo)
	return x[lo] + frac*(x[lo+1]-x[lo])
}

// class3Mean writes the h-step forecast means of a multiplicative-season form (class 3 of
// Hyndman, Koehler, Ord & Snyder 2005, "Prediction intervals for exponential smoothing using
// two new classes of state space models", J. Forecasting 24(1), section 4; HKOS 2008 ch. 6).
// With a = (l, b) and s = (s_1..s_m) newest first, M_1 = a s' and
//
//	mu_h    = H1 M_h H2',  H1 = (1, phi), H2 = e_m
//	M_{h+1} = F1 M_h F2' + sigma^2 G1 M_h G2'
//
// where F1 = [1 phi; 0 phi] moves the level and slope, F2 rotates the seasons, G1 = [alpha
// alpha phi; beta beta phi] and G2 has gamma in its (1, m) entry. Without a trend a = (l),
// F1 = 1, G1 = alpha. R's forecast 8.20 (class3) uses F1 = [1 1; 0 phi] and H1 = (1, 1), which
// agrees with this for undamped trends only.
func (f *ETSFit) class3Mean(dst []float64) {
	m := f.m
	rows := 1
	phi := 0.0
	if f.trend != etsNone {
		rows = 2
		phi = f.par.Phi
	}
	a := [2]float64{f.endL, f.endB}
	cur := make([][]float64, rows)
	next := make([][]float64, rows)
	for r := range cur {
		cur[r] = make([]float64, m)
		next[r] = make([]float64, m)
		for c := 0; c < m; c++ {
			cur[r][c] = a[r] * f.endS[c]
		}
	}
	s2g := f.sigma2 * f.par.Gamma
	for k := range dst {
		if rows == 1 {
			dst[k] = cur[0][m-1]
			v := cur[0][m-1]
			next[0][0] = v + s2g*f.par.Alpha*v
		} else {
			dst[k] = cur[0][m-1] + phi*cur[1][m-1]
			v0, v1 := cur[0][m-1], cur[1][m-1]
			w := s2g * (v0 + phi*v1)
			next[0][0] = v0 + phi*v1 + f.par.Alpha*w
			next[1][0] = phi*v1 + f.par.Beta*w
		}
		for r := 0; r < rows; r++ {
			for c := 1; c < m; c++ {
				if rows == 1 {
					next[r][c] = cur[r][c-1]
				} else if r == 0 {
					next[0][c] = cur[0][c-1] + phi*cur[1][c-1]
				} else {
					next[1][c] = phi * cur[1][c-1]
				}
			}
		}
		cur, next = next, cur
	}
}
