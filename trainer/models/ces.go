package models

import (
	"fmt"
	"math"

	"almanac.dev/almanac/trainer/numeric/neldermead"
)

func init() { Register(FamilyCES, func(s Spec) (Model, error) { return cesModel{spec: s}, nil }) }

// FamilyCES is complex exponential smoothing (Svetunkov & Kourentzes 2015, "Complex exponential
// smoothing", Lancaster University working paper, MPRA 69394; Svetunkov, Kourentzes & Ord 2022,
// Naval Research Logistics 69(8), 1108-1123), the paper's acronym.
const FamilyCES = "CES"

// Estimation settings of CES (our choices): Nelder-Mead from (α0, α1) = (1.3, 1) with steps of
// 0.1, at most cesBudget evaluations, restarted once from its result; cesBackcasts forward and
// backward passes for the initial states.
const (
	cesStart0, cesStart1 = 1.3, 1.0
	cesStep              = 0.1
	cesBudget            = 300
	cesBackcasts         = 2
	cesMinLength         = 6
)

// cesModel is non-seasonal complex exponential smoothing on the seasonally adjusted series, as
// the Theta and DOTM families adjust it (x_t = y_t / S_{t mod m}, adjustSeason; S ≡ 1 when
// seasonIndices finds no season). This is not the papers' seasonal CES, which carries a second
// complex state for the seasonal lag.
//
// The method smooths the complex number x_t + i e_t (the observation and its one-step error,
// the papers' proxy for the "information potential") with a complex weight α0 + iα1:
//
//	x̂_{t+1} + i ê_{t+1} = (α0 + iα1)(x_t + i e_t) + (1 − α0 + i − iα1)(x̂_t + i ê_t)
//
// whose real and imaginary parts give the state space model both papers derive, with ℓ_t =
// x̂_{t+1} and c_t = ê_{t+1} (written from memory of the papers; the tests expand the complex
// product by hand and compare):
//
//	x_t = ℓ_{t−1} + ε_t
//	ℓ_t = ℓ_{t−1} − (1 − α1) c_{t−1} + (α0 − α1) ε_t
//	c_t = ℓ_{t−1} + (1 − α0) c_{t−1} + (α0 + α1) ε_t
//
// i.e. v_t = F v_{t−1} + g ε_t with F = [1, −(1−α1); 1, 1−α0], g = (α0 − α1, α0 + α1), x_t =
// w'v_{t−1} + ε_t, w = (1, 0). Forecasts are x̂_{n+h} = w'F^{h−1} v_n with variance σ²(1 +
// Σ_{j=1}^{h−1} (w'F^{j−1}g)²) (Hyndman, Koehler, Ord & Snyder 2008, chapter 6, for any linear
// innovations model); the mean and band are multiplied by the seasonal index.
//
// Estimation is by Gaussian likelihood, which with σ² concentrated out is the sum of squared
// one-step errors, minimised by Nelder-Mead over (α0, α1) in the region where D = F − g w' has
// its eigenvalues inside the unit circle (the model is forecastable; the 2022 paper states it as
// three circles, see cesStable). The initial states come from backcasting for each (α0, α1)
// (cesBackcast): the filter run forward and backward over the series, the states it ends with
// at the first observation taken as (ℓ_0, c_0). Backcasting is, from memory, the default of R's
// smooth package, which Debian does not package; we chose it over estimating (ℓ_0, c_0) by least
// squares (exact: the errors are linear in them), which overfits short series: on the M3
// series every 10th, each forecasting its last h training points from the rest (test data not
// read), mean MASE 1.486 with backcasting against 1.715 with estimated states (yearly 2.99
// against 4.00; PROJECT-NOTES.md). σ̂² = SSE / (n − 2). Needs n >= 6.
type cesModel struct{ spec Spec }

func (cesModel) Family() string      { return FamilyCES }
func (cesModel) MinLength(m int) int { return cesMinLength }

func (cm cesModel) Fit(y []float64, m int) (Fitted, error) {
	n := len(y)
	if n < cesMinLength {
		return nil, tooShort(FamilyCES, n, cesMinLength)
	}
	if err := checkFinite(FamilyCES, y); err != nil {
		return nil, err
	}
	adj, x := adjustSeason(y, seasonFor(cm.spec, m))
	k := min(10, n)
	var start float64
	for _, v := range x[:k] {
		start += v
	}
	start /= float64(k)
	sse := func(p []float64) float64 {
		if !cesStable(p[0], p[1]) {
			return math.Inf(1)
		}
		_, _, s := cesBackcast(x, p[0], p[1], start)
		return s
	}
	var work neldermead.Work
	step := []float64{cesStep, cesStep}
	res := neldermead.Minimize(sse, []float64{cesStart0, cesStart1}, step, cesBudget, 1e-10, &work)
	if res.Status == neldermead.NoFiniteSeed {
		return nil, fmt.Errorf("models: %s: no finite likelihood at the starting values", FamilyCES)
	}
	res = neldermead.Minimize(sse, append([]float64(nil), res.X...), step, cesBudget, 1e-10, &work)
	a0, a1 := res.X[0], res.X[1]
	l0, c0, _ := cesBackcast(x, a0, a1, start)
	f := &cesFit{seasonAdjustment: adj, name: cm.spec.DisplayName(), a0: a0, a1: a1, l0: l0, c0: c0}
	f.filter(y)
	return f, nil
}

