package controllers

import (
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
)

// fenwickPortfolio is the demo scenario's portfolio (Fenwick Lane Provisions, an invented
// regional distributor): weekly demand per item and depot. Only fields a test needs are set;
// the rest rely on the documented defaults.
func fenwickPortfolio() *forecastingv1alpha1.ForecastPortfolio {
	return &forecastingv1alpha1.ForecastPortfolio{
		ObjectMeta: metav1.ObjectMeta{Name: "fenwick-weekly", Namespace: "planning", Generation: 4},
		Spec: forecastingv1alpha1.ForecastPortfolioSpec{
			Schedule: "30 4 * * 1",
			TimeZone: ptr.To("Europe/London"),
			Source: forecastingv1alpha1.DataSource{
				URI:       "s3://fenwick-planning/demand/weekly/",
				Frequency: forecastingv1alpha1.Weekly,
				Columns: forecastingv1alpha1.ColumnMapping{
					Series: []string{"item", "depot"}, Date: "week_start", Value: "units",
				},
				CredentialsSecretRef: &forecastingv1alpha1.SecretReference{Name: "fenwick-s3"},
			},
			Output:           forecastingv1alpha1.DataOutput{URI: "s3://fenwick-planning/forecasts/"},
			Horizon:          12,
			QuantilePercents: []int32{5, 50, 95},
			Models: []forecastingv1alpha1.ModelSpec{
				{Family: forecastingv1alpha1.FamilyNaive},
				{Family: forecastingv1alpha1.FamilyETS, ETS: &forecastingv1alpha1.ETSSettings{Trends: []forecastingv1alpha1.ETSComponent{"N", "Ad"}}},
				{Family: forecastingv1alpha1.FamilyTSB, Name: "tsb-slow", SeasonLength: ptr.To[int32](1),
					Smoothing: &forecastingv1alpha1.SmoothingSettings{Alpha: "0.1", Beta: ".05"}},
			},
			Selection: forecastingv1alpha1.SelectionSpec{Combine: &forecastingv1alpha1.CombineSpec{Top: 2}},
			Drift:     forecastingv1alpha1.DriftSpec{ThresholdPercent: 125},
			Trainer:   forecastingv1alpha1.TrainerSpec{Image: "registry.example/almanac-trainer:test"},
		},
		Status: forecastingv1alpha1.ForecastPortfolioStatus{LastSuccessfulRun: "fenwick-weekly-29000000"},
	}
}

func fenwickRun(name string) *forecastingv1alpha1.ForecastRun {
	return &forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: "planning"},
		Spec: forecastingv1alpha1.ForecastRunSpec{
			PortfolioName: "fenwick-weekly",
			Trigger:       forecastingv1alpha1.TriggerSchedule,
			ScheduledTime: &metav1.Time{Time: time.Date(2026, 11, 30, 4, 30, 0, 0, time.UTC)},
		},
	}
}

func TestRenderConfig(t *testing.T) {
	fp := fenwickPortfolio()
	got, err := renderConfig(fp, fenwickRun("fenwick-weekly-29933550"), "fenwick-weekly-29000000")
	if err != nil {
		t.Fatal(err)
	}
	want := runconfig.Config{
		Portfolio: "fenwick-weekly", Namespace: "planning", Run: "fenwick-weekly-29933550",
		Generation: 4, Trigger: "Schedule",
		ScheduledTime: time.Date(2026, 11, 30, 4, 30, 0, 0, time.UTC),
		PreviousRun:   "fenwick-weekly-29000000",
		Source: runconfig.Source{
			URI: "s3://fenwick-planning/demand/weekly/", Format: "csv", Frequency: "weekly", WeekAnchor: "Monday",
			Columns:     runconfig.Columns{Series: []string{"item", "depot"}, Date: "week_start", Value: "units"},
			NonNegative: true,
		},
		Output:    runconfig.Output{URI: "s3://fenwick-planning/forecasts/", Format: "parquet"},
		Horizon:   12,
		Quantiles: []float64{0.05, 0.5, 0.95},
		Zoo: []models.Spec{
			{Family: "Naive"},
			{Family: "ETS", ETS: &models.ETSOptions{Trends: []string{"N", "Ad"}}},
			{Family: "TSB", Name: "tsb-slow", SeasonLength: 1, Smoothing: &models.SmoothingOptions{Alpha: 0.1, Beta: 0.05}},
		},
		Selection: runconfig.Selection{Metric: "MASE", Origins: 3, Step: 1, CombineTop: 2, CombineMethod: "mean", UpdateBacktest: true,
			Design: runconfig.DesignAuto, DesignCostLimit: 5},
		Sharding: runconfig.Sharding{TargetSeriesPerShard: 2000},
		// Portfolio minimum 100 over all series; one series is judged on a full horizon (12).
		Drift: runconfig.Drift{Metric: "MASE", ThresholdRatio: 1.25, MinEvaluatedPoints: 12},
		// spec.publish left out: the API's defaults.
		Publish: &runconfig.Publish{MinForecastPercent: 80, MinPreviousPercent: 80, MaxCarriedForwardPercent: 50},
	}
	if diff := cmp.Diff(want, got); diff != "" {
		t.Errorf("renderConfig (-want,+got):\n%s", diff)
	}
}

