package pipeline

import (
	"fmt"
	"maps"
	"math"
	"slices"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// Settings is a run configuration converted into the engine's settings. The run configuration
// speaks the API's language; this is the one place it is translated for the engine, and Check
// is the one place the whole configuration is validated: plan, train, local and validate call
// it before any input is read.
type Settings struct {
	// Frequency and WeekAnchor are the parsed source.frequency and source.weekAnchor.
	Frequency series.Frequency
	// Selection is the engine's selection design (zoo, levels, metric, backtest, combination).
	Selection selection.Config
	// DesignMode and DesignCostLimit are selection.design and designCostPercent / 100.
	DesignMode      design.Mode
	DesignCostLimit float64
	// CalibrateBands is quantileWidth Backtest: the train step scales each unit's quantiles by
	// its pooled backtest (selection.CalibrateBands).
	CalibrateBands bool
	// Drift is the per-series drift rule.
	Drift DriftRule
}

// Design is the train step's design.Forecast options.
func (s Settings) Design(workers int) design.Options {
	return design.Options{Mode: s.DesignMode, Base: s.Selection, CostLimit: s.DesignCostLimit, Workers: workers}
}

// DriftRule flags a series whose realized error slipped: it is judged on at least MinPoints
// new actuals, and drifts when realized / expected > Threshold.
type DriftRule struct {
	Metric    backtest.Metric
	Threshold float64
	MinPoints int
}

// Check validates the whole configuration, the contract's rules (runconfig.Config.Validate)
// and each engine part's (frequency, week anchor, metrics, model families and their settings,
// features, combination method), and returns the engine settings. Errors name the run
// configuration's field and wrap ErrConfig.
func Check(cfg *runconfig.Config) (Settings, error) {
	s, err := settings(cfg)
	if err != nil {
		return s, fmt.Errorf("%w: %w", ErrConfig, err)
	}
	return s, nil
}

func settings(cfg *runconfig.Config) (Settings, error) {
	var s Settings
	if err := cfg.Validate(); err != nil {
		return s, err
	}
	f, err := series.ParseFrequency(cfg.Source.Frequency)
	if err != nil {
		return s, fmt.Errorf("source.frequency: %w", err)
	}
	s.Frequency = f
	if _, err := series.ParseWeekday(cfg.Source.WeekAnchor); err != nil {
		return s, fmt.Errorf("source.weekAnchor: %w", err)
	}
	sc := selection.Config{
		Horizon:        cfg.Horizon,
		Metric:         backtest.Metric(cfg.Selection.Metric),
		Origins:        cfg.Selection.BacktestOrigins,
		Step:           cfg.Selection.BacktestStep,
		BacktestUpdate: cfg.Selection.BacktestRefit == runconfig.RefitOnce,
		NonNegative:    cfg.Source.NonNegative,
		Clean:          series.CleanRules{NonNegative: cfg.Source.NonNegative},
	}
	if !sc.Metric.Valid() {
		return s, fmt.Errorf("selection.metric: %q is not one of %v", cfg.Selection.Metric, backtest.Metrics())
	}
	for _, p := range cfg.QuantilePercents {
		sc.Levels = append(sc.Levels, float64(p)/100)
	}
	calibrate, ok := QuantileWidths[cfg.QuantileWidth]
	if !ok {
		return s, fmt.Errorf("quantileWidth: %q is not one of %v", cfg.QuantileWidth, keys(QuantileWidths))
	}
	s.CalibrateBands = calibrate
	mode, ok := DesignModes[cfg.Selection.Design]
	if !ok {
		return s, fmt.Errorf("selection.design: %q is not one of %v", cfg.Selection.Design, keys(DesignModes))
	}
	s.DesignMode, s.DesignCostLimit = mode, float64(cfg.Selection.DesignCostPercent)/100
	if cb := cfg.Selection.Combine; cb != nil {
		m, ok := CombineMethods[cb.Method]
		if !ok {
			return s, fmt.Errorf("selection.combine.method: %q is not one of %v", cb.Method, keys(CombineMethods))
		}
		// The API speaks percent of the best member's score, the engine a fraction.
		sc.CombineTop, sc.CombineMethod, sc.CombineMargin = cb.Top, m, float64(cb.MarginPercent)/100
	}
	for i, m := range cfg.Models {
		sp, err := modelSpec(m)
		if err != nil {
			return s, fmt.Errorf("models[%d].%w", i, err)
		}
		if _, err := models.New(sp); err != nil {
			return s, fmt.Errorf("models[%d] (%s): %w", i, m.DisplayName(), err)
		}
		if m.Regression != nil && m.Regression.Pooled && !models.CanShare(sp.Family) {
			return s, fmt.Errorf("models[%d].regression.pooled: only for %v", i, models.SharedFamilies)
		}
		sc.Zoo = append(sc.Zoo, sp)
	}
	if cfg.Features != nil {
		fc, err := featureConfig(cfg.Features)
		if err != nil {
			return s, fmt.Errorf("features.%w", err)
		}
		if err := fc.Validate(); err != nil {
			return s, err // features.Config.Validate names the field under "features."
		}
		sc.Features = &fc
	}
	if cfg.Hierarchy != nil {
		sc.ErrorOrigins = hierarchyErrorOrigins(f.SeasonLength(), cfg.Horizon, sc.Origins)
	}
	if err := sc.Validate(); err != nil {
		return s, err
	}
	s.Selection = sc
	s.Drift = DriftRule{Metric: backtest.Metric(cfg.Drift.Metric), Threshold: float64(cfg.Drift.ThresholdPercent) / 100, MinPoints: cfg.Drift.MinEvaluatedPoints}
	if !s.Drift.Metric.Valid() {
		return s, fmt.Errorf("drift.metric: %q is not one of %v", cfg.Drift.Metric, backtest.Metrics())
	}
	return s, nil
}

// modelSpec converts one member; errors start with the field below models[i].
func modelSpec(m runconfig.Model) (models.Spec, error) {
	sp := models.Spec{Family: m.Family, Name: m.Name, SeasonLength: m.SeasonLength}
	for i, v := range m.SeasonalPeriods {
		p, err := runconfig.Decimal(v, 0, 8784, true)
		if err != nil {
			return sp, fmt.Errorf("seasonalPeriods[%d]: %w", i, err)
		}
		sp.SeasonalPeriods = append(sp.SeasonalPeriods, p)
	}
	if e := m.ETS; e != nil {
		sp.ETS = &models.ETSOptions{Errors: e.Errors, Trends: e.Trends, Seasons: e.Seasons}
	}
	if w := m.Smoothing; w != nil {
		alpha, err := runconfig.Decimal(w.Alpha, 0, 1, true)
		if err != nil {
			return sp, fmt.Errorf("smoothing.alpha: %w", err)
		}
		beta, err := runconfig.Decimal(w.Beta, 0, 1, true)
		if err != nil {
			return sp, fmt.Errorf("smoothing.beta: %w", err)
		}
		sp.Smoothing = &models.SmoothingOptions{Alpha: alpha, Beta: beta}
	}
	if r := m.Regression; r != nil {
		p, err := runconfig.Decimal(r.Penalty, 0, inf, false)
		if err != nil {
			return sp, fmt.Errorf("regression.penalty: %w", err)
		}
		sp.Regression = &models.RegressionOptions{Penalty: p, AcrossShard: r.Pooled}
		if b := r.Boosting; b != nil {
			if m.Family != models.FamilyGradientBoosting {
				return sp, fmt.Errorf("regression.boosting: only for family %s", models.FamilyGradientBoosting)
			}
			nu, err := runconfig.Decimal(b.Shrinkage, 0, 1, true)
			if err != nil {
				return sp, fmt.Errorf("regression.boosting.shrinkage: %w", err)
			}
			sp.Regression.Boosting = &models.BoostingOptions{Rounds: b.Rounds, Shrinkage: nu, TreeDepth: b.TreeDepth,
				MinLeafRows: b.MinLeafRows, RowFraction: float64(b.RowSamplePercent) / 100}
		}
	}
	return sp, nil
}

// The engine's names for the API's enum values. Every API value has an entry (tested against
// the generated CRD's enums in settings_test.go), so a value the apiserver accepts is one the
// engine knows, spelled in one place.
var (
	// DesignModes maps spec.selection.design.
	DesignModes = map[string]design.Mode{"Auto": design.Auto, "PerSeries": design.PerSeries, "Fixed": design.Fixed}
	// QuantileWidths maps spec.quantileWidth to Settings.CalibrateBands.
	QuantileWidths = map[string]bool{runconfig.QuantileWidthBacktest: true, runconfig.QuantileWidthModel: false}
	// CombineMethods maps spec.selection.combine.method.
	CombineMethods = map[string]string{"Mean": selection.CombineMean, "Median": selection.CombineMedian}
	// CalendarFeatures maps spec.features.calendar.
	CalendarFeatures = map[string]string{
		"DayOfWeek": features.DayOfWeek, "WeekOfYear": features.WeekOfYear, "Month": features.Month,
		"Quarter": features.Quarter, "Weekend": features.Weekend, "PositionInMonth": features.PositionInMonth,
	}
	// WindowStatistics maps spec.features.windowStatistics.
	WindowStatistics = map[string]string{"Mean": features.StatMean, "Min": features.StatMin, "Max": features.StatMax, "Std": features.StatStd}
	// FeatureFilters maps spec.features.selection.filter.
	FeatureFilters = map[string]string{"Correlation": features.FilterCorrelation, "MutualInformation": features.FilterMutualInformation, "None": features.FilterNone}
	// EmbeddedSelections maps spec.features.selection.embedded.
	EmbeddedSelections = map[string]string{"Lasso": features.EmbeddedLasso, "None": features.EmbeddedNone}
)

// featureConfig converts spec.features; errors start with the field below features. Unset
// selection steps take the API's documented defaults (filter Correlation, embedded Lasso),
// which are also the engine's.
func featureConfig(in *runconfig.Features) (features.Config, error) {
	out := features.Config{
		Lags: in.Lags, Windows: in.Windows, Covariates: in.Covariates, CovariateLags: in.CovariateLags,
		Selection: features.Selection{Filter: features.FilterCorrelation, Embedded: features.EmbeddedLasso},
	}
	var err error
	if out.Calendar, err = mapAll("calendar", in.Calendar, CalendarFeatures); err != nil {
		return out, err
	}
	if out.Stats, err = mapAll("windowStatistics", in.WindowStatistics, WindowStatistics); err != nil {
		return out, err
	}
	if len(out.Windows) > 0 && len(out.Stats) == 0 {
		out.Stats = []string{features.StatMean} // the API's documented default
	}
	for _, e := range in.Events {
		out.Events = append(out.Events, features.Event{Name: e.Name, Dates: e.Dates, Lead: e.PeriodsBefore, Lag: e.PeriodsAfter})
	}
	for i, ft := range in.Fourier {
		p, err := runconfig.Decimal(ft.Period, 0, inf, false)
		if err != nil {
			return out, fmt.Errorf("fourier[%d].period: %w", i, err)
		}
		out.Fourier = append(out.Fourier, features.FourierTerm{Period: p, Order: ft.Order})
	}
	if sel := in.Selection; sel != nil {
		if sel.Filter != "" {
			if out.Selection.Filter, err = mapOne("selection.filter", sel.Filter, FeatureFilters); err != nil {
				return out, err
			}
		}
		if sel.Embedded != "" {
			if out.Selection.Embedded, err = mapOne("selection.embedded", sel.Embedded, EmbeddedSelections); err != nil {
				return out, err
			}
		}
		out.Selection.FilterKeep, out.Selection.MaxFeatures = sel.FilterKeep, sel.MaxFeatures
	}
	return out, nil
}

func mapAll(field string, in []string, m map[string]string) ([]string, error) {
	var out []string
	for i, v := range in {
		e, err := mapOne(fmt.Sprintf("%s[%d]", field, i), v, m)
		if err != nil {
			return nil, err
		}
		out = append(out, e)
	}
	return out, nil
}

func mapOne(field, v string, m map[string]string) (string, error) {
	e, ok := m[v]
	if !ok {
		return "", fmt.Errorf("%s: %q is not one of %v", field, v, keys(m))
	}
	return e, nil
}

var inf = math.Inf(1)

// keys lists a map's keys in order, for error messages.
func keys[V any](m map[string]V) []string {
	return slices.Sorted(maps.Keys(m))
}
