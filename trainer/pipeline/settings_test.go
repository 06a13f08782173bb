package pipeline

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	apiextensionsv1 "k8s.io/apiextensions-apiserver/pkg/apis/apiextensions/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/yaml"

	"almanac.dev/almanac/api/render"
	"almanac.dev/almanac/api/render/rendertest"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// TestCheckNamesTheField: each part's rule is applied by Check, before any input is read, and
// the error names the run configuration's field (the API's path under spec).
func TestCheckNamesTheField(t *testing.T) {
	for name, tc := range map[string]struct {
		edit func(*runconfig.Config)
		want string
	}{
		"frequency lower case": {func(c *runconfig.Config) { c.Source.Frequency = "daily" }, "source.frequency"},
		"week anchor":          {func(c *runconfig.Config) { c.Source.WeekAnchor = "Caturday" }, "source.weekAnchor"},
		"metric":               {func(c *runconfig.Config) { c.Selection.Metric = "R2" }, "selection.metric"},
		"drift metric":         {func(c *runconfig.Config) { c.Drift.Metric = "mase" }, "drift.metric"},
		"family":               {func(c *runconfig.Config) { c.Models[1].Family = "Prophecy" }, "models[1]"},
		"combine method lower case": {func(c *runconfig.Config) {
			c.Selection.Combine = &runconfig.Combine{Top: 2, Method: "median"}
		}, "selection.combine.method"},
		"ETS code": {func(c *runconfig.Config) {
			c.Models[1] = runconfig.Model{Family: "ETS", ETS: &runconfig.ETS{Trends: []string{"X"}}}
		}, "models[1] (ETS)"},
		"pooled on a family that cannot": {func(c *runconfig.Config) {
			c.Models[1] = runconfig.Model{Family: "ETS", Regression: &runconfig.Regression{Pooled: true}}
		}, "models[1]"},
		"boosting on a family without trees": {func(c *runconfig.Config) {
			c.Models[1] = runconfig.Model{Family: "Ridge", Regression: &runconfig.Regression{
				Boosting: &runconfig.Boosting{Rounds: 50, Shrinkage: "0.1", TreeDepth: 4, MinLeafRows: 5, RowSamplePercent: 100}}}
		}, "models[1].regression.boosting: only for family GradientBoosting"},
		"boosting out of the contract's range": {func(c *runconfig.Config) {
			c.Models[1] = runconfig.Model{Family: "GradientBoosting", Regression: &runconfig.Regression{
				Boosting: &runconfig.Boosting{Rounds: 50, Shrinkage: "0.1", TreeDepth: 13, MinLeafRows: 5, RowSamplePercent: 100}}}
		}, "models[1].regression.boosting.treeDepth"},
		"calendar name": {func(c *runconfig.Config) {
			c.Features = &runconfig.Features{Calendar: []string{"WeekOfYear", "dayOfWeek"}}
		}, "features.calendar[1]"},
		"window statistic": {func(c *runconfig.Config) {
			c.Features = &runconfig.Features{Windows: []int{4}, WindowStatistics: []string{"Median"}}
		}, "features.windowStatistics[0]"},
		"filter": {func(c *runconfig.Config) {
			c.Features = &runconfig.Features{Selection: &runconfig.FeatureSelection{Filter: "Chi2"}}
		}, "features.selection.filter"},
		"event before negative": {func(c *runconfig.Config) {
			c.Features = &runconfig.Features{Events: []runconfig.Event{{Name: "harvest-fair", Dates: []string{"2026-09-05"}, PeriodsBefore: -1}}}
		}, "features.events[0]"},
		"Fourier order above half the period": {func(c *runconfig.Config) {
			c.Features = &runconfig.Features{Fourier: []runconfig.Fourier{{Period: "52.18", Order: 30}}}
		}, "features.fourier[0].order"},
		"contract rule": {func(c *runconfig.Config) { c.Selection.BacktestRefit = "" }, "selection.backtestRefit"},
	} {
		t.Run(name, func(t *testing.T) {
			cfg := testConfig("flp-0001", "mem://x/", "mem://y/")
			tc.edit(cfg)
			_, err := Check(cfg)
			if !errors.Is(err, ErrConfig) || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("Check = %v, want a configuration error naming %q", err, tc.want)
			}
		})
	}
	st, err := Check(testConfig("flp-0001", "mem://x/", "mem://y/"))
	if err != nil {
		t.Fatal(err)
	}
	if st.Frequency != series.Daily || !slices.Equal(st.Selection.Levels, []float64{0.1, 0.5, 0.9}) || st.Drift.Threshold != 1.3 || st.Drift.Metric != backtest.MASE {
		t.Errorf("settings %+v", st)
	}
}

