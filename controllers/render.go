package controllers

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
)

// Defaults the API documents for fields a client may leave out when the apiserver did not fill
// them (objects built in Go, or created before a default was added). They match the
// +kubebuilder:default markers in api/v1alpha1.
const (
	defaultSeriesPerShard    = 2000
	defaultMaxParallel       = 8
	defaultShareWeight       = 1
	defaultRetriesPerShard   = 2
	defaultThresholdPercent  = 130
	defaultMinPoints         = 100
	defaultOrigins           = 3
	defaultStep              = 1
	defaultDesignCostPercent = 500
	defaultTTLSeconds        = 86400
)

// renderConfig resolves a portfolio's spec, at its current generation, into the configuration
// of one run: the JSON the trainer reads from the run's ConfigMap.
//
// Percentages become fractions (quantilePercents 10 -> 0.1, thresholdPercent 130 -> ratio
// 1.3), the API's enum spellings become the trainer's (Weekly -> "weekly"), defaults the
// apiserver fills are applied again for objects that lack them, and smoothing weights are parsed
// from their decimal strings. previousRun is the last published run (empty for the first run).
// The result is checked with runconfig.Config.Validate; an error names the spec field.
func renderConfig(fp *forecastingv1alpha1.ForecastPortfolio, run *forecastingv1alpha1.ForecastRun, previousRun string) (runconfig.Config, error) {
	spec := &fp.Spec
	c := runconfig.Config{
		Portfolio:   fp.Name,
		Namespace:   fp.Namespace,
		Run:         run.Name,
		Generation:  fp.Generation,
		Trigger:     string(orDefault(run.Spec.Trigger, forecastingv1alpha1.TriggerManual)),
		PreviousRun: previousRun,
		Source: runconfig.Source{
			URI:        spec.Source.URI,
			Format:     string(orDefault(spec.Source.Format, forecastingv1alpha1.FormatCSV)),
			Frequency:  strings.ToLower(string(spec.Source.Frequency)),
			WeekAnchor: string(spec.Source.WeekAnchor),
			DateLayout: spec.Source.DateLayout,
			Columns: runconfig.Columns{
				Series:     spec.Source.Columns.Series,
				Date:       orDefault(spec.Source.Columns.Date, "date"),
				Value:      orDefault(spec.Source.Columns.Value, "value"),
				Covariates: spec.Source.Columns.Covariates,
			},
			NonNegative:  spec.Source.NonNegative == nil || *spec.Source.NonNegative,
			Partitioning: partitioning[orDefault(spec.Source.Partitioning, forecastingv1alpha1.PartitionHashBuckets)],
		},
		Output: runconfig.Output{
			URI:    spec.Output.URI,
			Format: string(orDefault(spec.Output.Format, forecastingv1alpha1.FormatParquet)),
		},
		Horizon: int(spec.Horizon),
		Selection: runconfig.Selection{
			Metric:         string(orDefault(spec.Selection.Metric, forecastingv1alpha1.MetricMASE)),
			Origins:        int(orDefault(spec.Selection.BacktestOrigins, defaultOrigins)),
			Step:           int(orDefault(spec.Selection.BacktestStep, defaultStep)),
			UpdateBacktest: orDefault(spec.Selection.BacktestRefit, forecastingv1alpha1.RefitOnce) == forecastingv1alpha1.RefitOnce,
			// The trainer names the designs in lower camel case (runconfig.DesignAuto, ...).
			Design:          lowerFirst(string(orDefault(spec.Selection.Design, forecastingv1alpha1.DesignAuto))),
			DesignCostLimit: float64(orDefault(spec.Selection.DesignCostPercent, defaultDesignCostPercent)) / 100,
		},
		Sharding: runconfig.Sharding{
			TargetSeriesPerShard: int(orDefault(spec.Sharding.TargetSeriesPerShard, defaultSeriesPerShard)),
			Buckets:              int(spec.Sharding.Buckets),
		},
	}
	if run.Spec.ScheduledTime != nil {
		c.ScheduledTime = run.Spec.ScheduledTime.UTC()
	}
	if len(c.Source.Columns.Series) == 0 {
		c.Source.Columns.Series = []string{"series"}
	}
	if spec.Source.Frequency == forecastingv1alpha1.Weekly && c.Source.WeekAnchor == "" {
		c.Source.WeekAnchor = "Monday"
	}
	percents := spec.QuantilePercents
	if len(percents) == 0 {
		percents = []int32{10, 50, 90}
	}
	for _, p := range percents {
		c.Quantiles = append(c.Quantiles, float64(p)/100)
	}
	if cb := spec.Selection.Combine; cb != nil {
		c.Selection.CombineTop = int(cb.Top)
		// The trainer names the methods in lower case (trainer/selection: "mean", "median").
		c.Selection.CombineMethod = strings.ToLower(string(orDefault(cb.Method, forecastingv1alpha1.CombineMean)))
		// The API speaks percent of the best member's score, the trainer a fraction.
		c.Selection.CombineMargin = float64(cb.MarginPercent) / 100
	}
	for i, m := range spec.Models {
		ms, err := renderModel(m)
		if err != nil {
			return c, fmt.Errorf("spec.models[%d].%w", i, err)
		}
		c.Zoo = append(c.Zoo, ms)
	}
	if spec.Features != nil {
		f, err := renderFeatures(spec.Features)
		if err != nil {
			return c, fmt.Errorf("spec.features.%w", err)
		}
		c.Features = &f
	}
	c.Drift = runconfig.Drift{
		Metric:             orDefault(string(spec.Drift.Metric), c.Selection.Metric),
		ThresholdRatio:     float64(orDefault(spec.Drift.ThresholdPercent, defaultThresholdPercent)) / 100,
		MinEvaluatedPoints: seriesMinPoints(int(orDefault(spec.Drift.MinEvaluatedPoints, defaultMinPoints)), c.Horizon),
	}
	pub := spec.Publish
	c.Publish = &runconfig.Publish{
		MinForecastPercent:       percentOr(pub.MinForecastPercent, runconfig.DefaultPublish.MinForecastPercent),
		MinPreviousPercent:       percentOr(pub.MinPreviousPercent, runconfig.DefaultPublish.MinPreviousPercent),
		MaxCarriedForwardPercent: percentOr(pub.MaxCarriedForwardPercent, runconfig.DefaultPublish.MaxCarriedForwardPercent),
	}
	if err := c.Validate(); err != nil {
		return c, fmt.Errorf("portfolio %s/%s: %w", fp.Namespace, fp.Name, err)
	}
	return c, nil
}

