package models

import (
	"fmt"
	"math"
)

func init() {
	Register(FamilyCroston, func(s Spec) (Model, error) { return newIntermittent(s, FamilyCroston, kindCroston) })
	Register(FamilySBA, func(s Spec) (Model, error) { return newIntermittent(s, FamilySBA, kindSBA) })
	Register(FamilyTSB, func(s Spec) (Model, error) { return newIntermittent(s, FamilyTSB, kindTSB) })
}

type intermittentKind uint8

const (
	kindCroston intermittentKind = iota
	kindSBA
	kindTSB
)

// Weight grid for estimated smoothing weights: 0.05, 0.10, ..., 0.50 for each weight, searched
// jointly (at most 100 passes over the series). Syntetos & Boylan (2005) study 0.05-0.20 for
// Croston-type methods; the range is widened to 0.5 so that fast-changing series can be followed
// (common practice; larger weights rarely help on intermittent data).
const (
	weightGridStep  = 0.05
	weightGridSize  = 10
	defaultWeight   = 0.1 // R forecast's croston default, used when no in-sample error exists
	intermittentMin = 2
)

// intermittentModel implements the three intermittent-demand families. With y_t >= 0, t
// counted from 1, and q_t the number of periods since the previous demand (or since the start,
// for the first one):
//
// Croston (1972, Operational Research Quarterly 23, 289-303): smooth the non-zero demand sizes
// z and the inter-demand intervals p separately, updating only when a demand occurs:
//
//	if y_t > 0:  ẑ ← ẑ + α (y_t − ẑ),  p̂ ← p̂ + β (q_t − p̂)      (unchanged when y_t = 0)
//	forecast:    ŷ = ẑ / p̂, the same for every horizon
//
// SBA, the Syntetos-Boylan approximation (Syntetos & Boylan 2005, International Journal of
// Forecasting 21, 303-314): Croston's ratio is biased upwards by about β/2 · ẑ/p̂; the corrected
// forecast is
//
//	ŷ = (1 − β/2) ẑ / p̂
//
// with β the interval weight (the paper uses one weight for both, so this is (1 − α/2) there).
//
// TSB (Teunter, Syntetos & Babai 2011, European Journal of Operational Research 214, 606-615):
// replace the interval by the demand probability d̂, updated every period, so the forecast decays
// towards zero when demand stops (obsolescence):
//
//	if y_t > 0:  d̂ ← d̂ + β (1 − d̂),  ẑ ← ẑ + α (y_t − ẑ)
//	else:        d̂ ← d̂ + β (0 − d̂) = (1 − β) d̂
//	forecast:    ŷ = d̂ · ẑ
//
// Start-up (as R forecast 8.20's croston, whose ses(initial = "simple") starts each smoother at
// its first value): at the first demand, at period t₁, ẑ = y_{t₁}, p̂ = t₁ (Croston, SBA) or
// d̂ = 1/t₁ (TSB, our choice consistent with the interval start); updates begin at the next
// period. Before the first demand the one-step fit is 0 (NaN at t = 1), and a series with no
// demand at all forecasts 0.
//
// Weights: α (size) = Spec.Smoothing.Alpha, β (interval or probability) = Spec.Smoothing.Beta;
// a zero weight is estimated by minimising the in-sample one-step MSE (periods after the first
// demand) over the grid 0.05, 0.10, ..., 0.50, jointly when both are estimated. With no in-sample
// error to minimise (fewer than two periods after the first demand) the weight is 0.1.
//
// There is no predictive distribution: Forecast returns Quantiles == nil, for the selection
// layer to fill from empirical backtest errors. Negative values are an error. Needs n >= 2.
type intermittentModel struct {
	spec        Spec
	family      string
	kind        intermittentKind
	alpha, beta float64 // fixed weights; 0 means estimate
}

func newIntermittent(s Spec, family string, kind intermittentKind) (Model, error) {
	im := intermittentModel{spec: s, family: family, kind: kind}
	if s.Smoothing != nil {
		for _, w := range []struct {
			field string
			v     float64
		}{{"smoothing.alpha", s.Smoothing.Alpha}, {"smoothing.beta", s.Smoothing.Beta}} {
			if !(w.v >= 0 && w.v <= 1) {
				return nil, fmt.Errorf("models: %s: %s must be in (0,1] (0 = estimate), got %v", s.DisplayName(), w.field, w.v)
			}
		}
		im.alpha, im.beta = s.Smoothing.Alpha, s.Smoothing.Beta
	}
	return im, nil
}

func (im intermittentModel) Family() string   { return im.family }
func (intermittentModel) MinLength(m int) int { return intermittentMin }

