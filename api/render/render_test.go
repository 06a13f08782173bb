package render

import (
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"k8s.io/utils/ptr"

	"almanac.dev/almanac/api/render/rendertest"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/runconfig"
)

func fenwickSpec() *forecastingv1alpha1.ForecastPortfolio { return rendertest.FenwickWeekly() }

func fenwickPortfolio() *forecastingv1alpha1.ForecastPortfolio {
	return rendertest.Default(rendertest.FenwickWeekly())
}

func fenwickRun(name string) *forecastingv1alpha1.ForecastRun { return rendertest.FenwickRun(name) }

// TestRunConfig: the run configuration is the defaulted spec under the same names, with the
// week anchor, the drift metric and the per-series drift minimum resolved.
func TestRunConfig(t *testing.T) {
	got, err := RunConfig(fenwickPortfolio(), fenwickRun("fenwick-weekly-29933550"), "fenwick-weekly-29000000")
	if err != nil {
		t.Fatal(err)
	}
	want := runconfig.Config{
		APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
		Portfolio: "fenwick-weekly", Namespace: "planning", Run: "fenwick-weekly-29933550",
		Generation: 4, Trigger: "Schedule",
		ScheduledTime: time.Date(2026, 11, 30, 4, 30, 0, 0, time.UTC),
		PreviousRun:   "fenwick-weekly-29000000",
		Source: runconfig.Source{
			URI: "s3://fenwick-planning/demand/weekly/", Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday",
			Columns:     runconfig.Columns{Series: []string{"item", "depot"}, Date: "week_start", Value: "units"},
			NonNegative: true, Partitioning: "HashBuckets",
		},
		Output:           runconfig.Output{URI: "s3://fenwick-planning/forecasts/", Format: "parquet"},
		Horizon:          12,
		QuantilePercents: []int{5, 50, 95},
		QuantileWidth:    "Backtest", // spec.quantileWidth left out: the API's default
		Models: []runconfig.Model{
			{Family: "Naive"},
			{Family: "ETS", ETS: &runconfig.ETS{Trends: []string{"N", "Ad"}}},
			{Family: "TSB", Name: "tsb-slow", SeasonLength: 1, Smoothing: &runconfig.Smoothing{Alpha: "0.1", Beta: ".05"}},
		},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 1, BacktestRefit: "Once",
			Combine: &runconfig.Combine{Top: 2, Method: "Mean"}, Design: "Auto", DesignCostPercent: 500},
		Sharding: runconfig.Sharding{TargetSeriesPerShard: 2000},
		// Portfolio minimum 100 over all series; one series is judged on a full horizon (12).
		Drift: runconfig.Drift{Metric: "MASE", ThresholdPercent: 125, MinEvaluatedPoints: 12},
		// spec.publish left out: the API's defaults.
		Publish: &runconfig.Publish{MinForecastPercent: 80, MinPreviousPercent: 80, MaxCarriedForwardPercent: 50, MaxCarriedRuns: 3},
	}
	if diff := cmp.Diff(want, got); diff != "" {
		t.Errorf("RunConfig (-want,+got):\n%s", diff)
	}
}

// TestRunConfigNeedsDefaults: a portfolio that did not go through the schema's defaulting
// (built in Go, or decoded from a file without the loader) is refused with the missing fields
// named, instead of running with zeros.
func TestRunConfigNeedsDefaults(t *testing.T) {
	_, err := RunConfig(fenwickSpec(), fenwickRun("r"), "")
	for _, field := range []string{"source.format", "source.nonNegative", "selection.backtestOrigins", "drift.minEvaluatedPoints", "not defaulted"} {
		if err == nil || !strings.Contains(err.Error(), field) {
			t.Errorf("err = %v, want %q named", err, field)
		}
	}
	if m := Missing(&fenwickPortfolio().Spec); len(m) != 0 {
		t.Errorf("a defaulted portfolio misses %v", m)
	}
	// A boosting block names each of its fields the defaulting would have filled.
	trees := rendertest.FenwickWeekly()
	trees.Spec.Models = append(trees.Spec.Models, forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyGradientBoosting,
		Regression: &forecastingv1alpha1.RegressionSettings{Boosting: &forecastingv1alpha1.BoostingSettings{Rounds: 50}}})
	m := Missing(&trees.Spec)
	for _, field := range []string{"shrinkage", "treeDepth", "minLeafRows", "rowSamplePercent"} {
		if !slices.Contains(m, "models[3].regression.boosting."+field) {
			t.Errorf("Missing = %v, want models[3].regression.boosting.%s named", m, field)
		}
	}
	if slices.Contains(m, "models[3].regression.boosting.rounds") {
		t.Errorf("Missing = %v names the rounds the portfolio sets", m)
	}
	if m := Missing(&rendertest.Default(trees).Spec); len(m) != 0 {
		t.Errorf("a defaulted portfolio with a boosting block misses %v", m)
	}
}

