// Package render turns a ForecastPortfolio into the configuration of one run
// (trainer/runconfig): the controller calls it to write each run's ConfigMap, and
// `almanac-trainer render -f` and `local -f` call it on a portfolio file, so what a laptop runs
// is what the cluster would run.
//
// The run configuration speaks the API's language, so rendering is a copy, field for field.
// Defaults are not applied here: they are declared once, in the API's +kubebuilder:default
// markers, and applied by the apiserver (on create, and on every read from storage, so objects
// stored before a default was added get it too) or, offline, by the manifest loader from the
// same generated CRD. The portfolio given to RunConfig must carry them; Missing names any
// defaulted field that is absent. What render does resolve is what no marker can say: the week
// anchor of weekly data (Monday), the drift metric when the portfolio names none (the
// selection metric), the per-series drift minimum (see seriesMinPoints), and the hierarchy's
// shardBy and nonNegative when unset (see hierarchy).
package render

import (
	"fmt"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/runconfig"
)

// DefaultWeekAnchor is the weekday weekly periods start on when spec.source.weekAnchor is
// unset (ISO 8601 weeks), as the API documents for that field.
const DefaultWeekAnchor = "Monday"

// RunConfig resolves a defaulted portfolio, at its current generation, into the configuration
// of run; previousRun is the last published run (empty for the first run). The result passes
// runconfig.Config.Validate; an error names the portfolio and the field.
func RunConfig(fp *forecastingv1alpha1.ForecastPortfolio, run *forecastingv1alpha1.ForecastRun, previousRun string) (runconfig.Config, error) {
	spec := &fp.Spec
	if missing := Missing(spec); len(missing) > 0 {
		return runconfig.Config{}, fmt.Errorf("portfolio %s/%s: %v not set: the object was not defaulted from the CRD's schema (the apiserver does this; offline, load it with almanac-trainer validate)",
			fp.Namespace, fp.Name, missing)
	}
	c := runconfig.Config{
		APIVersion:  runconfig.APIVersion,
		Kind:        runconfig.Kind,
		Portfolio:   fp.Name,
		Namespace:   fp.Namespace,
		Run:         run.Name,
		Generation:  fp.Generation,
		Trigger:     string(run.Spec.Trigger),
		PreviousRun: previousRun,
		Source: runconfig.Source{
			URI:        spec.Source.URI,
			Format:     string(spec.Source.Format),
			Frequency:  string(spec.Source.Frequency),
			WeekAnchor: string(spec.Source.WeekAnchor),
			DateLayout: spec.Source.DateLayout,
			Columns: runconfig.Columns{
				Series:     spec.Source.Columns.Series,
				Date:       spec.Source.Columns.Date,
				Value:      spec.Source.Columns.Value,
				Covariates: spec.Source.Columns.Covariates,
			},
			NonNegative:  *spec.Source.NonNegative,
			Partitioning: string(spec.Source.Partitioning),
		},
		Output:        runconfig.Output{URI: spec.Output.URI, Format: string(spec.Output.Format)},
		Horizon:       int(spec.Horizon),
		QuantileWidth: string(spec.QuantileWidth),
		Selection: runconfig.Selection{
			Metric:            string(spec.Selection.Metric),
			BacktestOrigins:   int(spec.Selection.BacktestOrigins),
			BacktestStep:      int(spec.Selection.BacktestStep),
			BacktestRefit:     string(spec.Selection.BacktestRefit),
			Design:            string(spec.Selection.Design),
			DesignCostPercent: int(spec.Selection.DesignCostPercent),
		},
		Sharding: runconfig.Sharding{
			TargetSeriesPerShard: int(spec.Sharding.TargetSeriesPerShard),
			Buckets:              int(spec.Sharding.Buckets),
		},
		Drift: runconfig.Drift{
			Metric:             string(spec.Drift.Metric),
			ThresholdPercent:   int(spec.Drift.ThresholdPercent),
			MinEvaluatedPoints: seriesMinPoints(int(spec.Drift.MinEvaluatedPoints), int(spec.Horizon)),
		},
	}
	pub := spec.Publish
	c.Publish = &runconfig.Publish{
		MinForecastPercent:       int(*pub.MinForecastPercent),
		MinPreviousPercent:       int(*pub.MinPreviousPercent),
		MaxCarriedForwardPercent: int(*pub.MaxCarriedForwardPercent),
		MaxCarriedRuns:           int(*pub.MaxCarriedRuns),
		MaxStalePeriods:          int(*pub.MaxStalePeriods),
	}
	if c.Trigger == "" {
		c.Trigger = string(forecastingv1alpha1.TriggerManual)
	}
	if run.Spec.ScheduledTime != nil {
		c.ScheduledTime = run.Spec.ScheduledTime.UTC()
	}
	if spec.Source.Frequency == forecastingv1alpha1.Weekly && c.Source.WeekAnchor == "" {
		c.Source.WeekAnchor = DefaultWeekAnchor
	}
	if c.Drift.Metric == "" {
		c.Drift.Metric = c.Selection.Metric
	}
	for _, p := range spec.QuantilePercents {
		c.QuantilePercents = append(c.QuantilePercents, int(p))
	}
	if cb := spec.Selection.Combine; cb != nil {
		c.Selection.Combine = &runconfig.Combine{Top: int(cb.Top), Method: string(cb.Method), MarginPercent: int(cb.MarginPercent)}
	}
	for _, m := range spec.Models {
		c.Models = append(c.Models, model(m))
	}
	if spec.Features != nil {
		c.Features = featureSet(spec.Features)
	}
	if h := spec.Hierarchy; h != nil {
		c.Hierarchy = hierarchy(h, c.Source.NonNegative)
	}
	if err := c.Validate(); err != nil {
		return c, fmt.Errorf("portfolio %s/%s: spec.%w", fp.Namespace, fp.Name, err)
	}
	return c, nil
}