// TestEveryAPIEnumValueIsKnown ties the API's enums (read from the generated CRD) to the
// trainer: every value the apiserver accepts converts to an engine setting. The API may not
// import the engine, so the values are spelled in both; this test is what keeps them together.
func TestEveryAPIEnumValueIsKnown(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "config", "crd", "bases", "forecasting.almanac.dev_forecastportfolios.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	var crd apiextensionsv1.CustomResourceDefinition
	if err := yaml.Unmarshal(b, &crd); err != nil {
		t.Fatal(err)
	}
	spec := crd.Spec.Versions[0].Schema.OpenAPIV3Schema.Properties["spec"]
	enum := func(path ...string) []string {
		s := spec
		for _, p := range path {
			if p == "[]" {
				s = *s.Items.Schema
				continue
			}
			s = s.Properties[p]
		}
		var out []string
		for _, v := range s.Enum {
			var x string
			if err := yaml.Unmarshal(v.Raw, &x); err != nil {
				t.Fatal(err)
			}
			out = append(out, x)
		}
		if len(out) == 0 {
			t.Fatalf("no enum at spec.%s", strings.Join(path, "."))
		}
		return out
	}
	for _, f := range enum("source", "frequency") {
		if _, err := series.ParseFrequency(f); err != nil {
			t.Errorf("frequency %s: %v", f, err)
		}
	}
	for _, m := range append(enum("selection", "metric"), enum("drift", "metric")...) {
		if !backtest.Metric(m).Valid() {
			t.Errorf("metric %s is not an engine metric", m)
		}
	}
	for _, tc := range []struct {
		path []string
		m    map[string]string
	}{
		{[]string{"selection", "combine", "method"}, CombineMethods},
		{[]string{"selection", "design"}, stringKeys(DesignModes)},
		{[]string{"quantileWidth"}, stringKeys(QuantileWidths)},
		{[]string{"features", "calendar", "[]"}, CalendarFeatures},
		{[]string{"features", "windowStatistics", "[]"}, WindowStatistics},
		{[]string{"features", "selection", "filter"}, FeatureFilters},
		{[]string{"features", "selection", "embedded"}, EmbeddedSelections},
	} {
		api := enum(tc.path...)
		slices.Sort(api)
		if got := keys(tc.m); !slices.Equal(api, got) {
			t.Errorf("spec.%s: API enum %v, trainer knows %v", strings.Join(tc.path, "."), api, got)
		}
	}
	for _, v := range enum("source", "partitioning") {
		if !slices.Contains([]string{runconfig.PartitionHashBuckets, runconfig.PartitionObjects, runconfig.PartitionRowGroups}, v) {
			t.Errorf("partitioning %s unknown to the run configuration", v)
		}
	}
	for _, v := range enum("selection", "backtestRefit") {
		if v != runconfig.RefitOnce && v != runconfig.RefitEveryOrigin {
			t.Errorf("backtestRefit %s unknown to the run configuration", v)
		}
	}
	for _, v := range append(enum("source", "format"), enum("output", "format")...) {
		if v != runconfig.FormatCSV && v != runconfig.FormatParquet {
			t.Errorf("format %s unknown to the run configuration", v)
		}
	}
}