// spec.publish's percents reach the trainer as they are, 0 included (a check turned off).
func TestRenderPublishGuard(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Publish = forecastingv1alpha1.PublishSpec{MinForecastPercent: ptr.To[int32](0), MinPreviousPercent: ptr.To[int32](95),
		MaxCarriedForwardPercent: ptr.To[int32](100)}
	got, err := renderConfig(fp, fenwickRun("fenwick-weekly-29933550"), "")
	if err != nil {
		t.Fatal(err)
	}
	if want := (runconfig.Publish{MinPreviousPercent: 95, MaxCarriedForwardPercent: 100}); got.Publish == nil || *got.Publish != want {
		t.Fatalf("publish = %+v, want %+v", got.Publish, want)
	}
}

func TestRenderConfigErrors(t *testing.T) {
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
		"no horizon": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Horizon = 0 },
			want:   "portfolio planning/fenwick-weekly: horizon: must be >= 1",
		},
		"no models": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Models = nil },
			want:   "zoo: at least one model",
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			fp := fenwickPortfolio()
			tc.mutate(fp)
			_, err := renderConfig(fp, fenwickRun("r"), "")
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("err = %v, want it to contain %q", err, tc.want)
			}
		})
	}
}

func TestRenderConfigDefaults(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Source.Columns = forecastingv1alpha1.ColumnMapping{}
	fp.Spec.Source.Frequency = forecastingv1alpha1.Daily
	fp.Spec.Source.NonNegative = ptr.To(false)
	fp.Spec.QuantilePercents = nil
	fp.Spec.Selection = forecastingv1alpha1.SelectionSpec{Metric: forecastingv1alpha1.MetricRMSSE}
	run := fenwickRun("r")
	run.Spec.Trigger, run.Spec.ScheduledTime = "", nil
	got, err := renderConfig(fp, run, "")
	if err != nil {
		t.Fatal(err)
	}
	if diff := cmp.Diff(runconfig.Columns{Series: []string{"series"}, Date: "date", Value: "value"}, got.Source.Columns); diff != "" {
		t.Errorf("columns (-want,+got):\n%s", diff)
	}
	checks := map[string]struct{ got, want any }{
		"quantiles":       {got.Quantiles, []float64{0.1, 0.5, 0.9}},
		"trigger":         {got.Trigger, "Manual"},
		"scheduled time":  {got.ScheduledTime, time.Time{}},
		"week anchor":     {got.Source.WeekAnchor, ""},
		"non-negative":    {got.Source.NonNegative, false},
		"drift metric":    {got.Drift.Metric, "RMSSE"},
		"combine":         {got.Selection.CombineTop, 0},
		"combine margin":  {got.Selection.CombineMargin, 0.0},
		"update backtest": {got.Selection.UpdateBacktest, true},
		"design":          {got.Selection.Design, runconfig.DesignAuto},
		"design cost":     {got.Selection.DesignCostLimit, 5.0},
		"partitioning":    {got.Source.Partitioning, runconfig.PartitionNone},
		"buckets":         {got.Sharding.Buckets, 0},
	}
	for name, c := range checks {
		if diff := cmp.Diff(c.want, c.got); diff != "" {
			t.Errorf("%s (-want,+got):\n%s", name, diff)
		}
	}
}

