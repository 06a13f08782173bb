package selection

import (
	"errors"
	"fmt"
	"maps"
	"math"
	"reflect"
	"slices"
	"sort"
	"strings"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// FallbackOrder is the order in which families are tried when no zoo member can be backtested
// (the series is too short): zoo members of these families first, in this order, then the
// families themselves with default settings when registered, even if outside the zoo.
var FallbackOrder = []string{models.FamilyETS, models.FamilyTheta, models.FamilySeasonalNaive, models.FamilyNaive, models.FamilyMean}

// constantOrder is the fallback order for a constant series, whose backtest is uninformative.
var constantOrder = []string{models.FamilyNaive, models.FamilyMean}

// member is one zoo member's work on one series, shared by every view of the zoo that
// forecastVariants finishes (see Variant.Members): the model, its backtest forecasts by plan
// and its refit on the whole series. A member's backtest on a plan and its refit depend on the
// member, the series and the plan only, never on which other members are weighed beside it,
// so each is computed once and reused by every view that needs it.
type member struct {
	spec  models.Spec
	model models.Model
	m     int            // season length the member uses
	in    *models.Inputs // dates and covariates for members that use them (nil: none)
	// backtests done so far, one per distinct plan (forecasts)
	backtests []memberBacktest
	// the refit on the whole series, kept for the other variants and views
	refitted bool
	refitFit models.Fitted
	refitFC  models.Forecast
	refitErr error
}

// memberBacktest is a member's backtest on one plan.
type memberBacktest struct {
	plan backtest.Plan
	fcs  [][]float64
	err  error
}

// candidate is one zoo member during the selection of one view.
type candidate struct {
	*member
	idx   int // position in the view's zoo (simplicity rank)
	fcs   [][]float64
	a     backtest.Assessment
	score float64 // ranking score (|Bias| for Bias); NaN if not backtested
}

// Forecast cleans s with cfg.Clean, backtests every zoo member on a common rolling-origin plan,
// picks the best (ties to the earlier member), optionally a combination, refits on the whole
// series and forecasts cfg.Horizon steps with quantiles. The procedure, with every decision in
// Result.Notes:
//
//   - A constant series is forecast by the first of Naive, Mean that fits (no backtest).
//   - With RouteIntermittent, intermittent and lumpy series keep only intermittent members.
//   - Members whose MinLength exceeds the series length get score NaN. The plan uses the largest
//     remaining MinLength as minimum training length, so every member sees the same origins;
//     when not even one origin fits, the most demanding members are left out of the backtest.
//   - Scores are backtest.Assess's Overall in cfg.Metric. If the metric is undefined for every
//     member (e.g. a zero MASE scale) members are ranked by MAE instead.
//   - With no backtestable member, FallbackOrder applies and Expected is NaN.
//   - If the chosen member fails to refit on the whole series, the next best is used.
//
// Quantiles come from the model when it returns them, otherwise from empiricalQuantiles. The
// error, when the series is unusable, gives the reason; Result then carries Key and Notes.
func Forecast(s series.Series, cfg Config) (Result, error) {
	if err := cfg.Validate(); err != nil {
		return Result{Key: s.Key}, err
	}
	return forecast(s, cfg.withDefaults())
}

func forecast(s series.Series, cfg Config) (Result, error) {
	rs, errs := forecastVariants(s, cfg, nil, nil)
	return rs[0], errs[0]
}

// forecastVariants runs forecast once up to the ranking of the backtested members per view
// (the zoo, or the subset a variant names in Variant.Members), then finishes it once per
// variant (cfg's own combination when variants is empty). Cleaning is shared by every view,
// and each member's backtest on a plan and its refit on the whole series by every view and
// variant (member). Result v equals forecast with cfg's zoo set to variants[v]'s members
// and cfg's combination to variants[v]'s.
func forecastVariants(s series.Series, cfg Config, variants []Variant, fits *Fits) ([]Result, []error) {
	if len(variants) == 0 {
		variants = []Variant{{CombineTop: cfg.CombineTop, CombineMethod: cfg.CombineMethod, CombineMargin: cfg.CombineMargin}}
	}
	rs, errs := make([]Result, len(variants)), make([]error, len(variants))
	orig := s
	s.Values = append([]float64(nil), s.Values...)
	s.Notes = append([]string(nil), s.Notes...)
	if err := series.Clean(&s, cfg.Clean); err != nil {
		for v := range variants {
			rs[v] = Result{Key: s.Key, Levels: cfg.Levels, Scores: map[string]float64{}, Expected: math.NaN(), Metric: cfg.Metric, Notes: s.Notes}
			errs[v] = err
		}
		return rs, errs
	}
	m := cfg.SeasonLength
	if m == 0 {
		m = s.Freq.SeasonLength()
	}
	in := models.InputsOf(s)
	kept := fits.open(s, cfg)
	defer fits.close()
	members := make([]*member, len(cfg.Zoo))
	for i, sp := range cfg.Zoo {
		if sp.Features == nil {
			sp.Features = cfg.Features
		}
		if mb, ok := kept[sp.DisplayName()]; ok && reflect.DeepEqual(mb.spec, sp) {
			members[i] = mb
			continue
		}
		mod, err := models.New(sp)
		if err != nil { // Validate built it once; a constructor that now fails is a bug
			panic("selection: zoo member no longer builds: " + err.Error())
		}
		if acrossShard(sp) {
			if cfg.shard == nil { // a single series: its shard is itself
				cfg.shard = newShardModels([]series.Series{orig}, cfg)
			}
			mod = cfg.shard.member(sp, s.Key, mod)
		}
		mm := m
		if sp.SeasonLength > 0 {
			mm = sp.SeasonLength
		}
		members[i] = &member{spec: sp, model: mod, m: mm, in: &in}
		if kept != nil && !acrossShard(sp) {
			kept[sp.DisplayName()] = members[i]
		}
	}
	// Views in the order of their first variant; each is selected once for its variants.
	var views [][]int
	byView := map[string][]int{}
	for v, vr := range variants {
		zoo := viewOf(cfg, vr)
		k := fmt.Sprint(zoo)
		if _, ok := byView[k]; !ok {
			views = append(views, zoo)
		}
		byView[k] = append(byView[k], v)
	}
	for _, zoo := range views {
		idx := byView[fmt.Sprint(zoo)]
		vs := make([]Variant, len(idx))
		for j, v := range idx {
			vs[j] = variants[v]
		}
		cands := make([]*candidate, len(zoo))
		for j, i := range zoo {
			cands[j] = &candidate{member: members[i], idx: j, score: math.NaN()}
		}
		vrs, verrs := forecastView(s, cfg, m, cands, vs)
		for j, v := range idx {
			rs[v], errs[v] = vrs[j], verrs[j]
		}
	}
	return rs, errs
}

// viewOf returns the zoo positions of the members variant v selects among, in its order:
// v.Members by name (validated by ForecastManyVariants), or the whole zoo.
func viewOf(cfg Config, v Variant) []int {
	if v.Members == nil {
		out := make([]int, len(cfg.Zoo))
		for i := range out {
			out[i] = i
		}
		return out
	}
	out := make([]int, len(v.Members))
	for j, name := range v.Members {
		out[j] = MemberIndex(cfg.Zoo, name)
	}
	return out
}

// forecastView is forecast on the cleaned series s for the zoo view cands (in its simplicity
// order) up to the ranking of the backtested members, then finishes it once per variant.
func forecastView(s series.Series, cfg Config, m int, cands []*candidate, variants []Variant) ([]Result, []error) {
	// same gives every variant the result of a path taken before the variants part.
	same := func(r Result, err error) ([]Result, []error) {
		rs, errs := make([]Result, len(variants)), make([]error, len(variants))
		for i := range rs {
			rs[i], errs[i] = r, err
			rs[i].Scores = maps.Clone(r.Scores)
		}
		return rs, errs
	}
	res := Result{Key: s.Key, Levels: cfg.Levels, Scores: map[string]float64{}, Expected: math.NaN(), Metric: cfg.Metric}
	y := s.Values
	n := len(y)
	notes := slices.Clone(s.Notes)
	note := func(format string, a ...any) { notes = append(notes, fmt.Sprintf(format, a...)) }
	// noted returns r with the notes taken so far (read after the call that produced r).
	noted := func(r Result, err error) (Result, error) {
		r.Notes = notes
		return r, err
	}

	class, _, _ := Classify(y)
	res.Class = class
	for _, c := range cands {
		res.Scores[c.spec.DisplayName()] = math.NaN()
	}

	if _, isConst := constantValue(y); isConst {
		note("constant series: backtest skipped")
		return same(noted(finishFallback(&res, cands, y, cfg, constantOrder, note)))
	}
	if cfg.RouteIntermittent && (class == ClassIntermittent || class == ClassLumpy) {
		var keep []*candidate
		for _, c := range cands {
			if intermittentFamily(c.spec.Family) {
				keep = append(keep, c)
			}
		}
		if len(keep) > 0 {
			note("%s demand: only intermittent-demand members considered", class)
			cands = keep
		}
	}

	// Members that cannot even be fitted on the whole series.
	var fit []*candidate
	for _, c := range cands {
		if ml := c.model.MinLength(c.m); ml > n {
			note("%s: needs %d observations, series has %d", c.spec.DisplayName(), ml, n)
			continue
		}
		fit = append(fit, c)
	}

	// Common plan: drop the most demanding members until one origin fits.
	bt := append([]*candidate(nil), fit...)
	var plan backtest.Plan
	for len(bt) > 0 {
		floor := 0
		for _, c := range bt {
			floor = max(floor, c.model.MinLength(c.m))
		}
		p, err := backtest.NewPlan(n, cfg.Horizon, cfg.Origins, cfg.Step, floor)
		if err == nil {
			p.Update = cfg.BacktestUpdate
			plan = p
			break
		}
		var keep []*candidate
		for _, c := range bt {
			if c.model.MinLength(c.m) < floor {
				keep = append(keep, c)
			} else {
				note("%s: too short to backtest (needs %d observations plus one to test)", c.spec.DisplayName(), floor)
			}
		}
		bt = keep
	}
	if len(bt) > 0 && plan.Horizon < cfg.Horizon {
		note("backtest horizon shortened to %d (series has %d observations)", plan.Horizon, n)
	}

	var ok []*candidate
	for _, c := range bt {
		fcs, err := c.forecasts(y, plan)
		if err != nil {
			note("%s: backtest failed: %v", c.spec.DisplayName(), err)
			continue
		}
		c.fcs = fcs
		c.a = backtest.Assess(cfg.Metric, y, m, plan, fcs)
		c.score = rankScore(cfg.Metric, c.a.Overall)
		ok = append(ok, c)
	}
	if len(ok) == 0 {
		note("no member could be backtested: fallback order %s", strings.Join(FallbackOrder, ", "))
		return same(noted(finishFallback(&res, fit, y, cfg, FallbackOrder, note)))
	}
	metric := cfg.Metric
	if allNaN(ok) {
		note("%s undefined on this series for every member: ranked by MAE", cfg.Metric)
		metric = backtest.MAE
		res.Metric = metric
		for _, c := range ok {
			c.a = backtest.Assess(metric, y, m, plan, c.fcs)
			c.score = c.a.Overall
		}
	}
	for _, c := range ok {
		res.Scores[c.spec.DisplayName()] = c.score
	}
	ranked := rank(ok)

	common := notes
	rs, errs := make([]Result, len(variants)), make([]error, len(variants))
	for vi, v := range variants {
		notes = slices.Clone(common)
		r := res
		r.Scores = maps.Clone(res.Scores)
		vc := cfg
		vc.CombineTop, vc.CombineMethod, vc.CombineMargin = v.CombineTop, v.CombineMethod, v.CombineMargin
		if vc.CombineMethod == "" {
			vc.CombineMethod = CombineMean
		}
		rs[vi], errs[vi] = noted(finishRanked(r, ranked, fit, y, m, plan, metric, vc, note))
	}
	return rs, errs
}

// finishRanked publishes the combination of the best members when cfg asks for it and it
// backtests well enough, else the best member that refits, else the fallback order.
func finishRanked(res Result, ranked, fit []*candidate, y []float64, m int, plan backtest.Plan, metric backtest.Metric,
	cfg Config, note func(string, ...any)) (Result, error) {
	if cfg.CombineTop > 1 && len(ranked) >= 2 {
		top := ranked[:min(cfg.CombineTop, len(ranked))]
		cfc := combineAll(cfg.CombineMethod, top, func(c *candidate) [][]float64 { return c.fcs })
		ca := backtest.Assess(metric, y, m, plan, cfc)
		cs := rankScore(metric, ca.Overall)
		name := comboName(cfg.CombineMethod, top)
		res.Scores[name] = cs
		if better := cs < ranked[0].score; better || (cfg.CombineMargin > 0 && cs <= ranked[0].score*(1+cfg.CombineMargin)) {
			if err := finishCombination(&res, name, top, ca, y, cfg); err == nil {
				onBacktest(&res, y, m, plan, ca)
				errorBacktest(&res, top, y, m, cfg)
				return res, nil
			} else {
				note("%s: refit failed, using the best single member: %v", name, err)
			}
		}
	}
	for _, c := range ranked {
		if err := finishSingle(&res, c, c.a, y, cfg); err != nil {
			note("%s: refit on the whole series failed: %v", c.spec.DisplayName(), err)
			continue
		}
		onBacktest(&res, y, m, plan, c.a)
		errorBacktest(&res, []*candidate{c}, y, m, cfg)
		return res, nil
	}
	note("every backtested member failed to refit: fallback order %s", strings.Join(FallbackOrder, ", "))
	return finishFallback(&res, fit, y, cfg, FallbackOrder, note)
}

// errorBacktest replaces res's backtest errors by those of the published forecast (members,
// combined by cfg.CombineMethod when more than one) at up to cfg.ErrorOrigins origins one
// horizon apart (see Config.ErrorOrigins); it leaves them when that is off, the series holds
// fewer than 2 such origins, or a member fails at one. When cfg.ErrorOrigins is on it first
// keeps the selection backtest behind res.Expected in res.Promise.
func errorBacktest(res *Result, members []*candidate, y []float64, m int, cfg Config) {
	if cfg.ErrorOrigins <= 0 {
		return
	}
	res.Promise = backtest.Records(res.Metric, y, m, backtest.Assessment{Errors: res.BacktestErrors, Held: res.BacktestHeld})
	res.BandScale = backtest.NaiveScale(y, backtest.ScaleLag(len(y), m), 1)
	floor := 0
	for _, c := range members {
		floor = max(floor, c.model.MinLength(c.m))
	}
	p, err := backtest.NewPlan(len(y), cfg.Horizon, cfg.ErrorOrigins, cfg.Horizon, floor)
	if err != nil || len(p.Origins) < 2 {
		return
	}
	p.Update = cfg.BacktestUpdate
	fcs := make(map[*candidate][][]float64, len(members))
	for _, c := range members {
		if fcs[c], err = c.forecasts(y, p); err != nil {
			return
		}
	}
	out := fcs[members[0]]
	if len(members) > 1 {
		out = combineAll(cfg.CombineMethod, members, func(c *candidate) [][]float64 { return fcs[c] })
	}
	a := backtest.Assess(backtest.MAE, y, m, p, out)
	res.BacktestErrors, res.BacktestHeld = a.Errors, a.Held
}

// onBacktest scores the published quantiles of res on the backtest a of its forecast (plan's
// origins on y, season length m; see backtest.QuantilesOnBacktest) into res.Backtest, empty
// when there is nothing to score (Points 0), and keeps that backtest in res.band for
// CalibrateBands, which scores a scaled band on it again.
func onBacktest(res *Result, y []float64, m int, plan backtest.Plan, a backtest.Assessment) {
	res.Backtest, res.band = backtest.QuantileRecord{}, bandBacktest{}
	if len(res.Levels) == 0 || res.Quantiles == nil || len(a.Errors) != len(plan.Origins) {
		return
	}
	sn, scales := backtest.BandScales(y, m, plan.Origins)
	res.band = bandBacktest{scale: sn, scales: scales, errs: a.Errors}
	if rec, ok := backtest.QuantilesOnScales(sn, scales, a.Errors, res.Levels, res.Mean, res.Quantiles); ok {
		res.Backtest = rec
	}
}

// rankScore turns a metric value into a lower-is-better score.
func rankScore(metric backtest.Metric, v float64) float64 {
	if metric == backtest.Bias {
		return math.Abs(v)
	}
	return v
}

func allNaN(cs []*candidate) bool {
	for _, c := range cs {
		if !math.IsNaN(c.score) {
			return false
		}
	}
	return true
}

// rank orders the candidates with a finite score by score, ties to the earlier zoo member.
func rank(cs []*candidate) []*candidate {
	var out []*candidate
	for _, c := range cs {
		if !math.IsNaN(c.score) {
			out = append(out, c)
		}
	}
	sort.SliceStable(out, func(i, j int) bool {
		if out[i].score != out[j].score {
			return out[i].score < out[j].score
		}
		return out[i].idx < out[j].idx
	})
	return out
}

// forecasts returns the member's backtest forecasts on plan p of y (the series the member was
// built for), running the backtest on the first call for a plan and reusing it after: every
// view that backtests the member on the same plan gets the same forecasts (or error). Plans
// differ between views only on series too short for the most demanding member's origins
// (NewPlan's floor), where a view without that member keeps more origins or a longer horizon.
func (mb *member) forecasts(y []float64, p backtest.Plan) ([][]float64, error) {
	for _, b := range mb.backtests {
		if b.plan.Horizon == p.Horizon && b.plan.Update == p.Update && slices.Equal(b.plan.Origins, p.Origins) {
			return b.fcs, b.err
		}
	}
	fcs, err := safeForecasts(mb, y, p)
	mb.backtests = append(mb.backtests, memberBacktest{plan: p, fcs: fcs, err: err})
	return fcs, err
}

// safeForecasts runs the backtest of one member, turning a model panic into an error so one
// faulty family cannot sink the series.
func safeForecasts(c *member, y []float64, p backtest.Plan) (f [][]float64, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("model panicked: %v", r)
		}
	}()
	return backtest.ForecastsWith(c.model, y, c.m, p, c.in)
}