func TestRunConfigErrors(t *testing.T) {
	tests := map[string]struct {
		mutate func(*forecastingv1alpha1.ForecastPortfolio)
		want   string
	}{
		"smoothing weight is not a decimal": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Models[2].Smoothing.Alpha = "one" },
			want:   `spec.models[2].smoothing.alpha: "one" is not a decimal in (0, 1]`,
		},
		"smoothing weight above one": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Models[2].Smoothing.Beta = "1.5" },
			want:   `spec.models[2].smoothing.beta`,
		},
		"penalty not a decimal": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) {
				fp.Spec.Models[0] = forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyLasso, Regression: &forecastingv1alpha1.RegressionSettings{Penalty: "-2"}}
			},
			want: `spec.models[0].regression.penalty: "-2" is not a decimal above 0`,
		},
		"no horizon": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Horizon = 0 },
			want:   "portfolio planning/fenwick-weekly: spec.horizon: must be >= 1",
		},
		"no models": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Models = nil },
			want:   "spec.models: at least one model",
		},
		// The apiserver's CEL rule refuses this; objects that skipped admission still get a
		// clear error instead of failing every shard.
		"covariate the input does not carry": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) {
				fp.Spec.Features = &forecastingv1alpha1.FeaturesSpec{Covariates: []string{"price"}}
			},
			want: `spec.features.covariates[0]: "price" is not among source.columns.covariates`,
		},
		"Fourier period not a decimal": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) {
				fp.Spec.Features = &forecastingv1alpha1.FeaturesSpec{Fourier: []forecastingv1alpha1.FourierSpec{{Period: "yearly", Order: 1}}}
			},
			want: `spec.features.fourier[0].period: "yearly" is not a decimal`,
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			fp := fenwickPortfolio()
			tc.mutate(fp)
			_, err := RunConfig(fp, fenwickRun("r"), "")
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("err = %v, want it to contain %q", err, tc.want)
			}
		})
	}
}

// TestRunConfigResolves: what no marker can say is resolved here; the rest is the spec's.
func TestRunConfigResolves(t *testing.T) {
	fp := fenwickSpec()
	fp.Spec.Source.Columns = forecastingv1alpha1.ColumnMapping{}
	fp.Spec.Source.Frequency = forecastingv1alpha1.Daily
	fp.Spec.Source.NonNegative = ptr.To(false)
	fp.Spec.QuantilePercents = nil
	fp.Spec.QuantileWidth = forecastingv1alpha1.QuantileWidthModel
	fp.Spec.Selection = forecastingv1alpha1.SelectionSpec{Metric: forecastingv1alpha1.MetricRMSSE, BacktestRefit: forecastingv1alpha1.RefitEveryOrigin}
	rendertest.Default(fp)
	run := fenwickRun("r")
	run.Spec.Trigger, run.Spec.ScheduledTime = "", nil
	got, err := RunConfig(fp, run, "")
	if err != nil {
		t.Fatal(err)
	}
	checks := map[string]struct{ got, want any }{
		"columns":        {got.Source.Columns, runconfig.Columns{Series: []string{"series"}, Date: "date", Value: "value"}},
		"quantiles":      {got.QuantilePercents, []int{10, 50, 90}},
		"quantile width": {got.QuantileWidth, runconfig.QuantileWidthModel},
		"trigger":        {got.Trigger, "Manual"},
		"scheduled time": {got.ScheduledTime, time.Time{}},
		"week anchor":    {got.Source.WeekAnchor, ""}, // daily data has none
		"non-negative":   {got.Source.NonNegative, false},
		"drift metric":   {got.Drift.Metric, "RMSSE"}, // the selection metric when drift names none
		"combine":        {got.Selection.Combine, (*runconfig.Combine)(nil)},
		"refit":          {got.Selection.BacktestRefit, "EveryOrigin"},
		"partitioning":   {got.Source.Partitioning, runconfig.PartitionHashBuckets},
		"buckets":        {got.Sharding.Buckets, 0},
	}
	for name, c := range checks {
		if diff := cmp.Diff(c.want, c.got); diff != "" {
			t.Errorf("%s (-want,+got):\n%s", name, diff)
		}
	}
}