// backtestRefit reaches the trainer: Once (the default) carries fits forward between backtest
// origins, EveryOrigin re-estimates at each.
func TestRenderBacktestRefit(t *testing.T) {
	for refit, want := range map[forecastingv1alpha1.BacktestRefit]bool{
		"": true, forecastingv1alpha1.RefitOnce: true, forecastingv1alpha1.RefitEveryOrigin: false,
	} {
		fp := fenwickPortfolio()
		fp.Spec.Selection.BacktestRefit = refit
		got, err := renderConfig(fp, fenwickRun("r"), "")
		if err != nil {
			t.Fatal(err)
		}
		if got.Selection.UpdateBacktest != want {
			t.Errorf("backtestRefit %q: updateBacktest %v, want %v", refit, got.Selection.UpdateBacktest, want)
		}
	}
}

// selection.design reaches the trainer in its lower-camel-case names (an unset field, which
// the API defaults to Auto, renders auto), and designCostPercent as a ratio.
func TestRenderDesign(t *testing.T) {
	for design, want := range map[forecastingv1alpha1.SelectionDesign]string{
		"": runconfig.DesignAuto, forecastingv1alpha1.DesignAuto: runconfig.DesignAuto,
		forecastingv1alpha1.DesignPerSeries: runconfig.DesignPerSeries, forecastingv1alpha1.DesignFixed: runconfig.DesignFixed,
	} {
		fp := fenwickPortfolio()
		fp.Spec.Selection.Design = design
		fp.Spec.Selection.DesignCostPercent = 250
		got, err := renderConfig(fp, fenwickRun("r"), "")
		if err != nil {
			t.Fatal(err)
		}
		if got.Selection.Design != want || got.Selection.DesignCostLimit != 2.5 {
			t.Errorf("design %q: rendered %q, cost limit %v; want %q, 2.5", design, got.Selection.Design, got.Selection.DesignCostLimit, want)
		}
		if err := got.Validate(); err != nil {
			t.Errorf("design %q: rendered config invalid: %v", design, err)
		}
	}
}

// combine.marginPercent reaches the trainer as a fraction of the best member's score: absent
// (the API default 0) renders 0, 10000 renders 100 (in effect a fixed combination).
func TestRenderCombineMargin(t *testing.T) {
	for percent, want := range map[int32]float64{0: 0, 25: 0.25, 10000: 100} {
		fp := fenwickPortfolio()
		fp.Spec.Selection.Combine.MarginPercent = percent
		got, err := renderConfig(fp, fenwickRun("r"), "")
		if err != nil {
			t.Fatal(err)
		}
		if got.Selection.CombineMargin != want {
			t.Errorf("marginPercent %d: combineMargin %v, want %v", percent, got.Selection.CombineMargin, want)
		}
	}
}