// refit fits c on the whole series and forecasts h steps at levels, once per candidate (y,
// h and levels are the same for every call on a candidate); the forecast returned is a copy.
func refit(c *candidate, y []float64, h int, levels []float64) (models.Fitted, models.Forecast, error) {
	if !c.refitted {
		c.refitFit, c.refitFC, c.refitErr = refitOnce(c, y, h, levels)
		c.refitted = true
	}
	fc := c.refitFC
	fc.Mean = slices.Clone(fc.Mean)
	if fc.Quantiles != nil {
		fc.Quantiles = make([][]float64, len(c.refitFC.Quantiles))
		for j, q := range c.refitFC.Quantiles {
			fc.Quantiles[j] = slices.Clone(q)
		}
	}
	return c.refitFit, fc, c.refitErr
}

func refitOnce(c *candidate, y []float64, h int, levels []float64) (fitted models.Fitted, fc models.Forecast, err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("model panicked: %v", r)
		}
	}()
	in := c.in
	if in != nil {
		cp := *in
		cp.Horizon = h
		in = &cp
	}
	fitted, err = models.FitWith(c.model, y, c.m, in)
	if err != nil {
		return nil, fc, err
	}
	fc = fitted.Forecast(h, levels)
	if len(fc.Mean) != h {
		return nil, fc, fmt.Errorf("model returned %d steps, want %d", len(fc.Mean), h)
	}
	for k, v := range fc.Mean {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fc, fmt.Errorf("forecast step %d is %v", k+1, v)
		}
	}
	if fc.Quantiles != nil && !validQuantiles(fc.Quantiles, len(levels), h) {
		fc.Quantiles = nil
	}
	return fitted, fc, nil
}