// TestDefaultsAreTheCRDs ties the defaults together: they are declared once, in the API's
// markers; the generated CRD carries them; render copies the defaulted spec; Check turns it
// into the engine's settings. A portfolio with only its required fields, defaulted from the
// CRD file as the apiserver does, must reach the engine with the CRD's values, and the engine's
// own fallbacks for zero settings (selection.DefaultOrigins, DefaultStep, DefaultMetric, used
// by the benchmark and the engine's tests) must agree with them.
func TestDefaultsAreTheCRDs(t *testing.T) {
	cfg, st := minimalSettings(t, "fenwick-minimal", forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyNaive}, forecastingv1alpha1.ModelSpec{Family: forecastingv1alpha1.FamilyETS})
	schema, err := rendertest.Schema()
	if err != nil {
		t.Fatal(err)
	}
	crd := func(path ...string) any {
		s := schema
		for _, p := range path {
			s = ptrTo(s.Properties[p])
		}
		if s.Default.Object == nil {
			t.Fatalf("spec.%s has no default in the CRD", strings.Join(path, "."))
		}
		return s.Default.Object
	}
	num := func(v any) float64 {
		switch x := v.(type) {
		case int64:
			return float64(x)
		case float64:
			return x
		}
		t.Fatalf("default %v (%T) is not a number", v, v)
		return 0
	}
	var percents []float64
	for _, q := range crd("spec", "quantilePercents").([]any) {
		percents = append(percents, num(q)/100)
	}
	checks := []struct {
		name      string
		got, want any
	}{
		{"quantilePercents", st.Selection.Levels, percents},
		{"selection.metric", string(st.Selection.Metric), crd("spec", "selection", "metric")},
		{"selection.backtestOrigins", float64(st.Selection.Origins), num(crd("spec", "selection", "backtestOrigins"))},
		{"selection.backtestStep", float64(st.Selection.Step), num(crd("spec", "selection", "backtestStep"))},
		{"selection.design", st.DesignMode, DesignModes[crd("spec", "selection", "design").(string)]},
		{"quantileWidth", st.CalibrateBands, QuantileWidths[crd("spec", "quantileWidth").(string)]},
		{"selection.designCostPercent", st.DesignCostLimit, num(crd("spec", "selection", "designCostPercent")) / 100},
		{"selection.backtestRefit", st.Selection.BacktestUpdate, crd("spec", "selection", "backtestRefit") == runconfig.RefitOnce},
		{"engine DefaultOrigins", float64(selection.DefaultOrigins), num(crd("spec", "selection", "backtestOrigins"))},
		{"engine DefaultStep", float64(selection.DefaultStep), num(crd("spec", "selection", "backtestStep"))},
		{"engine DefaultMetric", string(selection.DefaultMetric), crd("spec", "selection", "metric")},
		{"drift.thresholdPercent", st.Drift.Threshold, num(crd("spec", "drift", "thresholdPercent")) / 100},
		{"drift.metric", string(st.Drift.Metric), crd("spec", "selection", "metric")},
		{"drift.minEvaluatedPoints", float64(st.Drift.MinPoints), min(num(crd("spec", "drift", "minEvaluatedPoints")), 14)},
		{"sharding.targetSeriesPerShard", float64(cfg.Sharding.TargetSeriesPerShard), num(crd("spec", "sharding", "targetSeriesPerShard"))},
		{"source.format", cfg.Source.Format, crd("spec", "source", "format")},
		{"source.partitioning", cfg.Source.Partitioning, crd("spec", "source", "partitioning")},
		{"source.nonNegative", st.Selection.NonNegative, crd("spec", "source", "nonNegative")},
		{"source.columns.date", cfg.Source.Columns.Date, crd("spec", "source", "columns", "date")},
		{"source.columns.value", cfg.Source.Columns.Value, crd("spec", "source", "columns", "value")},
		{"output.format", cfg.Output.Format, crd("spec", "output", "format")},
		{"publish.minForecastPercent", cfg.PublishGuard().MinForecastPercent, num(crd("spec", "publish", "minForecastPercent"))},
		{"publish.minPreviousPercent", cfg.PublishGuard().MinPreviousPercent, num(crd("spec", "publish", "minPreviousPercent"))},
		{"publish.maxCarriedForwardPercent", cfg.PublishGuard().MaxCarriedForwardPercent, num(crd("spec", "publish", "maxCarriedForwardPercent"))},
		{"publish.maxCarriedRuns", cfg.PublishGuard().MaxCarriedRuns, num(crd("spec", "publish", "maxCarriedRuns"))},
		{"publish.maxStalePeriods", cfg.PublishGuard().MaxStalePeriods, num(crd("spec", "publish", "maxStalePeriods"))},
		{"runconfig.DefaultPublish", runconfig.DefaultPublish, *cfg.Publish},
	}
	for _, c := range checks {
		if fmt.Sprint(c.got) != fmt.Sprint(c.want) {
			t.Errorf("%s: the trainer runs with %v, the CRD's default is %v", c.name, c.got, c.want)
		}
	}
}

func ptrTo[T any](v T) *T { return &v }

// stringKeys gives a map the shape of the enum tables, for the key comparison.
func stringKeys[V any](m map[string]V) map[string]string {
	out := map[string]string{}
	for k := range m {
		out[k] = k
	}
	return out
}