// TestRenderPartitioning checks the API's layout promise and bucket count reach the trainer
// under the trainer's names, and that the rendered config passes the trainer's own validation.
func TestRenderPartitioning(t *testing.T) {
	for api, want := range map[forecastingv1alpha1.Partitioning]string{
		forecastingv1alpha1.PartitionHashBuckets: runconfig.PartitionNone,
		forecastingv1alpha1.PartitionObjects:     runconfig.PartitionObject,
		forecastingv1alpha1.PartitionRowGroups:   runconfig.PartitionRowGroup,
	} {
		fp := fenwickPortfolio()
		fp.Spec.Source.Format = forecastingv1alpha1.FormatParquet
		fp.Spec.Source.Partitioning = api
		fp.Spec.Sharding.Buckets = 64
		got, err := renderConfig(fp, fenwickRun("r"), "")
		if err != nil {
			t.Fatalf("%s: %v", api, err)
		}
		if got.Source.Partitioning != want || got.Sharding.Buckets != 64 {
			t.Errorf("%s: partitioning %q buckets %d, want %q and 64", api, got.Source.Partitioning, got.Sharding.Buckets, want)
		}
		if err := got.Validate(); err != nil {
			t.Errorf("%s: rendered config refused by the trainer: %v", api, err)
		}
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

// promotionFeatures is the features block of the promotion sample (Fenwick Lane Provisions'
// weekly demand driven by promotions and price cuts).
func promotionFeatures() *forecastingv1alpha1.FeaturesSpec {
	return &forecastingv1alpha1.FeaturesSpec{
		Calendar:      []forecastingv1alpha1.CalendarFeature{forecastingv1alpha1.CalendarWeekOfYear, forecastingv1alpha1.CalendarPositionInMonth},
		Events:        []forecastingv1alpha1.EventSpec{{Name: "harvest-fair", Dates: []string{"2025-09-06", "2026-09-05"}, PeriodsBefore: 1}},
		Fourier:       []forecastingv1alpha1.FourierSpec{{Period: "52.18", Order: 3}},
		Lags:          []int32{1, 52},
		Windows:       []int32{4},
		Covariates:    []string{"promo_flag", "price"},
		CovariateLags: []int32{1},
		Selection: &forecastingv1alpha1.FeatureSelectionSpec{
			Filter: forecastingv1alpha1.FilterMutualInformation, FilterKeep: ptr.To[int32](12), MaxFeatures: ptr.To[int32](6),
		},
	}
}

func TestRenderFeatures(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Source.Columns.Covariates = []string{"promo_flag", "price"}
	fp.Spec.Features = promotionFeatures()
	fp.Spec.Models = append(fp.Spec.Models,
		forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyRidge, Regression: &forecastingv1alpha1.RegressionSettings{Penalty: "0.25", Pooled: ptr.To(true)}},
		forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyGradientBoosting})
	got, err := renderConfig(fp, fenwickRun("r"), "")
	if err != nil {
		t.Fatal(err)
	}
	want := &features.Config{
		Calendar:      []string{"weekOfYear", "positionInMonth"},
		Events:        []features.Event{{Name: "harvest-fair", Dates: []string{"2025-09-06", "2026-09-05"}, Lead: 1}},
		Fourier:       []features.FourierTerm{{Period: 52.18, Order: 3}},
		Lags:          []int{1, 52},
		Windows:       []int{4},
		Stats:         []string{"mean"}, // the documented default when windows are set
		Covariates:    []string{"promo_flag", "price"},
		CovariateLags: []int{1},
		Selection:     features.Selection{Filter: "mutualInformation", FilterKeep: 12, Embedded: "lasso", MaxFeatures: 6},
	}
	if diff := cmp.Diff(want, got.Features); diff != "" {
		t.Errorf("features (-want,+got):\n%s", diff)
	}
	if diff := cmp.Diff(&models.RegressionOptions{Penalty: 0.25, AcrossShard: true}, got.Zoo[3].Regression); diff != "" {
		t.Errorf("regression settings (-want,+got):\n%s", diff)
	}
	if got.Zoo[4].Regression != nil || got.Zoo[4].Features != nil {
		t.Errorf("GradientBoosting member got settings it did not declare: %+v", got.Zoo[4])
	}

	fp.Spec.Features = nil
	if got, err = renderConfig(fp, fenwickRun("r"), ""); err != nil || got.Features != nil {
		t.Errorf("no spec.features: Features = %+v, err %v; want nil (the trainer's defaults apply)", got.Features, err)
	}
}