// validQuantiles checks shape, finiteness and non-crossing of model quantiles.
func validQuantiles(q [][]float64, nl, h int) bool {
	if len(q) != nl {
		return false
	}
	for j := range q {
		if len(q[j]) != h {
			return false
		}
		for k, v := range q[j] {
			if math.IsNaN(v) || math.IsInf(v, 0) || (j > 0 && v < q[j-1][k]) {
				return false
			}
		}
	}
	return true
}

func finishSingle(res *Result, c *candidate, a backtest.Assessment, y []float64, cfg Config) error {
	fitted, fc, err := refit(c, y, cfg.Horizon, cfg.Levels)
	if err != nil {
		return err
	}
	res.Chosen = c.spec.DisplayName()
	res.Family = c.spec.Family
	res.Model = fitted.Name()
	res.Params = fitted.Params()
	res.Mean = fc.Mean
	res.Expected = a.Overall
	res.StepErrors = a.Steps
	res.BacktestErrors, res.BacktestHeld = a.Errors, a.Held
	res.Residuals = residuals(y, fitted)
	res.Features = nil
	recordFeatures(res, c.spec.DisplayName(), fitted)
	switch {
	case len(cfg.Levels) == 0:
	case fc.Quantiles != nil:
		res.Quantiles, res.QuantileSource = fc.Quantiles, "model"
	default:
		res.Quantiles, res.QuantileSource = empiricalQuantiles(fc.Mean, cfg.Levels, a.Errors, residuals(y, fitted)), "empirical"
	}
	clip(res, cfg.NonNegative)
	return nil
}

