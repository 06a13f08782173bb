package backtest

import (
	"errors"
	"fmt"
	"math"

	"almanac.dev/almanac/trainer/models"
)

// ErrNoOrigin is returned by NewPlan when the series is too short for even one origin.
var ErrNoOrigin = errors.New("backtest: series too short for a rolling origin")

// Plan is a rolling-origin evaluation design (Tashman 2000, "Out-of-sample tests of forecasting
// accuracy: an analysis and review", IJF 16, section 3: rolling origin, non-updated fits
// re-estimated at each origin). Origins[i] is the number of observations the model is fitted
// on at origin i, latest first; every origin forecasts the next Horizon observations.
type Plan struct {
	Origins []int
	Horizon int
	// Update, when true, fits once at the earliest origin and, for fits that implement
	// Updater, re-runs that fit with its estimates fixed over the history up to each later
	// origin (Tashman 2000, section 3: "updating" rather than "recalibrating"); other fits are
	// re-estimated at every origin as usual.
	Update bool
}

// Updater is implemented by fitted models that can be carried forward to a longer history
// without re-estimating: Update(y) returns the model with the same estimates filtered over y,
// of which the fitted history is a prefix.
type Updater interface {
	Update(y []float64) (models.Fitted, error)
}

// NewPlan lays out up to k origins on a series of n observations for horizon h, step apart:
//
//	t_i = n − h' − i·step,  i = 0..k−1,  kept while t_i >= minTrain,
//	h'  = min(h, n − minTrain)
//
// so the latest origin's window ends at the last observation, and the horizon is shortened
// when the series cannot hold minTrain training points plus h test points. It returns
// ErrNoOrigin when h' < 1. NewPlan panics when h, k or step is below 1.
func NewPlan(n, h, k, step, minTrain int) (Plan, error) {
	if h < 1 || k < 1 || step < 1 {
		panic(fmt.Sprintf("backtest: NewPlan needs h, k, step >= 1 (got %d, %d, %d)", h, k, step))
	}
	if minTrain < 1 {
		minTrain = 1
	}
	hh := min(h, n-minTrain)
	if hh < 1 {
		return Plan{}, ErrNoOrigin
	}
	p := Plan{Horizon: hh}
	for i := 0; i < k; i++ {
		t := n - hh - i*step
		if t < minTrain {
			break
		}
		p.Origins = append(p.Origins, t)
	}
	return p, nil
}

// Forecasts runs the plan for one model on y with season length m: at each origin t the model
// is fitted on y[:t] (or, with p.Update, carried forward from the earliest origin's fit) and
// forecasts Horizon steps. out[i] is origin i's mean forecast. A failed
// fit or a non-finite forecast at any origin is an error naming the origin.
func Forecasts(mod models.Model, y []float64, m int, p Plan) ([][]float64, error) {
	return ForecastsWith(mod, y, m, p, nil)
}

// ForecastsWith is Forecasts for a model that may use dates and covariates: at each origin it
// fits through models.FitWith with in, whose Start is the period of y[0]. The model sees y[:t]
// only; covariates stay whole, as known future values (see models.Inputs). With in == nil it is
// Forecasts.
func ForecastsWith(mod models.Model, y []float64, m int, p Plan, in *models.Inputs) ([][]float64, error) {
	if in != nil {
		c := *in
		c.Horizon = p.Horizon
		in = &c
	}
	out := make([][]float64, len(p.Origins))
	var first Updater // the fit at the earliest origin, when p.Update and it can be updated
	for i := len(p.Origins) - 1; i >= 0; i-- {
		t := p.Origins[i]
		var fit models.Fitted
		var err error
		if first != nil {
			fit, err = first.Update(y[:t])
		} else {
			fit, err = models.FitWith(mod, y[:t], m, in)
			if u, ok := fit.(Updater); ok && err == nil && p.Update {
				first = u
			}
		}
		if err != nil {
			return nil, fmt.Errorf("origin %d (fitted on %d observations): %w", i, t, err)
		}
		f := fit.Forecast(p.Horizon, nil).Mean
		if len(f) != p.Horizon {
			return nil, fmt.Errorf("origin %d: model returned %d steps, want %d", i, len(f), p.Horizon)
		}
		for k, v := range f {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("origin %d: forecast step %d is %v", i, k+1, v)
			}
		}
		out[i] = f
	}
	return out, nil
}

// Assessment is a scored rolling-origin run.
type Assessment struct {
	// Overall is the mean over origins of Score at each origin (origins where the metric is
	// undefined are left out; NaN when all are).
	Overall float64
	// Steps[k] is the metric over all origins' step k+1 forecasts (see Assess).
	Steps []float64
	// Errors[i][k] is actual minus forecast at origin i, step k+1.
	Errors [][]float64
	// Held[i] is the number of observations after origin i (len(y) − Origins[i]): origin i's
	// step k+1 is the observation Held[i] − k − 1 periods before the last one, which aligns the
	// errors of series that end in the same period whatever their starts.
	Held []int
}

