package models

import (
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/gonum/mat"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/learn"
	"almanac.dev/almanac/trainer/learn/boost"
	"almanac.dev/almanac/trainer/series"
)

// Regression families: learners on generated features (trainer/features).
const (
	FamilyRidge = "Ridge"
	FamilyLasso = "Lasso"
)

// MinRegressionRows is the fewest training rows a step-ahead regression model is fitted on;
// MinLength adds it to the longest lag or window of the feature set.
const MinRegressionRows = 10

// ridgeGrid is the ridge penalty search, as multiples of the row count n on standardised
// columns (alpha = n·λ, so λ is the penalty per row): λ from 1e-3 to 10. ridgeFallback is λ
// when the rows are too few for a holdout.
var ridgeGrid = []float64{1e-3, 3e-3, 1e-2, 3e-2, 0.1, 0.3, 1, 3, 10}

const ridgeFallback = 0.1

// lassoFallback is the lasso penalty, as a fraction of alpha_max, when the rows are too few
// for the backtest choice.
const lassoFallback = 0.1

// RegressionFamilies are the members that forecast from features (target lags, calendar,
// events and the declared covariates, trainer/features) rather than from the series' history
// alone; they are the only members that see planned values such as a promotion calendar.
var RegressionFamilies = []string{FamilyRidge, FamilyLasso, FamilyGradientBoosting}

// ReadsFeatures reports whether family is in RegressionFamilies.
func ReadsFeatures(family string) bool { return slices.Contains(RegressionFamilies, family) }

func init() {
	for _, f := range []string{FamilyRidge, FamilyLasso} {
		Register(f, func(s Spec) (Model, error) { return newRegression(s) })
	}
}

// regression is a Ridge or Lasso member.
//
// Direct multi-horizon strategy: one model per forecast step h = 1..H, each fitted on the rows
// (origin o, step h) of features.Set, predicting y[o+h−1] from what is known at o (Ben Taieb,
// Bontempi, Atiya & Sorjamaa 2012, Expert Systems with Applications 39; Ben Taieb & Hyndman
// 2014, "A gradient boosting approach to the Kaggle load forecasting competition", IJF 30, from
// memory). Chosen over one model with the horizon as a feature because a linear model cannot
// let the weight of a lag or of the recent level change with the step through an additive
// horizon term; H fits of a linear model on a few hundred rows are cheap.
//
// Per step: features.Choose (filter, then the lasso path with the penalty chosen on the latest
// rows, capped at MaxFeatures), then the learner on the kept columns standardised with the
// training rows' own means and deviations (learn.Scaler): ridge with its penalty chosen on the
// same holdout from ridgeGrid (or Spec.Regression.Penalty), or the lasso at the chosen penalty
// (or at the fixed Penalty, after the filter). Coefficients are mapped back to the original
// units. A per-series fit has no model distribution: selection fills its quantiles from
// backtest errors. A pooled Ridge or Lasso gives its own from each series' training residuals
// of the step models (Shared.Quantiles).
type regression struct {
	family  string
	cfg     *features.Config // nil: features.Defaults (PooledDefaults when pooled) for the series' frequency
	pooled  bool             // Spec.Regression.AcrossShard
	penalty float64
	boost   BoostingOptions // GradientBoosting's trees
}

func newRegression(s Spec) (Model, error) {
	r := &regression{family: s.Family, cfg: s.Features, boost: DefaultBoosting()}
	if s.Regression != nil {
		r.penalty, r.pooled = s.Regression.Penalty, s.Regression.AcrossShard
		if r.penalty < 0 || math.IsNaN(r.penalty) || math.IsInf(r.penalty, 0) {
			return nil, fmt.Errorf("models: %s: regression.penalty must be >= 0, got %v", s.DisplayName(), r.penalty)
		}
		if b := s.Regression.Boosting; b != nil {
			if s.Family != FamilyGradientBoosting {
				return nil, fmt.Errorf("models: %s: regression.boosting is only for family %s", s.DisplayName(), FamilyGradientBoosting)
			}
			if err := b.params().Validate(); err != nil {
				return nil, fmt.Errorf("models: %s: regression.boosting: %w", s.DisplayName(), err)
			}
			r.boost = *b
		}
	}
	if s.Features != nil {
		if err := s.Features.Validate(); err != nil {
			return nil, fmt.Errorf("models: %s: %w", s.DisplayName(), err)
		}
	}
	return r, nil
}

func (r *regression) Family() string { return r.family }

// MinLength is the longest target lag or rolling window of the feature set plus
// MinRegressionRows (the season length's usual frequency decides the defaults when no features
// are declared).
func (r *regression) MinLength(m int) int {
	cfg := r.config(frequencyOfSeason(m))
	reach := 0
	for _, l := range cfg.Lags {
		reach = max(reach, l)
	}
	for _, w := range cfg.Windows {
		reach = max(reach, w)
	}
	return reach + MinRegressionRows
}

func (r *regression) config(f series.Frequency) features.Config {
	if r.cfg != nil {
		return *r.cfg
	}
	if r.pooled {
		return features.PooledDefaults(f)
	}
	return features.Defaults(f)
}