func finishCombination(res *Result, name string, top []*candidate, a backtest.Assessment, y []float64, cfg Config) error {
	fcs := make([]models.Forecast, len(top))
	fitted := make([]models.Fitted, len(top))
	for i, c := range top {
		f, fc, err := refit(c, y, cfg.Horizon, cfg.Levels)
		if err != nil {
			return fmt.Errorf("%s: %w", c.spec.DisplayName(), err)
		}
		fcs[i], fitted[i] = fc, f
	}
	res.Features = nil
	for i, c := range top {
		recordFeatures(res, c.spec.DisplayName(), fitted[i])
	}
	means := make([][]float64, len(top))
	allQ := len(cfg.Levels) > 0
	for i := range fcs {
		means[i] = fcs[i].Mean
		allQ = allQ && fcs[i].Quantiles != nil
	}
	res.Chosen, res.Family = name, FamilyCombination
	res.Model, res.Params = combinedFits(cfg.CombineMethod, top, fitted)
	res.Mean = combine(cfg.CombineMethod, means)
	res.Expected, res.StepErrors = a.Overall, a.Steps
	res.BacktestErrors, res.BacktestHeld = a.Errors, a.Held
	res.Residuals = nil
	if ins := inSamples(fitted, len(y)); ins != nil {
		res.Residuals = make([]float64, len(y))
		for t, f := range combine(cfg.CombineMethod, ins) {
			res.Residuals[t] = y[t] - f
		}
	}
	switch {
	case len(cfg.Levels) == 0:
	case allQ:
		// Quantile averaging (Lichtendahl, Grushka-Cockayne & Winkler 2013, "Is it better to
		// average probabilities or quantiles?", Management Science 59): level by level.
		res.Quantiles = make([][]float64, len(cfg.Levels))
		for j := range cfg.Levels {
			qs := make([][]float64, len(fcs))
			for i := range fcs {
				qs[i] = fcs[i].Quantiles[j]
			}
			res.Quantiles[j] = combine(CombineMean, qs)
		}
		res.QuantileSource = "members"
	default:
		res.Quantiles, res.QuantileSource = empiricalQuantiles(res.Mean, cfg.Levels, a.Errors, nil), "empirical"
	}
	clip(res, cfg.NonNegative)
	return nil
}