func (im intermittentModel) Fit(y []float64, m int) (Fitted, error) {
	n := len(y)
	if n < intermittentMin {
		return nil, tooShort(im.family, n, intermittentMin)
	}
	if err := checkFinite(im.family, y); err != nil {
		return nil, err
	}
	for i, v := range y {
		if v < 0 {
			return nil, fmt.Errorf("models: %s: y[%d] = %v is negative; intermittent-demand models need non-negative demand", im.family, i, v)
		}
	}
	a, b := im.alpha, im.beta
	if a == 0 || b == 0 {
		a, b = im.searchWeights(y)
	}
	f := &intermittentFit{name: im.spec.DisplayName(), kind: im.kind, alpha: a, beta: b, fitted: make([]float64, n)}
	st, sse, count := intermittentPass(y, im.kind, a, b, f.fitted)
	f.state = st
	f.mse = math.NaN()
	if count > 0 {
		f.mse = sse / float64(count)
	}
	return f, nil
}

// searchWeights returns the grid weights with the least in-sample SSE; fixed weights stay.
func (im intermittentModel) searchWeights(y []float64) (a, b float64) {
	aGrid, bGrid := weightGridSize, weightGridSize
	if im.alpha != 0 {
		aGrid = 1
	}
	if im.beta != 0 {
		bGrid = 1
	}
	best := math.Inf(1)
	a, b = defaultWeight, defaultWeight
	if im.alpha != 0 {
		a = im.alpha
	}
	if im.beta != 0 {
		b = im.beta
	}
	for i := range aGrid {
		ai := im.alpha
		if ai == 0 {
			ai = weightGridStep * float64(i+1)
		}
		for j := range bGrid {
			bj := im.beta
			if bj == 0 {
				bj = weightGridStep * float64(j+1)
			}
			_, sse, count := intermittentPass(y, im.kind, ai, bj, nil)
			if count == 0 {
				return a, b // no in-sample error: keep the default
			}
			if sse < best {
				best, a, b = sse, ai, bj
			}
		}
	}
	return a, b
}

// intermittentState is the smoother state after the last observation.
type intermittentState struct {
	z, p    float64 // demand size; interval (Croston, SBA) or probability (TSB)
	started bool    // a demand has occurred
}

// value is the one-step (and every-step) forecast of the state.
func (s intermittentState) value(kind intermittentKind, beta float64) float64 {
	switch {
	case !s.started:
		return 0
	case kind == kindTSB:
		return s.p * s.z
	case kind == kindSBA:
		return (1 - beta/2) * s.z / s.p
	}
	return s.z / s.p
}

// intermittentPass runs the recursion once with weights a (size) and b (interval or
// probability). When fitted is non-nil it receives the one-step forecasts. It returns the final
// state and the SSE over the count periods after the first demand. It does not allocate.
func intermittentPass(y []float64, kind intermittentKind, a, b float64, fitted []float64) (intermittentState, float64, int) {
	var st intermittentState
	var sse float64
	count, q := 0, 0.0
	for t, v := range y {
		fc := st.value(kind, b)
		if st.started {
			e := v - fc
			sse += e * e
			count++
		}
		if fitted != nil {
			if t == 0 {
				fc = math.NaN()
			}
			fitted[t] = fc
		}
		q++
		switch {
		case !st.started:
			if v > 0 {
				st.started, st.z = true, v
				if kind == kindTSB {
					st.p = 1 / q
				} else {
					st.p = q
				}
				q = 0
			}
		case kind == kindTSB:
			if v > 0 {
				st.p += b * (1 - st.p)
				st.z += a * (v - st.z)
			} else {
				st.p -= b * st.p
			}
		case v > 0:
			st.z += a * (v - st.z)
			st.p += b * (q - st.p)
			q = 0
		}
	}
	return st, sse, count
}

type intermittentFit struct {
	name        string
	kind        intermittentKind
	alpha, beta float64
	state       intermittentState
	mse         float64
	fitted      []float64
}

func (f *intermittentFit) Name() string { return f.name }

// Params returns "alpha" (size weight), "beta" (interval or probability weight), "demand" (ẑ),
// "interval" (p̂, Croston and SBA) or "probability" (d̂, TSB), and "mse" (in-sample one-step MSE
// after the first demand; NaN when there is none). Before any demand the state is 0.
func (f *intermittentFit) Params() map[string]float64 {
	p := map[string]float64{"alpha": f.alpha, "beta": f.beta, "demand": f.state.z, "mse": f.mse}
	if f.kind == kindTSB {
		p["probability"] = f.state.p
	} else {
		p["interval"] = f.state.p
	}
	return p
}

// InSample returns the one-step forecasts (NaN at t = 0, 0 before the first demand).
func (f *intermittentFit) InSample() []float64 { return append([]float64(nil), f.fitted...) }

// Forecast returns the flat forecast; Quantiles is nil (no predictive distribution).
func (f *intermittentFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	mean := make([]float64, h)
	v := f.state.value(f.kind, f.beta)
	for k := range mean {
		mean[k] = v
	}
	return Forecast{Mean: mean, Levels: copyLevels(levels)}
}