// Missing lists the fields with a schema default that are absent from spec (zero), by their
// path under spec. An object the apiserver returned has none; an object built in Go, or
// decoded from a file without the loader, may.
func Missing(spec *forecastingv1alpha1.ForecastPortfolioSpec) []string {
	var out []string
	check := func(absent bool, field string) {
		if absent {
			out = append(out, field)
		}
	}
	check(spec.Source.Format == "", "source.format")
	check(len(spec.Source.Columns.Series) == 0, "source.columns.series")
	check(spec.Source.Columns.Date == "", "source.columns.date")
	check(spec.Source.Columns.Value == "", "source.columns.value")
	check(spec.Source.NonNegative == nil, "source.nonNegative")
	check(spec.Source.Partitioning == "", "source.partitioning")
	check(spec.Output.Format == "", "output.format")
	check(spec.QuantilePercents == nil, "quantilePercents")
	check(spec.QuantileWidth == "", "quantileWidth")
	check(spec.Selection.Metric == "", "selection.metric")
	check(spec.Selection.BacktestOrigins == 0, "selection.backtestOrigins")
	check(spec.Selection.BacktestStep == 0, "selection.backtestStep")
	check(spec.Selection.BacktestRefit == "", "selection.backtestRefit")
	check(spec.Selection.Design == "", "selection.design")
	check(spec.Selection.DesignCostPercent == 0, "selection.designCostPercent")
	check(spec.Selection.Combine != nil && spec.Selection.Combine.Method == "", "selection.combine.method")
	check(spec.Sharding.TargetSeriesPerShard == 0, "sharding.targetSeriesPerShard")
	check(spec.Sharding.MaxParallel == 0, "sharding.maxParallel")
	check(spec.Sharding.ShareWeight == 0, "sharding.shareWeight")
	check(spec.Sharding.RetriesPerShard == nil, "sharding.retriesPerShard")
	check(spec.Sharding.MaxFailedShards == nil, "sharding.maxFailedShards")
	check(spec.Drift.ThresholdPercent == 0, "drift.thresholdPercent")
	check(spec.Drift.MinEvaluatedPoints == 0, "drift.minEvaluatedPoints")
	check(spec.Drift.Action == "", "drift.action")
	check(spec.Drift.CooldownSeconds == nil, "drift.cooldownSeconds")
	check(spec.Trainer.TTLSecondsAfterFinished == nil, "trainer.ttlSecondsAfterFinished")
	check(spec.Publish.MinForecastPercent == nil, "publish.minForecastPercent")
	check(spec.Publish.MinPreviousPercent == nil, "publish.minPreviousPercent")
	check(spec.Publish.MaxCarriedForwardPercent == nil, "publish.maxCarriedForwardPercent")
	check(spec.Publish.MaxCarriedRuns == nil, "publish.maxCarriedRuns")
	check(spec.Publish.MaxStalePeriods == nil, "publish.maxStalePeriods")
	check(spec.ConcurrencyPolicy == "", "concurrencyPolicy")
	check(spec.SuccessfulRunsHistoryLimit == nil, "successfulRunsHistoryLimit")
	check(spec.FailedRunsHistoryLimit == nil, "failedRunsHistoryLimit")
	check(spec.Hierarchy != nil && spec.Hierarchy.Method == "", "hierarchy.method")
	for i, m := range spec.Models {
		if m.Regression == nil || m.Regression.Boosting == nil {
			continue
		}
		b, at := m.Regression.Boosting, fmt.Sprintf("models[%d].regression.boosting.", i)
		check(b.Rounds == 0, at+"rounds")
		check(b.Shrinkage == "", at+"shrinkage")
		check(b.TreeDepth == 0, at+"treeDepth")
		check(b.MinLeafRows == 0, at+"minLeafRows")
		check(b.RowSamplePercent == 0, at+"rowSamplePercent")
	}
	return out
}