// finishFallback forecasts with the first family of order that fits: zoo members of the
// family first, then the family's default spec when registered.
func finishFallback(res *Result, zoo []*candidate, y []float64, cfg Config, order []string, note func(string, ...any)) (Result, error) {
	known := map[string]bool{}
	for _, f := range models.Families() {
		known[f] = true
	}
	var tries []*candidate
	for _, fam := range order {
		for _, c := range zoo {
			if c.spec.Family == fam {
				tries = append(tries, c)
			}
		}
		if known[fam] {
			if mod, err := models.New(models.Spec{Family: fam}); err == nil {
				mm := cfg.SeasonLength
				tries = append(tries, &candidate{member: &member{spec: models.Spec{Family: fam}, model: mod, m: fallbackSeason(mm, zoo)}})
			}
		}
	}
	for _, c := range tries {
		if c.model.MinLength(c.m) > len(y) {
			continue
		}
		if err := finishSingle(res, c, backtest.Assessment{Overall: math.NaN()}, y, cfg); err != nil {
			note("fallback %s failed: %v", c.spec.DisplayName(), err)
			continue
		}
		note("fallback: %s (not backtested)", c.spec.DisplayName())
		return *res, nil
	}
	return *res, errors.New("no model in the zoo or the fallback order can forecast this series")
}