// TestBoostingDefaultsAreTheCRDs: the settings of GradientBoosting's trees are declared in the
// markers of spec.models[].regression.boosting; a member without the block runs with
// models.DefaultBoosting (boost.DefaultParams), which must equal them, and a member with an
// empty block, defaulted by the CRD, reaches the engine with exactly those values.
func TestBoostingDefaultsAreTheCRDs(t *testing.T) {
	schema, err := rendertest.Schema()
	if err != nil {
		t.Fatal(err)
	}
	s := schema.Properties["spec"].Properties["models"].Items
	if s == nil {
		t.Fatal("spec.models has no items schema")
	}
	b := s.Properties["regression"].Properties["boosting"]
	def := func(field string) float64 {
		v := b.Properties[field].Default.Object
		switch x := v.(type) {
		case int64:
			return float64(x)
		case string:
			f, err := runconfig.Decimal(x, 0, 1, true)
			if err != nil {
				t.Fatalf("boosting.%s: %v", field, err)
			}
			return f
		}
		t.Fatalf("spec.models[].regression.boosting.%s has no default in the CRD (%v)", field, v)
		return 0
	}
	engine := models.DefaultBoosting()
	for _, c := range []struct {
		field string
		got   float64
		scale float64
	}{
		{"rounds", float64(engine.Rounds), 1},
		{"shrinkage", engine.Shrinkage, 1},
		{"treeDepth", float64(engine.TreeDepth), 1},
		{"minLeafRows", float64(engine.MinLeafRows), 1},
		{"rowSamplePercent", engine.RowFraction, 100},
	} {
		if want := def(c.field) / c.scale; c.got != want {
			t.Errorf("boosting.%s: the engine's default is %v, the CRD's %v", c.field, c.got, want)
		}
	}

	gb := forecastingv1alpha1.FamilyGradientBoosting
	_, st := minimalSettings(t, "fenwick-trees",
		forecastingv1alpha1.ModelSpec{Family: gb, Name: "trees-empty", Regression: &forecastingv1alpha1.RegressionSettings{Boosting: &forecastingv1alpha1.BoostingSettings{}}},
		forecastingv1alpha1.ModelSpec{Family: gb, Name: "trees-set", Regression: &forecastingv1alpha1.RegressionSettings{Boosting: &forecastingv1alpha1.BoostingSettings{Rounds: 1, Shrinkage: "1", RowSamplePercent: 50}}},
		forecastingv1alpha1.ModelSpec{Family: gb, Name: "trees-unset"})
	zoo := st.Selection.Zoo
	if got := *zoo[0].Regression.Boosting; got != engine {
		t.Errorf("an empty boosting block reaches the engine as %+v, want %+v", got, engine)
	}
	want := engine
	want.Rounds, want.Shrinkage, want.RowFraction = 1, 1, 0.5
	if got := *zoo[1].Regression.Boosting; got != want {
		t.Errorf("set values reach the engine as %+v, want %+v", got, want)
	}
	if zoo[2].Regression != nil {
		t.Errorf("a member without settings reaches the engine with %+v", zoo[2].Regression)
	}
}

// minimalSettings renders a portfolio with only its required fields and the given zoo, defaulted
// from the CRD file as the apiserver does, and checks it into the engine's settings.
func minimalSettings(t *testing.T, name string, zoo ...forecastingv1alpha1.ModelSpec) (runconfig.Config, Settings) {
	t.Helper()
	fp := rendertest.Default(&forecastingv1alpha1.ForecastPortfolio{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: "planning"},
		Spec: forecastingv1alpha1.ForecastPortfolioSpec{
			Schedule: "@daily",
			Source:   forecastingv1alpha1.DataSource{URI: "mem://flp-in/", Frequency: forecastingv1alpha1.Daily},
			Output:   forecastingv1alpha1.DataOutput{URI: "mem://flp-out/"},
			Horizon:  14,
			Models:   zoo,
			Trainer:  forecastingv1alpha1.TrainerSpec{Image: "registry.example/almanac-trainer:test"},
		},
	})
	cfg, err := render.RunConfig(fp, &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Name: name + "-1"}}, "")
	if err != nil {
		t.Fatal(err)
	}
	st, err := Check(&cfg)
	if err != nil {
		t.Fatal(err)
	}
	return cfg, st
}

// TestPooledFeaturesAreDescribed: the description of spec.models[].regression.pooled lists the
// lags a pooled member on hourly data takes without spec.features (features.PooledDefaults), so
// what `kubectl explain` says is what the engine does. Runs of three or more lags read "a-b".
func TestPooledFeaturesAreDescribed(t *testing.T) {
	schema, err := rendertest.Schema()
	if err != nil {
		t.Fatal(err)
	}
	d := schema.Properties["spec"].Properties["models"].Items.Properties["regression"].Properties["pooled"].Description
	lags := features.PooledDefaults(series.Hourly).Lags
	var parts []string
	for i := 0; i < len(lags); {
		j := i
		for j+1 < len(lags) && lags[j+1] == lags[j]+1 {
			j++
		}
		if j-i >= 2 {
			parts = append(parts, fmt.Sprintf("%d-%d", lags[i], lags[j]))
		} else {
			for k := i; k <= j; k++ {
				parts = append(parts, strconv.Itoa(lags[k]))
			}
		}
		i = j + 1
	}
	want := strings.Join(parts[:len(parts)-1], ", ") + " and " + parts[len(parts)-1]
	if !strings.Contains(strings.Join(strings.Fields(d), " "), want) {
		t.Errorf("spec.models[].regression.pooled does not list the pooled hourly lags %q:\n%s", want, d)
	}
}