func TestRunConfigHierarchy(t *testing.T) {
	fp := fenwickSpec()
	fp.Spec.Source.NonNegative = ptr.To(false)
	fp.Spec.Hierarchy = &forecastingv1alpha1.HierarchySpec{Levels: []forecastingv1alpha1.HierarchyLevel{{}, {"depot"}, {"item"}}}
	rendertest.Default(fp)
	got, err := RunConfig(fp, fenwickRun("r"), "")
	if err != nil {
		t.Fatal(err)
	}
	want := &runconfig.Hierarchy{Levels: [][]string{{}, {"depot"}, {"item"}}, ShardBy: []string{"depot"}, Method: "MinTShrink", NonNegative: false}
	if diff := cmp.Diff(want, got.Hierarchy); diff != "" {
		t.Errorf("shardBy from the first non-empty level, nonNegative from the source (-want,+got):\n%s", diff)
	}
	fp.Spec.Hierarchy.ShardBy = []string{"item"}
	fp.Spec.Hierarchy.NonNegative = ptr.To(true)
	fp.Spec.Hierarchy.Method = forecastingv1alpha1.ReconcileStructuralScaling
	if got, err = RunConfig(fp, fenwickRun("r"), ""); err != nil {
		t.Fatal(err)
	}
	want = &runconfig.Hierarchy{Levels: [][]string{{}, {"depot"}, {"item"}}, ShardBy: []string{"item"}, Method: "StructuralScaling", NonNegative: true}
	if diff := cmp.Diff(want, got.Hierarchy); diff != "" {
		t.Errorf("as written (-want,+got):\n%s", diff)
	}
}

// promotionFeatures is the features block of the promotion sample (Fenwick Lane Provisions'
// weekly demand driven by promotions and price cuts).
func promotionFeatures() *forecastingv1alpha1.FeaturesSpec {
	return &forecastingv1alpha1.FeaturesSpec{
		Calendar:         []forecastingv1alpha1.CalendarFeature{forecastingv1alpha1.CalendarWeekOfYear, forecastingv1alpha1.CalendarPositionInMonth},
		Events:           []forecastingv1alpha1.EventSpec{{Name: "harvest-fair", Dates: []string{"2025-09-06", "2026-09-05"}, PeriodsBefore: 1}},
		Fourier:          []forecastingv1alpha1.FourierSpec{{Period: "52.18", Order: 3}},
		Lags:             []int32{1, 52},
		Windows:          []int32{4},
		WindowStatistics: []forecastingv1alpha1.WindowStatistic{forecastingv1alpha1.WindowMean, forecastingv1alpha1.WindowStd},
		Covariates:       []string{"promo_flag", "price"},
		CovariateLags:    []int32{1},
		Selection: &forecastingv1alpha1.FeatureSelectionSpec{
			Filter: forecastingv1alpha1.FilterMutualInformation, FilterKeep: ptr.To[int32](12), MaxFeatures: ptr.To[int32](6),
		},
	}
}