// fallbackSeason is the season length for a default-spec fallback member.
func fallbackSeason(cfgM int, zoo []*candidate) int {
	if cfgM > 0 {
		return cfgM
	}
	for _, c := range zoo {
		if c.spec.SeasonLength == 0 {
			return c.m
		}
	}
	return 1
}

// inSamples returns every member's in-sample one-step values, or nil when one has none of
// length n.
func inSamples(fitted []models.Fitted, n int) [][]float64 {
	out := make([][]float64, len(fitted))
	for i, f := range fitted {
		if out[i] = f.InSample(); len(out[i]) != n {
			return nil
		}
	}
	return out
}

// residuals returns y − fitted one-step values (NaN where the model has none).
func residuals(y []float64, f models.Fitted) []float64 {
	in := f.InSample()
	if len(in) != len(y) {
		return nil
	}
	r := make([]float64, len(y))
	for i := range y {
		r[i] = y[i] - in[i]
	}
	return r
}

func clip(res *Result, on bool) {
	if !on {
		return
	}
	for k, v := range res.Mean {
		res.Mean[k] = math.Max(v, 0)
	}
	for _, q := range res.Quantiles {
		for k, v := range q {
			q[k] = math.Max(v, 0)
		}
	}
}

func constantValue(x []float64) (float64, bool) {
	for _, v := range x[1:] {
		if v != x[0] {
			return 0, false
		}
	}
	return x[0], true
}

