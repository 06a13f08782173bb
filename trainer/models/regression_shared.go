package models

import (
	"fmt"
	"math"
	"slices"

	"almanac.dev/almanac/trainer/features"
)

// SharedFamilies lists the families FitShared can fit across series: every regression family.
var SharedFamilies = RegressionFamilies

// CanShare reports whether family is in SharedFamilies.
func CanShare(family string) bool { return slices.Contains(SharedFamilies, family) }

// Shared is a regression member fitted on several series at once (a global model; Montero-Manso
// & Hyndman 2021, "Principles and algorithms for forecasting groups of time series: locality and
// globality", IJF 37, from memory). Each series' values are divided by its scale, the mean
// absolute value of its history (1 when that is 0), so that series of different sizes share
// one set of weights; target lags and rolling statistics are computed on the scaled values,
// covariates and calendar features are left as they are, and forecasts are multiplied back.
// Mean absolute scaling is chosen over the MASE scale because it is defined for constant and
// intermittent histories, where the in-sample naive error can be 0 (common practice).
type Shared struct {
	r      *regression
	cfg    features.Config
	steps  []directStep // one per step, fitted on every usable series' rows
	sets   []*features.Set
	ys     [][]float64 // scaled histories (nil for a series left out)
	scales []float64
	errs   []error // why a series was left out
	// spread[i][k] is the RMS of series i's training residuals of the step-(k+1) model and
	// shape[i] their standardized values (residual / spread) pooled over the steps, as sorted
	// order statistics (at most shapePoints): the member's own error distribution (Quantiles).
	spread [][]float64
	shape  [][]float64
}

// shapePoints caps the order statistics kept per series for Shared.Quantiles.
const shapePoints = 401

// FitShared fits spec (a Ridge or Lasso member) on the histories ys with their Inputs, all of
// one frequency, for steps 1..horizon. A series whose features cannot be generated (a declared
// covariate it lacks, a missing covariate value, too short for the lags) is left out and its
// reason kept for Forecast; the error is for the whole fit (no series usable, bad spec).
func FitShared(spec Spec, m int, ys [][]float64, ins []Inputs, horizon int) (*Shared, error) {
	mod, err := New(spec)
	if err != nil {
		return nil, err
	}
	r, ok := mod.(*regression)
	if !ok {
		return nil, fmt.Errorf("models: %s: family %s cannot be fitted across series", spec.DisplayName(), spec.Family)
	}
	if len(ys) != len(ins) || horizon < 1 {
		panic("models: FitShared needs one Inputs per series and horizon >= 1")
	}
	s := &Shared{r: r, sets: make([]*features.Set, len(ys)), ys: make([][]float64, len(ys)), scales: make([]float64, len(ys)), errs: make([]error, len(ys))}
	var ref *features.Set
	minLen := r.MinLength(m)
	for i, y := range ys {
		if len(ys[i]) < minLen {
			s.errs[i] = fmt.Errorf("%w (needs %d observations, has %d)", ErrTooShort, minLen, len(y))
			continue
		}
		cfg := r.config(ins[i].Freq)
		set, err := features.NewSet(cfg, features.Source{Key: ins[i].Key, Start: ins[i].Start, Freq: ins[i].Freq, Covariates: ins[i].Covariates})
		if err != nil {
			s.errs[i] = err
			continue
		}
		if ref != nil && ins[i].Freq != ins[0].Freq {
			panic("models: FitShared series of different frequencies")
		}
		scale := 0.0
		for _, v := range y {
			scale += math.Abs(v)
		}
		scale /= float64(len(y))
		if scale == 0 || math.IsNaN(scale) {
			scale = 1
		}
		sy := make([]float64, len(y))
		for k, v := range y {
			sy[k] = v / scale
		}
		s.cfg, s.sets[i], s.ys[i], s.scales[i] = cfg, set, sy, scale
		if ref == nil {
			ref = set
		}
	}
	for h := 1; h <= horizon; h++ {
		var ys2 [][]float64
		var sets []*features.Set
		for i := range ys {
			if s.ys[i] != nil {
				ys2, sets = append(ys2, s.ys[i]), append(sets, s.sets[i])
			}
		}
		if len(ys2) == 0 {
			return nil, fmt.Errorf("models: %s: no series can be used across the shard (first reason: %v)", spec.DisplayName(), firstErr(s.errs))
		}
		st, err := fitDirectStepDropping(r, s.cfg.Selection, ref, ys2, sets, h, func(k int, err error) {
			// map the k-th usable series back and leave it out
			for i, n := 0, -1; i < len(ys); i++ {
				if s.ys[i] != nil {
					n++
					if n == k {
						s.errs[i], s.ys[i] = err, nil
						return
					}
				}
			}
		})
		if err != nil {
			return nil, fmt.Errorf("models: %s across the shard, step %d: %w", spec.DisplayName(), h, err)
		}
		s.steps = append(s.steps, st)
	}
	s.residualSpread(ref)
	return s, nil
}

