package models

import (
	"math"

	"almanac.dev/almanac/trainer/numeric/classical"
)

func init() { Register(FamilyTheta, newTheta) }

// SES parameter bounds: the usual ETS smoothing bounds of R forecast 8.20's ets
// (lower 1e-4, upper 0.9999), which its ses, and hence thetaf, uses.
const (
	sesAlphaMin = 1e-4
	sesAlphaMax = 0.9999
	sesGrid     = 24 // coarse grid points before the golden-section refinement
)

// thetaModel is the Theta method of Assimakopoulos & Nikolopoulos (2000, International Journal
// of Forecasting 16, 521-530), in the equivalent form shown by Hyndman & Billah (2003,
// "Unmasking the Theta method", IJF 19, 287-290): simple exponential smoothing with a drift equal
// to half the slope of the least-squares trend line, applied to the seasonally adjusted series.
//
// With x_t = y_t / S_{t mod m} (SeasonalIndices; S ≡ 1 when not seasonal), t = 0..n−1:
//
//	SES:    ℓ_t = ℓ_{t−1} + α (x_t − ℓ_{t−1}),  ℓ_{−1} = ℓ0,  one-step fit x̂_t = ℓ_{t−1}
//	        (α, ℓ0) minimise Σ (x_t − ℓ_{t−1})²,  α ∈ [1e-4, 0.9999]
//	trend:  b = β̂/2, β̂ the OLS slope of x_t on t
//	mean:   x̂_{n+h} = ℓ_{n−1} + b ((h−1) + (1 − (1−α)^n)/α)
//	        ŷ_{n+h} = x̂_{n+h} · S_{(n+h−1) mod m}
//	band:   ŷ_{n+h} ± Φ⁻¹(p) σ̂ √(1 + (h−1) α²),  σ̂² = SSE / (n − 2)
//
// This is what R forecast 8.20's thetaf computes (it fits SES by ets(x, "ANN", opt.crit = "mse")
// and, like thetaf, the band is the SES band on the adjusted scale, not reseasonalised, and the
// in-sample fit is the SES fit x̂_t · S without the drift term). The SSE is minimised exactly in
// ℓ0 for each α (the one-step errors are linear in ℓ0, so ℓ0 has a closed form) and over α by a
// 24-point grid followed by golden-section search in the best bracket; R uses Nelder-Mead on both,
// so α can differ slightly where the SSE is flat.
//
// The seasonal decision is seasonIndices: for n >= 3m the 90% autocorrelation test, as thetaf
// and the M4 benchmark code; for 2m < n < 3m the STL seasonal strength above 0.64 (R forecast
// 8.20's nsdiffs(x, test = "seas")) where thetaf runs the autocorrelation test from n > 2m,
// which a trend defeats; shorter or non-seasonal series are fitted unadjusted and
// Params()["seasonal"] is 0. Needs n >= 3. With n >= 3m the decision and forecasts agree with
// thetaf (weekly and daily series to 2e-4, test/reference/weekly_test.go); for 2m < n < 3m
// they agree with thetaf composed on R's strength decision (test/reference/seasonstrength_test.go).
// The final fits of M3 and the M4 hourly dev half all have n >= 3m.
type thetaModel struct{ spec Spec }

func newTheta(s Spec) (Model, error) { return thetaModel{spec: s}, nil }

func (thetaModel) Family() string      { return FamilyTheta }
func (thetaModel) MinLength(m int) int { return 3 }

func (tm thetaModel) Fit(y []float64, m int) (Fitted, error) {
	const family = FamilyTheta
	n := len(y)
	if n < 3 {
		return nil, tooShort(family, n, 3)
	}
	if err := checkFinite(family, y); err != nil {
		return nil, err
	}
	m = seasonFor(tm.spec, m)
	idx, seasonal := seasonIndices(y, m)
	f := &thetaFit{name: tm.spec.DisplayName(), n: n, idx: idx, fitted: make([]float64, n)}
	x := y
	if seasonal {
		classical.Deseasonalize(f.fitted, y, idx) // fitted doubles as scratch for x until overwritten
		x = f.fitted
	}
	f.b = olsSlope(x) / 2
	f.alpha, f.l0 = sesLeastSquares(x)
	// Final pass: one-step fits and the last level. x may alias f.fitted; read before write.
	level, sse := f.l0, 0.0
	for t := range n {
		xt := x[t]
		e := xt - level
		sse += e * e
		f.fitted[t] = level
		level += f.alpha * e
	}
	if seasonal {
		for t := range f.fitted {
			f.fitted[t] *= idx[t%m]
		}
	}
	f.level = level
	f.sigma2 = sse / float64(n-2)
	return f, nil
}

// olsSlope returns the least-squares slope of x_t on t = 0..n−1 (n >= 2).
func olsSlope(x []float64) float64 {
	n := float64(len(x))
	tbar := (n - 1) / 2
	var xbar float64
	for _, v := range x {
		xbar += v
	}
	xbar /= n
	var sxy, sxx float64
	for t, v := range x {
		d := float64(t) - tbar
		sxy += d * (v - xbar)
		sxx += d * d
	}
	return sxy / sxx
}