// comboName names a combination by its members in zoo order, so the same set always has the
// same name.
func comboName(method string, top []*candidate) string {
	names := make([]string, len(top))
	for j, i := range zooOrder(top) {
		names[j] = top[i].spec.DisplayName()
	}
	return fmt.Sprintf("%s(%s: %s)", FamilyCombination, method, strings.Join(names, ", "))
}

// zooOrder lists the positions of top in zoo order (the order combinations name members in).
func zooOrder(top []*candidate) []int {
	order := make([]int, len(top))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int { return top[a].idx - top[b].idx })
	return order
}

// combinedFits names a combination by its members' fitted models, in zoo order
// ("Combination(mean: ETS(M,Ad,N), Theta, DOTM)"), and gathers their parameters under the
// member's zoo name ("ETS.alpha"), so the models table shows what was combined.
func combinedFits(method string, top []*candidate, fitted []models.Fitted) (string, map[string]float64) {
	names := make([]string, len(top))
	params := map[string]float64{}
	for j, i := range zooOrder(top) {
		names[j] = fitted[i].Name()
		for k, v := range fitted[i].Params() {
			params[top[i].spec.DisplayName()+"."+k] = v
		}
	}
	return fmt.Sprintf("%s(%s: %s)", FamilyCombination, method, strings.Join(names, ", ")), params
}

// CombinationMembers splits the name comboName gives a combination, "Combination(mean: ETS,
// Theta)", into its method and member names; ok is false for any other name.
func CombinationMembers(name string) (method string, members []string, ok bool) {
	rest, found := strings.CutPrefix(name, FamilyCombination+"(")
	if !found || !strings.HasSuffix(rest, ")") {
		return "", nil, false
	}
	method, list, found := strings.Cut(strings.TrimSuffix(rest, ")"), ": ")
	if !found || method == "" || list == "" {
		return "", nil, false
	}
	return method, strings.Split(list, ", "), true
}

// combineAll combines per-origin forecasts of the members.
func combineAll(method string, top []*candidate, get func(*candidate) [][]float64) [][]float64 {
	no := len(get(top[0]))
	out := make([][]float64, no)
	for i := range out {
		paths := make([][]float64, len(top))
		for j, c := range top {
			paths[j] = get(c)[i]
		}
		out[i] = combine(method, paths)
	}
	return out
}

// combine is the step-wise mean or median of equal-length paths (equal weights: Clemen 1989,
// "Combining forecasts: a review and annotated bibliography", IJF 5).
func combine(method string, paths [][]float64) []float64 {
	h := len(paths[0])
	out := make([]float64, h)
	col := make([]float64, len(paths))
	for k := 0; k < h; k++ {
		for j := range paths {
			col[j] = paths[j][k]
		}
		if method == CombineMedian {
			sort.Float64s(col)
			nn := len(col)
			if nn%2 == 1 {
				out[k] = col[nn/2]
			} else {
				out[k] = (col[nn/2-1] + col[nn/2]) / 2
			}
			continue
		}
		s := 0.0
		for _, v := range col {
			s += v
		}
		out[k] = s / float64(len(col))
	}
	return out
}

// recordFeatures adds the features a fitted member kept to res.Features under the member's name,
// when the member is built on generated features.
func recordFeatures(res *Result, member string, f models.Fitted) {
	fr, ok := f.(models.FeatureReporter)
	if !ok {
		return
	}
	if res.Features == nil {
		res.Features = map[string][]string{}
	}
	res.Features[member] = slices.Clone(fr.Features())
}