func TestRunConfigFeatures(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Source.Columns.Covariates = []string{"promo_flag", "price"}
	fp.Spec.Features = promotionFeatures()
	fp.Spec.Models = append(fp.Spec.Models,
		forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyRidge, Regression: &forecastingv1alpha1.RegressionSettings{Penalty: "0.25", Pooled: ptr.To(true)}},
		forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyGradientBoosting},
		forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyGradientBoosting, Name: "trees", Regression: &forecastingv1alpha1.RegressionSettings{
			Boosting: &forecastingv1alpha1.BoostingSettings{Rounds: 200, Shrinkage: "0.05", TreeDepth: 3, MinLeafRows: 8, RowSamplePercent: 80}}})
	got, err := RunConfig(fp, fenwickRun("r"), "")
	if err != nil {
		t.Fatal(err)
	}
	want := &runconfig.Features{
		Calendar:         []string{"WeekOfYear", "PositionInMonth"},
		Events:           []runconfig.Event{{Name: "harvest-fair", Dates: []string{"2025-09-06", "2026-09-05"}, PeriodsBefore: 1}},
		Fourier:          []runconfig.Fourier{{Period: "52.18", Order: 3}},
		Lags:             []int{1, 52},
		Windows:          []int{4},
		WindowStatistics: []string{"Mean", "Std"},
		Covariates:       []string{"promo_flag", "price"},
		CovariateLags:    []int{1},
		Selection:        &runconfig.FeatureSelection{Filter: "MutualInformation", FilterKeep: 12, MaxFeatures: 6},
	}
	if diff := cmp.Diff(want, got.Features); diff != "" {
		t.Errorf("features (-want,+got):\n%s", diff)
	}
	if diff := cmp.Diff(&runconfig.Regression{Penalty: "0.25", Pooled: true}, got.Models[3].Regression); diff != "" {
		t.Errorf("regression settings (-want,+got):\n%s", diff)
	}
	if got.Models[4].Regression != nil {
		t.Errorf("GradientBoosting member got settings it did not declare: %+v", got.Models[4])
	}
	wantTrees := &runconfig.Regression{Boosting: &runconfig.Boosting{Rounds: 200, Shrinkage: "0.05", TreeDepth: 3, MinLeafRows: 8, RowSamplePercent: 80}}
	if diff := cmp.Diff(wantTrees, got.Models[5].Regression); diff != "" {
		t.Errorf("boosting settings (-want,+got):\n%s", diff)
	}
	fp.Spec.Features = nil
	if got, err = RunConfig(fp, fenwickRun("r"), ""); err != nil || got.Features != nil {
		t.Errorf("no spec.features: Features = %+v, err %v; want nil (the trainer's defaults apply)", got.Features, err)
	}
}

// spec.publish's percents reach the trainer as they are, 0 included (a check turned off).
func TestRunConfigPublishGuard(t *testing.T) {
	fp := fenwickSpec()
	fp.Spec.Publish = forecastingv1alpha1.PublishSpec{MinForecastPercent: ptr.To[int32](0), MinPreviousPercent: ptr.To[int32](95),
		MaxCarriedForwardPercent: ptr.To[int32](100), MaxCarriedRuns: ptr.To[int32](0), MaxStalePeriods: ptr.To[int32](0)}
	got, err := RunConfig(rendertest.Default(fp), fenwickRun("fenwick-weekly-29933550"), "")
	if err != nil {
		t.Fatal(err)
	}
	if want := (runconfig.Publish{MinPreviousPercent: 95, MaxCarriedForwardPercent: 100}); got.Publish == nil || *got.Publish != want {
		t.Fatalf("publish = %+v, want %+v", got.Publish, want)
	}
}

func TestSeriesMinPoints(t *testing.T) {
	for _, c := range []struct{ portfolio, horizon, want int }{
		{100, 12, 12}, // the portfolio-wide count is larger than one series can reach in a horizon
		{5, 12, 5},    // the portfolio asks for fewer
		{1, 1, 1},
		{0, 8, 1}, // never zero: a series with no new actuals is never judged
	} {
		if got := seriesMinPoints(c.portfolio, c.horizon); got != c.want {
			t.Errorf("seriesMinPoints(%d, %d) = %d, want %d", c.portfolio, c.horizon, got, c.want)
		}
	}
}