// cesStable reports whether the discount matrix D = F − g w' = [1 − α0 + α1, −(1 − α1);
// 1 − α0 − α1, 1 − α0] has both eigenvalues strictly inside the unit circle, by the Jury
// conditions on its characteristic polynomial λ² − tr λ + det: |det| < 1 and |tr| < 1 + det.
func cesStable(a0, a1 float64) bool {
	tr := 2 - 2*a0 + a1
	det := (1-a0)*(2-a0) + a1*a1 - a1
	return math.Abs(det) < 1 && math.Abs(tr) < 1+det
}

// cesFit is a fitted CES.
type cesFit struct {
	seasonAdjustment
	name       string
	a0, a1     float64
	l0, c0     float64
	n          int
	level, pot float64 // ℓ_n, c_n
	sigma2     float64
	fitted     []float64
}

// filter runs the model over y (adjusted by the fit's indices) from the initial states and
// sets n, the final states, the one-step fits and σ̂².
func (f *cesFit) filter(y []float64) {
	f.n = len(y)
	f.fitted = make([]float64, f.n)
	l, c := f.l0, f.c0
	var sse float64
	for t, v := range y {
		s := f.index(t)
		e := v/s - l
		sse += e * e
		f.fitted[t] = l * s
		l, c = l-(1-f.a1)*c+(f.a0-f.a1)*e, l+(1-f.a0)*c+(f.a0+f.a1)*e
	}
	f.level, f.pot = l, c
	f.sigma2 = sse / float64(f.n-2)
}

// Update carries the fit forward to y, a longer history of which the fitted one is a prefix
// (backtest.Updater): the smoothing weights, initial states and seasonal indices stay, the
// states are filtered over y and σ̂² is recomputed.
func (f *cesFit) Update(y []float64) (Fitted, error) {
	if len(y) < f.n {
		return nil, fmt.Errorf("models: %s: update needs at least the %d fitted observations, got %d", FamilyCES, f.n, len(y))
	}
	if err := checkFinite(FamilyCES, y); err != nil {
		return nil, err
	}
	g := *f
	g.filter(y)
	return &g, nil
}

func (f *cesFit) Name() string { return f.label(f.name) }

// Params returns "alpha0", "alpha1" (the complex smoothing weight α0 + iα1), "l0", "c0" (initial
// states), "level", "potential" (ℓ_n, c_n), "sigma2" (on the adjusted scale), "seasonal" (1 or 0)
// and "index<j>" for each seasonal index when seasonal.
func (f *cesFit) Params() map[string]float64 {
	p := map[string]float64{"alpha0": f.a0, "alpha1": f.a1, "l0": f.l0, "c0": f.c0,
		"level": f.level, "potential": f.pot, "sigma2": f.sigma2}
	addSeasonParams(p, f.idx)
	return p
}

// InSample returns the one-step fits ℓ_{t−1} · S_{t mod m}.
func (f *cesFit) InSample() []float64 { return append([]float64(nil), f.fitted...) }

// Forecast returns w'F^{h−1}v_n and the Gaussian band of the linear innovations model, times
// the seasonal index.
func (f *cesFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	buf := make([]float64, 2*h)
	mean, se := buf[:h:h], buf[h:]
	l, c := f.level, f.pot
	u0, u1 := f.a0-f.a1, f.a0+f.a1 // F^{j−1} g
	var acc float64
	sigma := math.Sqrt(f.sigma2)
	for k := range mean {
		s := f.index(f.n + k)
		mean[k] = l * s
		se[k] = s * sigma * math.Sqrt(1+acc)
		l, c = l-(1-f.a1)*c, l+(1-f.a0)*c
		acc += u0 * u0
		u0, u1 = u0-(1-f.a1)*u1, u0+(1-f.a0)*u1
	}
	return Forecast{Mean: mean, Levels: copyLevels(levels), Quantiles: gaussianBands(mean, se, levels, zQuantile)}
}

// cesBackcast returns the initial states (ℓ_0, c_0) found by backcasting for fixed (α0, α1),
// and the SSE of the one-step errors filtered forward from them: from s = (start, start/α0),
// the filter runs over x forward and then backward (x_n first) twice, the end states being
// the initial ones.
func cesBackcast(x []float64, a0, a1, start float64) (l0, c0, sse float64) {
	l, c := start, start/a0
	step := func(v float64) {
		e := v - l
		sse += e * e
		l, c = l-(1-a1)*c+(a0-a1)*e, l+(1-a0)*c+(a0+a1)*e
	}
	for range cesBackcasts {
		for _, v := range x {
			step(v)
		}
		for i := len(x) - 1; i >= 0; i-- {
			step(x[i])
		}
	}
	l0, c0, sse = l, c, 0
	for _, v := range x {
		step(v)
	}
	return l0, c0, sse
}