// sesProfile returns, for a fixed α, the least-squares ℓ0 and the SSE at that ℓ0. With ℓ0 =
// L + δ the one-step error is e_t(δ) = e_t(0) − (1−α)^t δ, so SSE(δ) is a quadratic with minimum
// at δ = Σ e_t(0) c_t / Σ c_t², c_t = (1−α)^t. L is the mean of the first min(10, n) values (the
// start R's ets uses), which keeps e_t(0) small and the subtraction below well conditioned.
func sesProfile(x []float64, alpha, start float64) (l0, sse float64) {
	level, c := start, 1.0
	var saa, sac, scc float64
	for _, v := range x {
		e := v - level
		saa += e * e
		sac += e * c
		scc += c * c
		level += alpha * e
		c *= 1 - alpha
	}
	d := sac / scc
	sse = saa - sac*d
	if sse < 0 {
		sse = 0
	}
	return start + d, sse
}

// sesLeastSquares minimises the one-step SSE of SES over α ∈ [sesAlphaMin, sesAlphaMax] and ℓ0.
func sesLeastSquares(x []float64) (alpha, l0 float64) {
	k := min(10, len(x))
	var start float64
	for _, v := range x[:k] {
		start += v
	}
	start /= float64(k)
	sse := func(a float64) float64 { _, s := sesProfile(x, a, start); return s }
	alpha = gridGoldenMin(sse, sesAlphaMin, sesAlphaMax, sesGrid)
	l0, _ = sesProfile(x, alpha, start)
	return alpha, l0
}

// gridGoldenMin minimises f on [lo, hi]: f at `grid` evenly spaced points (grid >= 2), then
// goldenMin in the bracket around the best of them, keeping the grid point when the bracket's
// interior optimum is worse.
func gridGoldenMin(f func(float64) float64, lo, hi float64, grid int) float64 {
	step := (hi - lo) / float64(grid-1)
	best, bestF := 0, math.Inf(1)
	for i := range grid {
		if v := f(lo + float64(i)*step); v < bestF {
			best, bestF = i, v
		}
	}
	x := goldenMin(f, lo+float64(max(best-1, 0))*step, lo+float64(min(best+1, grid-1))*step, 1e-10)
	if f(x) > bestF {
		x = lo + float64(best)*step
	}
	return x
}

// goldenMin returns a minimiser of f on [lo, hi] by golden-section search to width tol
// (Kiefer 1953; Press et al., Numerical Recipes, 3rd ed., section 10.2).
func goldenMin(f func(float64) float64, lo, hi, tol float64) float64 {
	const r = 0.6180339887498949 // (√5 − 1)/2
	a, b := lo, hi
	c, d := b-r*(b-a), a+r*(b-a)
	fc, fd := f(c), f(d)
	for b-a > tol {
		if fc <= fd {
			b, d, fd = d, c, fc
			c = b - r*(b-a)
			fc = f(c)
		} else {
			a, c, fc = c, d, fd
			d = a + r*(b-a)
			fd = f(d)
		}
	}
	if fc <= fd {
		return c
	}
	return d
}

type thetaFit struct {
	name          string
	n             int
	idx           []float64 // nil when not seasonal
	alpha, l0, b  float64
	level, sigma2 float64
	fitted        []float64
}

func (f *thetaFit) Name() string { return seasonAdjustment{f.idx}.label(f.name) }

// Params returns "alpha", "l0" (initial level), "level" (ℓ_{n−1}), "drift" (b), "sigma2" (σ̂²),
// "seasonal" (1 or 0) and "index<j>" for each seasonal index when seasonal.
func (f *thetaFit) Params() map[string]float64 {
	p := map[string]float64{
		"alpha": f.alpha, "l0": f.l0, "level": f.level, "drift": f.b, "sigma2": f.sigma2,
	}
	addSeasonParams(p, f.idx)
	return p
}

// InSample returns the SES one-step fits ℓ_{t−1} · S_{t mod m}, as R's thetaf reports them.
func (f *thetaFit) InSample() []float64 { return append([]float64(nil), f.fitted...) }

func (f *thetaFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	buf := make([]float64, 2*h)
	mean, se := buf[:h:h], buf[h:]
	a := math.Max(1e-10, f.alpha)
	offset := (1 - math.Pow(1-a, float64(f.n))) / a
	sigma := math.Sqrt(f.sigma2)
	for k := range mean {
		mean[k] = f.level + f.b*(float64(k)+offset)
		if f.idx != nil {
			mean[k] *= f.idx[(f.n+k)%len(f.idx)]
		}
		se[k] = sigma * math.Sqrt(1+float64(k)*a*a)
	}
	return Forecast{Mean: mean, Levels: copyLevels(levels), Quantiles: gaussianBands(mean, se, levels, zQuantile)}
}