func TestRenderFeaturesErrors(t *testing.T) {
	tests := map[string]struct {
		mutate func(*forecastingv1alpha1.ForecastPortfolio)
		want   string
	}{
		"Fourier period not a decimal": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Features.Fourier[0].Period = "yearly" },
			want:   `spec.features.fourier[0].period: "yearly" is not a decimal`,
		},
		"penalty not a decimal": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) {
				fp.Spec.Models[0] = forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyLasso, Regression: &forecastingv1alpha1.RegressionSettings{Penalty: "-2"}}
			},
			want: `spec.models[0].regression.penalty: "-2" is not a decimal above 0`,
		},
		// The apiserver's CEL rule refuses this; objects that skipped admission (built in Go,
		// or stored before the rule) still get a clear error instead of failing every shard.
		"covariate the input does not carry": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) {
				fp.Spec.Source.Columns.Covariates = []string{"promo_flag"}
			},
			want: `portfolio planning/fenwick-weekly: features.covariates[1]: "price" is not among source.columns.covariates`,
		},
		"order above half the period": {
			mutate: func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Features.Fourier[0].Order = 30 },
			want:   "features.fourier[0].order",
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			fp := fenwickPortfolio()
			fp.Spec.Source.Columns.Covariates = []string{"promo_flag", "price"}
			fp.Spec.Features = promotionFeatures()
			tc.mutate(fp)
			_, err := renderConfig(fp, fenwickRun("r"), "")
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("err = %v, want it to contain %q", err, tc.want)
			}
		})
	}
}

// TestFeatureNamesMatchTheTrainer ties the API's enums to the trainer's names: every calendar
// feature, window statistic, filter and embedded step the API accepts must render to a name
// trainer/features knows (the API may not import the trainer, so the lists are written twice).
func TestFeatureNamesMatchTheTrainer(t *testing.T) {
	cal := []forecastingv1alpha1.CalendarFeature{forecastingv1alpha1.CalendarDayOfWeek, forecastingv1alpha1.CalendarWeekOfYear,
		forecastingv1alpha1.CalendarMonth, forecastingv1alpha1.CalendarQuarter, forecastingv1alpha1.CalendarWeekend, forecastingv1alpha1.CalendarPositionInMonth}
	spec := &forecastingv1alpha1.FeaturesSpec{
		Calendar: cal, Windows: []int32{4},
		WindowStatistics: []forecastingv1alpha1.WindowStatistic{forecastingv1alpha1.WindowMean, forecastingv1alpha1.WindowMin,
			forecastingv1alpha1.WindowMax, forecastingv1alpha1.WindowStd},
	}
	for _, filter := range []forecastingv1alpha1.FeatureFilter{forecastingv1alpha1.FilterCorrelation, forecastingv1alpha1.FilterMutualInformation, forecastingv1alpha1.FilterNone} {
		for _, emb := range []forecastingv1alpha1.EmbeddedSelection{forecastingv1alpha1.EmbeddedLasso, forecastingv1alpha1.EmbeddedNone} {
			spec.Selection = &forecastingv1alpha1.FeatureSelectionSpec{Filter: filter, Embedded: emb}
			f, err := renderFeatures(spec)
			if err != nil {
				t.Fatal(err)
			}
			if err := f.Validate(); err != nil {
				t.Errorf("filter %s, embedded %s: the trainer refuses the rendered names: %v", filter, emb, err)
			}
			if len(f.Calendar) != len(features.CalendarNames) || len(f.Stats) != len(features.StatNames) {
				t.Errorf("rendered %v and %v, want all of %v and %v", f.Calendar, f.Stats, features.CalendarNames, features.StatNames)
			}
		}
	}
}

// TestRenderSeasonalPeriods: spec.models[i].seasonalPeriods become the member's decimal periods;
// a value out of range names its field.
func TestRenderSeasonalPeriods(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Models = append(fp.Spec.Models, forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyMSTLETS, SeasonalPeriods: []string{"7", "365.25"}})
	got, err := renderConfig(fp, fenwickRun("r"), "")
	if err != nil {
		t.Fatal(err)
	}
	last := got.Zoo[len(got.Zoo)-1]
	if diff := cmp.Diff([]float64{7, 365.25}, last.SeasonalPeriods); diff != "" || last.Family != models.FamilyMSTLETS {
		t.Errorf("periods (-want,+got):\n%s", diff)
	}
	fp.Spec.Models[len(fp.Spec.Models)-1].SeasonalPeriods = []string{"7", "1.5"}
	if _, err := renderConfig(fp, fenwickRun("r"), ""); err == nil || !strings.Contains(err.Error(), `seasonalPeriods[1]: "1.5" is not a decimal from 2 to 8784`) {
		t.Errorf("period 1.5: err %v", err)
	}
}