// frequencyOfSeason is the frequency whose usual season length is m (yearly when none is).
func frequencyOfSeason(m int) series.Frequency {
	for _, f := range series.Frequencies {
		if f.SeasonLength() == m {
			return f
		}
	}
	return series.Yearly
}

// Fit fits without dates or covariates: the calendar, event, Fourier and covariate features are
// dropped and only target lags and rolling statistics remain. FitInputs is the real entry point.
func (r *regression) Fit(y []float64, m int) (Fitted, error) {
	f := frequencyOfSeason(m)
	c := r.config(f)
	c.Calendar, c.Events, c.Fourier, c.Covariates, c.CovariateLags = nil, nil, nil, nil, nil
	bare := *r
	bare.cfg = &c
	return bare.FitInputs(y, m, Inputs{Freq: f, Start: time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC)})
}

// FitInputs fits the step models 1..max(1, in.Horizon) and computes their forecasts, so a
// missing future covariate is reported here.
func (r *regression) FitInputs(y []float64, m int, in Inputs) (Fitted, error) {
	if n := r.MinLength(m); len(y) < n {
		return nil, fmt.Errorf("%w (needs %d observations, has %d)", ErrTooShort, n, len(y))
	}
	cfg := r.config(in.Freq)
	set, err := features.NewSet(cfg, features.Source{Key: in.Key, Start: in.Start, Freq: in.Freq, Covariates: in.Covariates})
	if err != nil {
		return nil, err
	}
	f := &regressionFit{r: r, cfg: cfg, set: set, y: y}
	for h := 1; h <= max(1, in.Horizon); h++ {
		if err := f.addStep(); err != nil {
			return nil, err
		}
	}
	return f, nil
}

// directStep is the fitted model of one forecast step: a linear predictor, or boosted trees
// when tree is set.
type directStep struct {
	cols    []int // kept columns, indexes into the feature set
	lin     learn.Linear
	tree    *boost.Model
	splits  []int // for trees: the columns some split uses (the recorded features)
	penalty float64
	mean    float64 // forecast from the origin len(y)
}

// predict evaluates the step model on a row of its kept columns.
func (st directStep) predict(row []float64) float64 {
	if st.tree != nil {
		return st.tree.Predict(row)
	}
	return st.lin.Predict(row)
}

type regressionFit struct {
	r     *regression
	cfg   features.Config
	set   *features.Set
	y     []float64
	steps []directStep
	err   error // first failure of a step fitted lazily by Forecast
}

// addStep fits the next step's model and its forecast from the end of the series.
func (f *regressionFit) addStep() error {
	h := len(f.steps) + 1
	st, err := fitDirectStep(f.r, f.cfg.Selection, f.set, [][]float64{f.y}, []*features.Set{f.set}, h)
	if err != nil {
		return fmt.Errorf("step %d: %w", h, err)
	}
	row := make([]float64, len(st.cols))
	if err := f.set.Fill(row, st.cols, f.y, len(f.y), h); err != nil {
		return err
	}
	st.mean = st.predict(row)
	f.steps = append(f.steps, st)
	return nil
}

// fitDirectStep fits step h on the rows of every (series, set) pair stacked in order; with one
// series it is the per-series model. Each series contributes its origins FirstOrigin..n−h; its
// latest rows form the validation part of the split (features.TimeSplit per series).
func fitDirectStep(r *regression, sel features.Selection, ref *features.Set, ys [][]float64, sets []*features.Set, h int) (directStep, error) {
	cols := ref.Columns(h)
	o0 := ref.FirstOrigin(cols, h)
	var blocks []*mat.Dense
	var target []float64
	var split features.Split
	rows := 0
	for i, y := range ys {
		last := len(y) - h
		if last-o0+1 < 1 {
			continue
		}
		X, t, err := sets[i].Matrix(y, cols, h, o0, last)
		if err != nil {
			return directStep{}, err
		}
		blocks = append(blocks, X)
		target = append(target, t...)
		sp := features.TimeSplit(len(t), h)
		if sp == nil {
			sp = make(features.Split, len(t)) // all training rows
		}
		split = append(split, sp...)
		rows += len(t)
	}
	if rows < MinRegressionRows/2 {
		return directStep{}, fmt.Errorf("%w: %d training rows for this step", ErrTooShort, rows)
	}
	if !slices.Contains(split, features.RowValidate) {
		split = nil
	}
	X := stack(blocks, rows, len(cols))
	st := directStep{penalty: math.NaN()}
	if X == nil {
		st.lin = learn.Linear{Intercept: mean(target)}
		return st, nil
	}
	forceLasso := r.family == FamilyLasso && r.penalty == 0
	ch, err := features.Choose(X, target, split, sel, forceLasso)
	if err != nil {
		return st, err
	}
	if len(ch.Keep) == 0 {
		st.lin = learn.Linear{Intercept: mean(target)}
		return st, nil
	}
	sub := features.Columns(X, ch.Keep)
	if r.family == FamilyGradientBoosting {
		return fitBoostStep(r.boost, st, sub, target, split, cols, ch.Keep)
	}
	sc := learn.FitScaler(sub)
	subS := sc.Transform(sub)
	var lin learn.Linear
	switch r.family {
	case FamilyRidge:
		lam := r.penalty
		if lam == 0 {
			lam = chooseRidge(subS, target, split)
		}
		st.penalty = lam
		lin, err = learn.Ridge(subS, target, lam*float64(rows))
	default: // Lasso
		alpha := r.penalty
		if alpha == 0 {
			alpha = ch.Alpha
		}
		if math.IsNaN(alpha) {
			amax, aerr := learn.AlphaMax(subS, target)
			if aerr != nil {
				return st, aerr
			}
			alpha = lassoFallback * amax
		}
		st.penalty = alpha
		lin, err = learn.Lasso(subS, target, alpha, learn.LassoOptions{Tol: 1e-6, MaxSweeps: 5000})
	}
	if err != nil {
		return st, err
	}
	lin = sc.Unscale(lin)
	for k, j := range ch.Keep {
		if lin.Coef[k] != 0 || r.family == FamilyRidge {
			st.cols = append(st.cols, cols[j])
			st.lin.Coef = append(st.lin.Coef, lin.Coef[k])
		}
	}
	st.lin.Intercept = lin.Intercept
	return st, nil
}