// percentOr is *p, or def when the apiserver did not default it (runconfig.DefaultPublish
// holds the API's defaults).
func percentOr(p *int32, def int) int {
	if p == nil {
		return def
	}
	return int(*p)
}

// renderModel maps one zoo member; errors start with the field below spec.models[i].
func renderModel(m forecastingv1alpha1.ModelSpec) (models.Spec, error) {
	out := models.Spec{Family: string(m.Family), Name: m.Name}
	if m.SeasonLength != nil {
		out.SeasonLength = int(*m.SeasonLength)
	}
	for i, v := range m.SeasonalPeriods {
		p, err := strconv.ParseFloat(v, 64)
		if err != nil || !(p >= 2 && p <= 8784) {
			return out, fmt.Errorf("seasonalPeriods[%d]: %q is not a decimal from 2 to 8784", i, v)
		}
		out.SeasonalPeriods = append(out.SeasonalPeriods, p)
	}
	if e := m.ETS; e != nil {
		out.ETS = &models.ETSOptions{Errors: codes(e.Errors), Trends: codes(e.Trends), Seasons: codes(e.Seasons)}
	}
	if s := m.Smoothing; s != nil {
		alpha, err := weight(s.Alpha)
		if err != nil {
			return out, fmt.Errorf("smoothing.alpha: %w", err)
		}
		beta, err := weight(s.Beta)
		if err != nil {
			return out, fmt.Errorf("smoothing.beta: %w", err)
		}
		out.Smoothing = &models.SmoothingOptions{Alpha: alpha, Beta: beta}
	}
	if r := m.Regression; r != nil {
		out.Regression = &models.RegressionOptions{AcrossShard: r.Pooled != nil && *r.Pooled}
		if r.Penalty != "" {
			p, err := strconv.ParseFloat(r.Penalty, 64)
			if err != nil || !(p > 0) || math.IsInf(p, 0) {
				return out, fmt.Errorf("regression.penalty: %q is not a decimal above 0", r.Penalty)
			}
			out.Regression.Penalty = p
		}
	}
	return out, nil
}