// model copies one zoo member.
func model(m forecastingv1alpha1.ModelSpec) runconfig.Model {
	out := runconfig.Model{Family: string(m.Family), Name: m.Name}
	if m.SeasonLength != nil {
		out.SeasonLength = int(*m.SeasonLength)
	}
	out.SeasonalPeriods = m.SeasonalPeriods
	if e := m.ETS; e != nil {
		out.ETS = &runconfig.ETS{Errors: codes(e.Errors), Trends: codes(e.Trends), Seasons: codes(e.Seasons)}
	}
	if s := m.Smoothing; s != nil {
		out.Smoothing = &runconfig.Smoothing{Alpha: s.Alpha, Beta: s.Beta}
	}
	if r := m.Regression; r != nil {
		out.Regression = &runconfig.Regression{Penalty: r.Penalty, Pooled: r.Pooled != nil && *r.Pooled}
		if b := r.Boosting; b != nil {
			out.Regression.Boosting = &runconfig.Boosting{Rounds: int(b.Rounds), Shrinkage: b.Shrinkage,
				TreeDepth: int(b.TreeDepth), MinLeafRows: int(b.MinLeafRows), RowSamplePercent: int(b.RowSamplePercent)}
		}
	}
	return out
}

// hierarchy copies spec.hierarchy, resolving what no marker can say: shardBy defaults to the
// first non-empty level (so that level's sub-trees stay on one shard), nonNegative to the
// source's.
func hierarchy(in *forecastingv1alpha1.HierarchySpec, sourceNonNegative bool) *runconfig.Hierarchy {
	out := &runconfig.Hierarchy{Method: string(in.Method), ShardBy: in.ShardBy, NonNegative: sourceNonNegative}
	for _, l := range in.Levels {
		out.Levels = append(out.Levels, append([]string{}, l...))
	}
	if len(out.ShardBy) == 0 {
		for _, l := range in.Levels {
			if len(l) > 0 {
				out.ShardBy = l
				break
			}
		}
	}
	if in.NonNegative != nil {
		out.NonNegative = *in.NonNegative
	}
	return out
}

// featureSet copies spec.features.
func featureSet(in *forecastingv1alpha1.FeaturesSpec) *runconfig.Features {
	out := &runconfig.Features{
		Lags: ints(in.Lags), Windows: ints(in.Windows),
		Covariates: in.Covariates, CovariateLags: ints(in.CovariateLags),
	}
	for _, c := range in.Calendar {
		out.Calendar = append(out.Calendar, string(c))
	}
	for _, st := range in.WindowStatistics {
		out.WindowStatistics = append(out.WindowStatistics, string(st))
	}
	for _, e := range in.Events {
		out.Events = append(out.Events, runconfig.Event{Name: e.Name, Dates: e.Dates, PeriodsBefore: int(e.PeriodsBefore), PeriodsAfter: int(e.PeriodsAfter)})
	}
	for _, ft := range in.Fourier {
		out.Fourier = append(out.Fourier, runconfig.Fourier{Period: ft.Period, Order: int(ft.Order)})
	}
	if sel := in.Selection; sel != nil {
		out.Selection = &runconfig.FeatureSelection{Filter: string(sel.Filter), Embedded: string(sel.Embedded)}
		if sel.FilterKeep != nil {
			out.Selection.FilterKeep = int(*sel.FilterKeep)
		}
		if sel.MaxFeatures != nil {
			out.Selection.MaxFeatures = int(*sel.MaxFeatures)
		}
	}
	return out
}

func ints(in []int32) []int {
	var out []int
	for _, v := range in {
		out = append(out, int(v))
	}
	return out
}

func codes(in []forecastingv1alpha1.ETSComponent) []string {
	var out []string
	for _, c := range in {
		out = append(out, string(c))
	}
	return out
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