// residualSpread fills spread and shape from every usable series' training rows: for each step
// model, the residuals target − prediction (scaled units) at every origin where its kept
// columns are defined. A model of a few dozen weights fitted on every series' rows barely
// follows one series' noise, so these residuals stand for its forecast errors; they are the
// direct strategy's own error estimate per step (common practice for direct multi-step
// models). A series with fewer than two residuals at some step gets no spread (nil). Linear
// learners only (Ridge, Lasso): boosted trees can follow their training rows far more closely
// than a few dozen weights, so a pooled GradientBoosting member keeps the bands of its
// backtest errors.
func (s *Shared) residualSpread(ref *features.Set) {
	s.spread, s.shape = make([][]float64, len(s.ys)), make([][]float64, len(s.ys))
	for _, st := range s.steps {
		if st.tree != nil {
			return
		}
	}
	for i, y := range s.ys {
		if y == nil {
			continue
		}
		sp := make([]float64, len(s.steps))
		var pool []float64
		ok := true
		for k, st := range s.steps {
			h := k + 1
			from, to := ref.FirstOrigin(st.cols, h), len(y)-h
			if to-from+1 < 2 {
				ok = false
				break
			}
			X, t, err := s.sets[i].Matrix(y, st.cols, h, from, to)
			if err != nil {
				ok = false
				break
			}
			res := make([]float64, len(t))
			ss := 0.0
			for r := range t {
				res[r] = t[r] - st.predict(X.RawRowView(r))
				ss += res[r] * res[r]
			}
			sp[k] = math.Sqrt(ss / float64(len(t)))
			if sp[k] > 0 {
				for _, e := range res {
					pool = append(pool, e/sp[k])
				}
			}
		}
		if !ok || len(pool) == 0 {
			continue
		}
		slices.Sort(pool)
		if len(pool) > shapePoints {
			kept := make([]float64, shapePoints)
			for j := range kept {
				kept[j] = quantileSorted(pool, float64(j)/float64(shapePoints-1))
			}
			pool = kept
		}
		s.spread[i], s.shape[i] = sp, pool
	}
}

// Quantiles returns series i's quantiles at levels for steps 1..h around mean (its Forecast):
// q_jk = mean_k + scale_i · spread_ik · c_i(p_j), c_i the type-7 sample quantile (Hyndman & Fan
// 1996) of the series' standardized training residuals pooled over the steps. Nil when the
// series has no residual spread (too few rows) or there are no levels.
func (s *Shared) Quantiles(i int, mean []float64, levels []float64) [][]float64 {
	if len(levels) == 0 || i >= len(s.spread) || s.spread[i] == nil || len(mean) > len(s.spread[i]) {
		return nil
	}
	out := make([][]float64, len(levels))
	for j, p := range levels {
		c := quantileSorted(s.shape[i], p)
		out[j] = make([]float64, len(mean))
		for k, m := range mean {
			out[j][k] = m + s.scales[i]*s.spread[i][k]*c
		}
	}
	return out
}

// fitDirectStepDropping is fitDirectStep that first drops the series whose rows cannot be built
// (reported through drop with the series' position among ys), so one bad series never sinks
// the shard's model.
func fitDirectStepDropping(r *regression, sel features.Selection, ref *features.Set, ys [][]float64, sets []*features.Set, h int, drop func(int, error)) (directStep, error) {
	cols := ref.Columns(h)
	o0 := ref.FirstOrigin(cols, h)
	var keepY [][]float64
	var keepS []*features.Set
	for k, y := range ys {
		last := len(y) - h
		if last >= o0 {
			if _, _, err := sets[k].Matrix(y, cols, h, o0, last); err != nil {
				drop(k, err)
				continue
			}
		}
		keepY, keepS = append(keepY, y), append(keepS, sets[k])
	}
	return fitDirectStep(r, sel, ref, keepY, keepS, h)
}

func firstErr(errs []error) error {
	for _, e := range errs {
		if e != nil {
			return e
		}
	}
	return nil
}

// Forecast returns series i's forecast for steps 1..h from the end of its history (h at most
// the fitted horizon), or the reason the series was left out.
func (s *Shared) Forecast(i, h int) ([]float64, error) {
	if s.ys[i] == nil {
		return nil, s.errs[i]
	}
	if h > len(s.steps) {
		panic("models: Shared.Forecast beyond the fitted horizon")
	}
	out := make([]float64, h)
	for k := 0; k < h; k++ {
		st := s.steps[k]
		row := make([]float64, len(st.cols))
		if err := s.sets[i].Fill(row, st.cols, s.ys[i], len(s.ys[i]), k+1); err != nil {
			return nil, err
		}
		out[k] = st.predict(row) * s.scales[i]
	}
	return out, nil
}

// Features lists every feature some step kept, in generation order.
func (s *Shared) Features() []string {
	for _, set := range s.sets {
		if set != nil {
			return keptNames(s.steps, set.Names())
		}
	}
	return nil
}

// Params gives the step-1 model's intercept, penalty and weights (on scaled values).
func (s *Shared) Params() map[string]float64 {
	for _, set := range s.sets {
		if set != nil {
			return stepParams(s.steps[0], set.Names())
		}
	}
	return nil
}

// Steps is the fitted horizon.
func (s *Shared) Steps() int { return len(s.steps) }