// renderFeatures maps spec.features onto the trainer's declaration (trainer/features.Config):
// the API's CamelCase names become the trainer's lower camel case (WeekOfYear -> weekOfYear,
// MutualInformation -> mutualInformation), event periodsBefore/periodsAfter become Lead/Lag,
// Fourier periods are parsed from their decimal strings, and the documented defaults are
// written out (windowStatistics Mean when windows are set, filter Correlation, embedded
// Lasso), so the run config says what the trainer does. Errors start with the field below
// spec.features.
func renderFeatures(in *forecastingv1alpha1.FeaturesSpec) (features.Config, error) {
	out := features.Config{
		Lags: ints(in.Lags), Windows: ints(in.Windows),
		Covariates: in.Covariates, CovariateLags: ints(in.CovariateLags),
		Selection: features.Selection{Filter: features.FilterCorrelation, Embedded: features.EmbeddedLasso},
	}
	for _, c := range in.Calendar {
		out.Calendar = append(out.Calendar, lowerFirst(string(c)))
	}
	for _, st := range in.WindowStatistics {
		out.Stats = append(out.Stats, lowerFirst(string(st)))
	}
	if len(out.Windows) > 0 && len(out.Stats) == 0 {
		out.Stats = []string{features.StatMean}
	}
	for _, e := range in.Events {
		out.Events = append(out.Events, features.Event{Name: e.Name, Dates: e.Dates, Lead: int(e.PeriodsBefore), Lag: int(e.PeriodsAfter)})
	}
	for i, ft := range in.Fourier {
		p, err := strconv.ParseFloat(ft.Period, 64)
		if err != nil || !(p >= 2) || math.IsInf(p, 0) {
			return out, fmt.Errorf("fourier[%d].period: %q is not a decimal of at least 2", i, ft.Period)
		}
		out.Fourier = append(out.Fourier, features.FourierTerm{Period: p, Order: int(ft.Order)})
	}
	if sel := in.Selection; sel != nil {
		if sel.Filter != "" {
			out.Selection.Filter = lowerFirst(string(sel.Filter))
		}
		if sel.Embedded != "" {
			out.Selection.Embedded = lowerFirst(string(sel.Embedded))
		}
		if sel.FilterKeep != nil {
			out.Selection.FilterKeep = int(*sel.FilterKeep)
		}
		if sel.MaxFeatures != nil {
			out.Selection.MaxFeatures = int(*sel.MaxFeatures)
		}
	}
	return out, nil
}

// lowerFirst lower-cases the first letter: the API's enum spelling to the trainer's.
func lowerFirst(s string) string {
	if s == "" {
		return s
	}
	return strings.ToLower(s[:1]) + s[1:]
}

func ints(in []int32) []int {
	var out []int
	for _, v := range in {
		out = append(out, int(v))
	}
	return out
}

// weight parses a smoothing weight in (0, 1]; the empty string is 0, "estimate it".
func weight(s string) (float64, error) {
	if s == "" {
		return 0, nil
	}
	w, err := strconv.ParseFloat(s, 64)
	if err != nil || !(w > 0 && w <= 1) {
		return 0, fmt.Errorf("%q is not a decimal in (0, 1]", s)
	}
	return w, nil
}

func codes(in []forecastingv1alpha1.ETSComponent) []string {
	var out []string
	for _, c := range in {
		out = append(out, string(c))
	}
	return out
}

// orDefault returns v, or def when v is the zero value.
func orDefault[T comparable](v, def T) T {
	var zero T
	if v == zero {
		return def
	}
	return v
}

// partitioning maps the API's layout promise to the trainer's names (runconfig.Source.Partitioning).
var partitioning = map[forecastingv1alpha1.Partitioning]string{
	forecastingv1alpha1.PartitionHashBuckets: runconfig.PartitionNone,
	forecastingv1alpha1.PartitionObjects:     runconfig.PartitionObject,
	forecastingv1alpha1.PartitionRowGroups:   runconfig.PartitionRowGroup,
}

// seriesMinPoints is the fewest new actuals one series needs before the trainer flags it as
// drifted. The portfolio's minEvaluatedPoints counts (series, period) actuals over the whole
// portfolio (the controller applies it to the run's sums, see driftVerdict); applied to each
// series it would make single-series flags impossible whenever it exceeds the horizon. A series
// is judged on min(portfolio minimum, horizon) points: a full horizon of new actuals, or fewer
// when the portfolio asks for fewer.
func seriesMinPoints(portfolioMin, horizon int) int {
	return max(1, min(portfolioMin, horizon))
}