// chooseRidge picks λ from ridgeGrid by squared error on the split's validation rows
// (ridgeFallback without a split).
func chooseRidge(X *mat.Dense, y []float64, split features.Split) float64 {
	if split == nil {
		return ridgeFallback
	}
	tr, va := features.RowsWith(split, features.RowTrain), features.RowsWith(split, features.RowValidate)
	trX, trY := features.Rows(X, y, tr)
	vaX, vaY := features.Rows(X, y, va)
	best, bestErr := ridgeFallback, math.Inf(1)
	for _, lam := range ridgeGrid {
		fit, err := learn.Ridge(trX, trY, lam*float64(len(tr)))
		if err != nil {
			continue
		}
		if e := fit.SquaredError(vaX, vaY); e < bestErr {
			best, bestErr = lam, e
		}
	}
	return best
}

// stack concatenates row blocks into one matrix (nil when there are no columns).
func stack(blocks []*mat.Dense, rows, cols int) *mat.Dense {
	if cols == 0 {
		return nil
	}
	if len(blocks) == 1 {
		return blocks[0]
	}
	data := make([]float64, 0, rows*cols)
	for _, b := range blocks {
		data = append(data, b.RawMatrix().Data...)
	}
	return mat.NewDense(rows, cols, data)
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

func (f *regressionFit) Name() string {
	return fmt.Sprintf("%s(direct,features=%d)", f.r.family, len(f.Features()))
}

// Params gives the step-1 model: its intercept, penalty and one coefficient per kept feature.
func (f *regressionFit) Params() map[string]float64 { return stepParams(f.steps[0], f.set.Names()) }

func stepParams(st directStep, names []string) map[string]float64 {
	if st.tree != nil {
		p := map[string]float64{"base": st.tree.Base(), "rounds": float64(st.tree.Rounds())}
		for k, v := range st.tree.Importance() {
			if v > 0 {
				p["importance:"+names[st.cols[k]]] = v
			}
		}
		return p
	}
	p := map[string]float64{"intercept": st.lin.Intercept}
	if !math.IsNaN(st.penalty) {
		p["penalty"] = st.penalty
	}
	for k, j := range st.cols {
		p[names[j]] = st.lin.Coef[k]
	}
	return p
}

// Features lists every feature some step model kept, in generation order.
func (f *regressionFit) Features() []string { return keptNames(f.steps, f.set.Names()) }

func keptNames(steps []directStep, names []string) []string {
	used := map[int]bool{}
	for _, st := range steps {
		cols := st.cols
		if st.tree != nil {
			cols = st.splits
		}
		for _, j := range cols {
			used[j] = true
		}
	}
	var out []string
	for j, n := range names {
		if used[j] {
			out = append(out, n)
		}
	}
	return out
}

// Forecast returns the step forecasts, fitting steps beyond the fitted horizon on demand (a
// step that cannot be fitted gives NaN, which callers treat as a failed forecast).
func (f *regressionFit) Forecast(h int, levels []float64) Forecast {
	out := Forecast{Mean: make([]float64, h), Levels: levels}
	for k := 0; k < h; k++ {
		if k >= len(f.steps) && f.err == nil {
			f.err = f.addStep()
		}
		if k < len(f.steps) {
			out.Mean[k] = f.steps[k].mean
		} else {
			out.Mean[k] = math.NaN()
		}
	}
	return out
}

// InSample returns the step-1 model's fitted values (NaN before its first origin).
func (f *regressionFit) InSample() []float64 {
	out := make([]float64, len(f.y))
	st := f.steps[0]
	o0 := f.set.FirstOrigin(st.cols, 1)
	row := make([]float64, len(st.cols))
	for i := range out {
		out[i] = math.NaN()
		if i >= o0 && f.set.Fill(row, st.cols, f.y, i, 1) == nil {
			out[i] = st.predict(row)
		}
	}
	return out
}