// Assess scores the forecasts of one plan against y. At origin i the in-sample history for
// the scaled metrics is y[:Origins[i]], differenced at lag ScaleLag(len(y), m) for every
// origin. Steps[k] pools the step-(k+1) points of every origin under the metric's own
// aggregation: a mean of |e|/scale_i for MASE, sqrt of the mean of e²/scale²_i for RMSSE,
// 100 Σ|e|/Σ|y| for WAPE, and the metric's formula for the others. Assess panics when
// forecasts does not match the plan.
func Assess(metric Metric, y []float64, m int, p Plan, forecasts [][]float64) Assessment {
	if len(forecasts) != len(p.Origins) {
		panic("backtest: Assess needs one forecast per origin")
	}
	m = ScaleLag(len(y), m)
	a := Assessment{Errors: make([][]float64, len(p.Origins)), Held: make([]int, len(p.Origins))}
	acts := make([][]float64, len(p.Origins))
	scale1 := make([]float64, len(p.Origins))
	scale2 := make([]float64, len(p.Origins))
	for i, t := range p.Origins {
		if len(forecasts[i]) != p.Horizon {
			panic("backtest: Assess forecast length differs from the plan horizon")
		}
		act := y[t : t+p.Horizon]
		acts[i] = act
		e := make([]float64, p.Horizon)
		for k := range e {
			e[k] = act[k] - forecasts[i][k]
		}
		a.Errors[i] = e
		a.Held[i] = len(y) - t
		scale1[i] = NaiveScale(y[:t], m, 1)
		scale2[i] = NaiveScale(y[:t], m, 2)
	}
	a.Overall, a.Steps = scoreOrigins(metric, acts, forecasts, scale1, scale2, p.Horizon)
	return a
}

// scoreOrigins is Assess's scoring of the forecasts fcs[i] of actuals acts[i] (h steps each)
// at origins whose in-sample scales are scale1[i] (MASE) and scale2[i] (RMSSE): Overall is the
// mean over origins of each origin's score (NaN ones left out), Steps[k] pools step k+1 of
// every origin (see Assess).
func scoreOrigins(metric Metric, acts, fcs [][]float64, scale1, scale2 []float64, h int) (float64, []float64) {
	sum, cnt := 0.0, 0
	for i := range acts {
		if s := scaledScore(metric, acts[i], fcs[i], scale1[i], scale2[i]); !math.IsNaN(s) {
			sum += s
			cnt++
		}
	}
	overall := math.NaN()
	if cnt > 0 {
		overall = sum / float64(cnt)
	}
	steps := make([]float64, h)
	ys := make([]float64, len(acts))
	fs := make([]float64, len(acts))
	for k := 0; k < h; k++ {
		for i := range acts {
			ys[i] = acts[i][k]
			fs[i] = fcs[i][k]
		}
		steps[k] = pooled(metric, ys, fs, scale1, scale2)
	}
	return overall, steps
}

// OriginRecord is one origin of a scored rolling-origin run, kept so that another forecast of
// the same targets can be scored exactly as Assess scored the first: hierarchy reconciliation
// scores its reconciled forecast, actual − ẽ, this way (trainer/pipeline).
type OriginRecord struct {
	// Held is the number of observations after the origin (Assessment.Held).
	Held int
	// Actuals are the observations the origin forecast, by step; Errors actual − forecast.
	Actuals, Errors []float64
	// Scale is the metric's in-sample scale at the origin, NaiveScale(y[:t], ScaleLag(len(y),
	// m), p) with p = 1 for MASE and 2 for RMSSE; NaN for the other metrics.
	Scale float64
	// BandScale is NaiveScale(y[:t], ScaleLag(len(y), m), 1) whatever the metric: the origin's
	// scale in QuantilesOnBacktest.
	BandScale float64
}

// Records returns the origins of an Assessment a that Assess(metric, y, m, ...) made, for
// AssessRecords.
func Records(metric Metric, y []float64, m int, a Assessment) []OriginRecord {
	m = ScaleLag(len(y), m)
	out := make([]OriginRecord, len(a.Errors))
	for i, e := range a.Errors {
		t := len(y) - a.Held[i]
		r := OriginRecord{Held: a.Held[i], Actuals: y[t : t+len(e)], Errors: e, Scale: math.NaN(), BandScale: NaiveScale(y[:t], m, 1)}
		switch metric {
		case MASE:
			r.Scale = r.BandScale
		case RMSSE:
			r.Scale = NaiveScale(y[:t], m, 2)
		}
		out[i] = r
	}
	return out
}

// AssessRecords scores, as Assess does (Overall and Steps), the forecasts actual − errs[i][k]
// of the recorded origins; errs nil scores the records' own errors, which gives back Assess's
// figures (to rounding: the forecast is rebuilt as actual − error). Every origin must have as
// many steps as the first; AssessRecords panics otherwise.
func AssessRecords(metric Metric, recs []OriginRecord, errs [][]float64) (float64, []float64) {
	if len(recs) == 0 {
		return math.NaN(), nil
	}
	h := len(recs[0].Actuals)
	acts := make([][]float64, len(recs))
	fcs := make([][]float64, len(recs))
	scales := make([]float64, len(recs))
	for i, r := range recs {
		e := r.Errors
		if errs != nil {
			e = errs[i]
		}
		if len(r.Actuals) != h || len(e) != h {
			panic("backtest: AssessRecords needs the same steps at every origin")
		}
		acts[i], scales[i] = r.Actuals, r.Scale
		fcs[i] = make([]float64, h)
		for k := range e {
			fcs[i][k] = r.Actuals[k] - e[k]
		}
	}
	return scoreOrigins(metric, acts, fcs, scales, scales, h)
}

// pooled scores points that come from different origins, each with its own in-sample scales.
func pooled(metric Metric, y, f, scale1, scale2 []float64) float64 {
	switch metric {
	case MASE, RMSSE:
		s, n := 0.0, 0
		for i := range y {
			e := math.Abs(y[i] - f[i])
			if metric == MASE && scale1[i] > 0 {
				s += e / scale1[i]
				n++
			} else if metric == RMSSE && scale2[i] > 0 {
				s += e * e / scale2[i]
				n++
			}
		}
		if n == 0 {
			return math.NaN()
		}
		if metric == RMSSE {
			return math.Sqrt(s / float64(n))
		}
		return s / float64(n)
	}
	return Score(metric, y, f, nil, 1)
}
