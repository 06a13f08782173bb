package v1alpha1_test

import (
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/util/yaml"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/envtest"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// validPortfolio returns a minimal valid portfolio as an unstructured object, so each invalid
// case can break exactly one thing without the Go types' omitempty hiding it.
func validPortfolio(name string) *unstructured.Unstructured {
	u := &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "forecasting.almanac.dev/v1alpha1",
		"kind":       "ForecastPortfolio",
		"metadata":   map[string]any{"name": name, "namespace": "default"},
		"spec": map[string]any{
			"schedule": "0 3 * * *",
			"source": map[string]any{
				"uri":       "file:///data/demand/",
				"frequency": "Daily",
				"columns":   map[string]any{"series": []any{"item", "depot"}},
			},
			"output":  map[string]any{"uri": "file:///data/forecasts/"},
			"horizon": int64(14),
			"models": []any{
				map[string]any{"family": "Naive"},
				map[string]any{"family": "ETS"},
				map[string]any{"family": "Croston"},
			},
			"trainer": map[string]any{"image": "almanac-trainer:test"},
		},
	}}
	return u
}

func validRun(name string) *unstructured.Unstructured {
	return &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "forecasting.almanac.dev/v1alpha1",
		"kind":       "ForecastRun",
		"metadata":   map[string]any{"name": name, "namespace": "default"},
		"spec":       map[string]any{"portfolioName": "demand", "trigger": "Manual"},
	}}
}

// set writes value at the dotted path under the object (creating maps on the way).
func set(u *unstructured.Unstructured, value any, path ...string) {
	Expect(unstructured.SetNestedField(u.Object, value, path...)).To(Succeed())
}

func del(u *unstructured.Unstructured, path ...string) {
	unstructured.RemoveNestedField(u.Object, path...)
}

// withFeatures returns a mutation that declares spec.features as given on a zoo with a Ridge
// member and an input carrying the promo_flag and price covariates, so that exactly the
// features block is what may be wrong.
func withFeatures(features map[string]any) func(u *unstructured.Unstructured) {
	return func(u *unstructured.Unstructured) {
		set(u, []any{"promo_flag", "price"}, "spec", "source", "columns", "covariates")
		set(u, []any{map[string]any{"family": "ETS"}, map[string]any{"family": "Ridge"}}, "spec", "models")
		set(u, features, "spec", "features")
	}
}

type invalidCase struct {
	mutate func(u *unstructured.Unstructured)
	// want are substrings the apiserver's message must contain: the field path and the reason.
	want []string
	run  bool
}

var _ = Describe("CRD validation", func() {
	It("accepts a minimal portfolio and fills the documented defaults", func() {
		u := validPortfolio("minimal")
		Expect(k8sClient.Create(ctx, u)).To(Succeed())
		var fp forecastingv1alpha1.ForecastPortfolio
		Expect(k8sClient.Get(ctx, client.ObjectKey{Namespace: "default", Name: "minimal"}, &fp)).To(Succeed())
		Expect(fp.Spec.ConcurrencyPolicy).To(Equal(forecastingv1alpha1.ForbidConcurrent))
		Expect(fp.Spec.QuantilePercents).To(Equal([]int32{10, 50, 90}))
		Expect(*fp.Spec.SuccessfulRunsHistoryLimit).To(Equal(int32(3)))
		Expect(*fp.Spec.FailedRunsHistoryLimit).To(Equal(int32(1)))
		Expect(fp.Spec.Source.Format).To(Equal(forecastingv1alpha1.FormatCSV))
		Expect(fp.Spec.Source.Columns.Date).To(Equal("date"))
		Expect(fp.Spec.Source.Columns.Value).To(Equal("value"))
		Expect(fp.Spec.Output.Format).To(Equal(forecastingv1alpha1.FormatParquet))
		Expect(fp.Spec.Selection.Metric).To(Equal(forecastingv1alpha1.MetricMASE))
		Expect(fp.Spec.Selection.BacktestOrigins).To(Equal(int32(3)))
		Expect(fp.Spec.Selection.BacktestRefit).To(Equal(forecastingv1alpha1.RefitOnce))
		Expect(fp.Spec.Selection.Design).To(Equal(forecastingv1alpha1.DesignAuto))
		Expect(fp.Spec.Selection.DesignCostPercent).To(Equal(int32(500)))
		Expect(fp.Spec.Sharding.TargetSeriesPerShard).To(Equal(int32(2000)))
		Expect(fp.Spec.Sharding.MaxParallel).To(Equal(int32(8)))
		Expect(fp.Spec.Drift.ThresholdPercent).To(Equal(int32(130)))
		Expect(fp.Spec.Drift.Action).To(Equal(forecastingv1alpha1.DriftReport))
		Expect(*fp.Spec.Publish.MinForecastPercent).To(Equal(int32(80)))
		Expect(*fp.Spec.Publish.MinPreviousPercent).To(Equal(int32(80)))
		Expect(*fp.Spec.Publish.MaxCarriedForwardPercent).To(Equal(int32(50)))
		Expect(*fp.Spec.Publish.MaxCarriedRuns).To(Equal(int32(3)))
		Expect(*fp.Spec.Publish.MaxStalePeriods).To(Equal(int32(0)))
	})

	It("accepts a full features declaration and keeps it as written", func() {
		u := validPortfolio("with-features")
		withFeatures(map[string]any{
			"calendar":         []any{"WeekOfYear", "Month"},
			"events":           []any{map[string]any{"name": "harvest-fair", "dates": []any{"2025-09-06", "2026-09-05"}, "periodsBefore": int64(1)}},
			"fourier":          []any{map[string]any{"period": "52.18", "order": int64(3)}},
			"lags":             []any{int64(1), int64(52)},
			"windows":          []any{int64(4), int64(13)},
			"windowStatistics": []any{"Mean", "Std"},
			"covariates":       []any{"promo_flag", "price"},
			"covariateLags":    []any{int64(1)},
			"selection":        map[string]any{"filter": "Correlation", "filterKeep": int64(12), "embedded": "Lasso", "maxFeatures": int64(8)},
		})(u)
		set(u, []any{map[string]any{"family": "ETS"}, map[string]any{"family": "Ridge", "regression": map[string]any{"penalty": "0.25", "pooled": true}},
			map[string]any{"family": "GradientBoosting"}}, "spec", "models")
		Expect(k8sClient.Create(ctx, u)).To(Succeed())
		var fp forecastingv1alpha1.ForecastPortfolio
		Expect(k8sClient.Get(ctx, client.ObjectKeyFromObject(u), &fp)).To(Succeed())
		f := fp.Spec.Features
		Expect(f).NotTo(BeNil())
		Expect(f.Fourier).To(Equal([]forecastingv1alpha1.FourierSpec{{Period: "52.18", Order: 3}}))
		Expect(f.Events[0].Dates).To(Equal([]string{"2025-09-06", "2026-09-05"}))
		Expect(*f.Selection.MaxFeatures).To(Equal(int32(8)))
		Expect(fp.Spec.Models[1].Regression.Penalty).To(Equal("0.25"))
	})

	It("defaults an empty boosting block to the documented values and keeps set ones", func() {
		u := validPortfolio("with-boosting")
		withFeatures(map[string]any{"lags": []any{int64(1)}})(u)
		set(u, []any{
			map[string]any{"family": "GradientBoosting", "name": "trees-default", "regression": map[string]any{"boosting": map[string]any{}}},
			map[string]any{"family": "GradientBoosting", "name": "trees-low", "regression": map[string]any{"pooled": true,
				"boosting": map[string]any{"rounds": int64(1), "shrinkage": "1", "treeDepth": int64(1), "minLeafRows": int64(1), "rowSamplePercent": int64(1)}}},
			map[string]any{"family": "GradientBoosting", "name": "trees-high",
				"regression": map[string]any{"boosting": map[string]any{"rounds": int64(5000), "shrinkage": "0.000001", "treeDepth": int64(12), "minLeafRows": int64(1000), "rowSamplePercent": int64(100)}}},
			map[string]any{"family": "GradientBoosting", "name": "trees-unset"},
		}, "spec", "models")
		offline := u.DeepCopy()
		offline.SetName("with-boosting-offline")
		expectSameAsApiserver(offline) // offline_test.go: the same defaults without a cluster
		Expect(k8sClient.Create(ctx, u)).To(Succeed())
		var fp forecastingv1alpha1.ForecastPortfolio
		Expect(k8sClient.Get(ctx, client.ObjectKeyFromObject(u), &fp)).To(Succeed())
		Expect(*fp.Spec.Models[0].Regression.Boosting).To(Equal(forecastingv1alpha1.BoostingSettings{
			Rounds: 500, Shrinkage: "0.1", TreeDepth: 4, MinLeafRows: 5, RowSamplePercent: 100}))
		Expect(*fp.Spec.Models[1].Regression.Boosting).To(Equal(forecastingv1alpha1.BoostingSettings{
			Rounds: 1, Shrinkage: "1", TreeDepth: 1, MinLeafRows: 1, RowSamplePercent: 1}))
		Expect(fp.Spec.Models[2].Regression.Boosting.Shrinkage).To(Equal("0.000001"))
		Expect(fp.Spec.Models[3].Regression).To(BeNil())
	})

	It("accepts a hierarchy over the key columns and defaults its method", func() {
		u := validPortfolio("with-hierarchy")
		set(u, map[string]any{"levels": []any{[]any{"depot"}, []any{"item"}, []any{}}}, "spec", "hierarchy")
		Expect(k8sClient.Create(ctx, u)).To(Succeed())
		var fp forecastingv1alpha1.ForecastPortfolio
		Expect(k8sClient.Get(ctx, client.ObjectKeyFromObject(u), &fp)).To(Succeed())
		Expect(fp.Spec.Hierarchy.Levels).To(Equal([]forecastingv1alpha1.HierarchyLevel{{"depot"}, {"item"}, {}}))
		Expect(fp.Spec.Hierarchy.Method).To(Equal(forecastingv1alpha1.ReconcileMinTShrink))
		Expect(fp.Spec.Hierarchy.NonNegative).To(BeNil(), "unset: render takes source.nonNegative")
		other := validPortfolio("with-hierarchy-offline")
		other.Object["spec"].(map[string]any)["hierarchy"] = u.Object["spec"].(map[string]any)["hierarchy"]
		expectSameAsApiserver(other)
	})

	It("defaults the combination margin to 0 and keeps 10000 as written", func() {
		for name, margin := range map[string]any{"combine-default": nil, "combine-fixed": int64(10000)} {
			u := validPortfolio(name)
			set(u, map[string]any{"top": int64(2)}, "spec", "selection", "combine")
			if margin != nil {
				set(u, margin, "spec", "selection", "combine", "marginPercent")
			}
			Expect(k8sClient.Create(ctx, u)).To(Succeed())
			// Read back untyped: the Go field's zero value would hide a missing default.
			got := &unstructured.Unstructured{}
			got.SetGroupVersionKind(u.GroupVersionKind())
			Expect(k8sClient.Get(ctx, client.ObjectKeyFromObject(u), got)).To(Succeed())
			v, found, err := unstructured.NestedInt64(got.Object, "spec", "selection", "combine", "marginPercent")
			Expect(err).NotTo(HaveOccurred())
			Expect(found).To(BeTrue(), "%s: spec.selection.combine.marginPercent was not defaulted", name)
			want := int64(0)
			if margin != nil {
				want = margin.(int64)
			}
			Expect(v).To(Equal(want), name)
		}
	})

	It("accepts every sample in config/samples", func() {
		files, err := filepath.Glob(filepath.Join(repoRoot, "config", "samples", "forecasting_*.yaml"))
		Expect(err).NotTo(HaveOccurred())
		Expect(files).NotTo(BeEmpty())
		for _, f := range files {
			b, err := os.ReadFile(f)
			Expect(err).NotTo(HaveOccurred())
			dec := yaml.NewYAMLOrJSONDecoder(bytes.NewReader(b), 4096)
			for {
				u := &unstructured.Unstructured{}
				if err := dec.Decode(&u.Object); err != nil {
					break
				}
				if len(u.Object) == 0 {
					continue
				}
				_, hasStatus := u.Object["status"]
				Expect(hasStatus).To(BeFalse(), "%s: samples carry no status", f)
				Expect(k8sClient.Create(ctx, u)).To(Succeed(), "sample %s (%s)", f, u.GetName())
			}
		}
	})

	DescribeTable("rejects invalid objects with a message naming the field",
		func(c invalidCase) {
			u := validPortfolio("invalid")
			if c.run {
				u = validRun("invalid-run")
			}
			c.mutate(u)
			err := k8sClient.Create(ctx, u, client.DryRunAll)
			Expect(err).To(HaveOccurred(), "the apiserver accepted %v", u.Object["spec"])
			Expect(apierrors.IsInvalid(err)).To(BeTrue(), "want an Invalid error, got %v", err)
			for _, w := range c.want {
				Expect(err.Error()).To(ContainSubstring(w))
			}
			expectOfflineRefusesSameFields(u, err) // offline_test.go
		},
		Entry("schedule with four fields", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "0 3 * *", "spec", "schedule") },
			want:   []string{"spec.schedule", "5 fields"}}),
		Entry("schedule carrying a time zone", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "CRON_TZ=UTC 0 3 * * *", "spec", "schedule") },
			want:   []string{"spec.schedule", "use spec.timeZone"}}),
		Entry("schedule missing", invalidCase{
			mutate: func(u *unstructured.Unstructured) { del(u, "spec", "schedule") },
			want:   []string{"spec.schedule", "Required"}}),
		Entry("time zone with a space", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "Europe/New York", "spec", "timeZone") },
			want:   []string{"spec.timeZone"}}),
		Entry("row-group partitioning of CSV input", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, "csv", "spec", "source", "format")
				set(u, "RowGroups", "spec", "source", "partitioning")
			},
			want: []string{"spec.source", "partitioning RowGroups needs format parquet"}}),
		Entry("unknown partitioning", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "ByDepot", "spec", "source", "partitioning") },
			want:   []string{"spec.source.partitioning", `"HashBuckets", "Objects", "RowGroups"`}}),
		Entry("bucket count not a power of two", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(48), "spec", "sharding", "buckets") },
			want:   []string{"spec.sharding.buckets", "power of two"}}),
		Entry("unknown concurrency policy", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "Allow", "spec", "concurrencyPolicy") },
			want:   []string{"spec.concurrencyPolicy", `"Forbid", "Replace"`}}),
		Entry("zero starting deadline", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(0), "spec", "startingDeadlineSeconds") },
			want:   []string{"spec.startingDeadlineSeconds", "greater than or equal to 1"}}),
		Entry("negative history limit", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(-1), "spec", "successfulRunsHistoryLimit") },
			want:   []string{"spec.successfulRunsHistoryLimit"}}),
		Entry("source over http", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "http://example.com/d.csv", "spec", "source", "uri") },
			want:   []string{"spec.source.uri", "must start with file://"}}),
		Entry("source with a parent path segment", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "file:///data/../etc/", "spec", "source", "uri") },
			want:   []string{"spec.source.uri", "'..'"}}),
		Entry("unknown input format", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "xlsx", "spec", "source", "format") },
			want:   []string{"spec.source.format", `"csv", "parquet"`}}),
		Entry("unknown frequency", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "Fortnightly", "spec", "source", "frequency") },
			want:   []string{"spec.source.frequency"}}),
		Entry("repeated series key column", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{"item", "item"}, "spec", "source", "columns", "series")
			},
			want: []string{"spec.source.columns.series", "must be unique"}}),
		Entry("covariate repeating a key column", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{"price", "depot"}, "spec", "source", "columns", "covariates")
			},
			want: []string{"spec.source.columns", "covariates must not repeat a series key column"}}),
		Entry("date and value the same column", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "date", "spec", "source", "columns", "value") },
			want:   []string{"spec.source.columns", "date and value must be different"}}),
		Entry("secret reference with an invalid name", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, "Other_NS/creds", "spec", "source", "credentialsSecretRef", "name")
			},
			want: []string{"spec.source.credentialsSecretRef.name"}}),
		Entry("output missing", invalidCase{
			mutate: func(u *unstructured.Unstructured) { del(u, "spec", "output", "uri") },
			want:   []string{"spec.output.uri", "Required"}}),
		Entry("zero horizon", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(0), "spec", "horizon") },
			want:   []string{"spec.horizon", "greater than or equal to 1"}}),
		Entry("horizon too long", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(5000), "spec", "horizon") },
			want:   []string{"spec.horizon", "less than or equal to 1000"}}),
		Entry("quantiles out of order", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, []any{int64(90), int64(10)}, "spec", "quantilePercents") },
			want:   []string{"spec.quantilePercents", "strictly increasing"}}),
		Entry("repeated quantile", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, []any{int64(50), int64(50)}, "spec", "quantilePercents") },
			want:   []string{"spec.quantilePercents", "strictly increasing"}}),
		Entry("quantile at 0 percent", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, []any{int64(0), int64(50)}, "spec", "quantilePercents") },
			want:   []string{"spec.quantilePercents[0]", "greater than or equal to 1"}}),
		Entry("quantile at 100 percent", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, []any{int64(50), int64(100)}, "spec", "quantilePercents") },
			want:   []string{"spec.quantilePercents[1]", "less than or equal to 99"}}),
		Entry("empty zoo", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, []any{}, "spec", "models") },
			want:   []string{"spec.models"}}),
		Entry("two members with one name", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "ETS"}, map[string]any{"family": "ETS"}}, "spec", "models")
			},
			want: []string{"spec.models", "unique names"}}),
		Entry("unknown model family", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "NeuralNet"}}, "spec", "models")
			},
			want: []string{"spec.models[0].family", "Unsupported value"}}),
		Entry("ETS settings on Theta", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "Theta", "ets": map[string]any{"trends": []any{"N"}}}}, "spec", "models")
			},
			want: []string{"spec.models[0]", "ets settings are only for family ETS"}}),
		Entry("seasonal periods on Theta", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "Theta", "seasonalPeriods": []any{"24"}}}, "spec", "models")
			},
			want: []string{"spec.models[0]", "seasonalPeriods are only for families MSTLETS"}}),
		Entry("seasonal period not a decimal", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "MSTLETS", "seasonalPeriods": []any{"weekly"}}}, "spec", "models")
			},
			want: []string{"spec.models[0].seasonalPeriods[0]", "should match"}}),
		Entry("multiplicative ETS trend", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "ETS", "ets": map[string]any{"trends": []any{"M"}}}}, "spec", "models")
			},
			want: []string{"spec.models[0].ets.trends", "N, A or Ad"}}),
		Entry("smoothing weight above one", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "Croston", "smoothing": map[string]any{"alpha": "1.5"}}}, "spec", "models")
			},
			want: []string{"spec.models[0].smoothing.alpha"}}),
		Entry("zero smoothing weight", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "SBA", "smoothing": map[string]any{"alpha": "0.0"}}}, "spec", "models")
			},
			want: []string{"spec.models[0].smoothing.alpha", "greater than 0"}}),
		Entry("beta on Croston", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "Croston", "smoothing": map[string]any{"beta": "0.1"}}}, "spec", "models")
			},
			want: []string{"spec.models[0]", "smoothing.beta is only for family TSB"}}),
		Entry("zero season length", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "ETS", "seasonLength": int64(0)}}, "spec", "models")
			},
			want: []string{"spec.models[0].seasonLength"}}),
		Entry("no backtest origins", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(0), "spec", "selection", "backtestOrigins") },
			want:   []string{"spec.selection.backtestOrigins"}}),
		Entry("an unknown backtest refit", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "Sometimes", "spec", "selection", "backtestRefit") },
			want:   []string{"spec.selection.backtestRefit", "Unsupported value", "Once", "EveryOrigin"}}),
		Entry("an unknown design", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "Sometimes", "spec", "selection", "design") },
			want:   []string{"spec.selection.design", "Unsupported value", "Auto", "PerSeries", "Fixed"}}),
		Entry("a design cost budget below the simplest design", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(99), "spec", "selection", "designCostPercent") },
			want:   []string{"spec.selection.designCostPercent", "greater than or equal to 100"}}),
		Entry("output under the input prefix", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "file:///data/demand/forecasts/", "spec", "output", "uri") },
			want:   []string{"spec", "output.uri and source.uri must not overlap"}}),
		Entry("input under the output prefix", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "file:///data", "spec", "output", "uri") },
			want:   []string{"spec", "output.uri and source.uri must not overlap"}}),
		Entry("a publish guard above 100%", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(101), "spec", "publish", "minForecastPercent") },
			want:   []string{"spec.publish.minForecastPercent", "less than or equal to 100"}}),
		Entry("a negative carried-forward cap", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(-1), "spec", "publish", "maxCarriedForwardPercent") },
			want:   []string{"spec.publish.maxCarriedForwardPercent", "greater than or equal to 0"}}),
		Entry("a combination with design PerSeries", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, "PerSeries", "spec", "selection", "design")
				set(u, map[string]any{"top": int64(2)}, "spec", "selection", "combine")
			},
			want: []string{"spec.selection", "selection.combine is not used with design PerSeries"}}),
		Entry("combining one member", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(1), "spec", "selection", "combine", "top") },
			want:   []string{"spec.selection.combine.top", "greater than or equal to 2"}}),
		Entry("combining more members than the zoo has", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(5), "spec", "selection", "combine", "top") },
			want:   []string{"spec", "selection.combine.top must not exceed the number of models"}}),
		Entry("a combination margin above 10000 percent", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, map[string]any{"top": int64(2), "marginPercent": int64(10001)}, "spec", "selection", "combine")
			},
			want: []string{"spec.selection.combine.marginPercent", "less than or equal to 10000"}}),
		Entry("a negative combination margin", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, map[string]any{"top": int64(2), "marginPercent": int64(-1)}, "spec", "selection", "combine")
			},
			want: []string{"spec.selection.combine.marginPercent", "greater than or equal to 0"}}),
		Entry("no parallel pods", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(0), "spec", "sharding", "maxParallel") },
			want:   []string{"spec.sharding.maxParallel"}}),
		Entry("no series per shard", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(0), "spec", "sharding", "targetSeriesPerShard") },
			want:   []string{"spec.sharding.targetSeriesPerShard"}}),
		Entry("drift threshold not above 100 percent", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, int64(100), "spec", "drift", "thresholdPercent") },
			want:   []string{"spec.drift.thresholdPercent", "greater than or equal to 101"}}),
		Entry("unknown drift action", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, "Page", "spec", "drift", "action") },
			want:   []string{"spec.drift.action", `"Report", "Retrain"`}}),
		Entry("no trainer image", invalidCase{
			mutate: func(u *unstructured.Unstructured) { del(u, "spec", "trainer", "image") },
			want:   []string{"spec.trainer.image", "Required"}}),
		// spec.features and the regression settings (api/v1alpha1/features_types.go).
		Entry("target lag of zero", invalidCase{
			mutate: withFeatures(map[string]any{"lags": []any{int64(0), int64(52)}}),
			want:   []string{"spec.features.lags[0]", "greater than or equal to 1"}}),
		Entry("repeated target lag", invalidCase{
			mutate: withFeatures(map[string]any{"lags": []any{int64(1), int64(1)}}),
			want:   []string{"spec.features.lags[1]", "Duplicate value"}}),
		Entry("window of one period", invalidCase{
			mutate: withFeatures(map[string]any{"windows": []any{int64(1)}}),
			want:   []string{"spec.features.windows[0]", "greater than or equal to 2"}}),
		Entry("unknown window statistic", invalidCase{
			mutate: withFeatures(map[string]any{"windows": []any{int64(4)}, "windowStatistics": []any{"Median"}}),
			want:   []string{"spec.features.windowStatistics[0]", `"Mean", "Min", "Max", "Std"`}}),
		Entry("window statistics without windows", invalidCase{
			mutate: withFeatures(map[string]any{"windowStatistics": []any{"Mean"}}),
			want:   []string{"spec.features", "windowStatistics needs windows"}}),
		Entry("unknown calendar feature", invalidCase{
			mutate: withFeatures(map[string]any{"calendar": []any{"Season"}}),
			want:   []string{"spec.features.calendar[0]", "Unsupported value"}}),
		Entry("Fourier order above half the period", invalidCase{
			mutate: withFeatures(map[string]any{"fourier": []any{map[string]any{"period": "12", "order": int64(7)}}}),
			want:   []string{"spec.features.fourier[0]", "order must be at most period/2"}}),
		Entry("Fourier period below 2", invalidCase{
			mutate: withFeatures(map[string]any{"fourier": []any{map[string]any{"period": "1.5", "order": int64(1)}}}),
			want:   []string{"spec.features.fourier[0].period", "period must be at least 2"}}),
		Entry("Fourier period not a decimal", invalidCase{
			mutate: withFeatures(map[string]any{"fourier": []any{map[string]any{"period": "1e3", "order": int64(1)}}}),
			want:   []string{"spec.features.fourier[0].period", "should match"}}),
		Entry("event date that does not exist", invalidCase{
			mutate: withFeatures(map[string]any{"events": []any{map[string]any{"name": "harvest-fair", "dates": []any{"2026-02-30"}}}}),
			want:   []string{"spec.features.events[0].dates[0]", "date"}}),
		Entry("event date not written YYYY-MM-DD", invalidCase{
			mutate: withFeatures(map[string]any{"events": []any{map[string]any{"name": "harvest-fair", "dates": []any{"2026-9-5"}}}}),
			want:   []string{"spec.features.events[0].dates[0]", "should match"}}),
		Entry("two events with one name", invalidCase{
			mutate: withFeatures(map[string]any{"events": []any{
				map[string]any{"name": "harvest-fair", "dates": []any{"2026-09-05"}},
				map[string]any{"name": "harvest-fair", "dates": []any{"2027-09-04"}}}}),
			want: []string{"spec.features.events[1]", "Duplicate value"}}),
		Entry("event without dates", invalidCase{
			mutate: withFeatures(map[string]any{"events": []any{map[string]any{"name": "harvest-fair", "dates": []any{}}}}),
			want:   []string{"spec.features.events[0].dates"}}),
		Entry("feature covariate not among the input's covariates", invalidCase{
			mutate: withFeatures(map[string]any{"covariates": []any{"promo_flag", "weather"}}),
			want:   []string{"spec", "features.covariates must be listed in source.columns.covariates"}}),
		Entry("covariate lags without covariates", invalidCase{
			mutate: withFeatures(map[string]any{"covariateLags": []any{int64(1)}}),
			want:   []string{"spec.features", "covariateLags needs covariates"}}),
		Entry("filter keeping no features", invalidCase{
			mutate: withFeatures(map[string]any{"selection": map[string]any{"filterKeep": int64(0)}}),
			want:   []string{"spec.features.selection.filterKeep", "greater than or equal to 1"}}),
		Entry("feature cap of zero", invalidCase{
			mutate: withFeatures(map[string]any{"selection": map[string]any{"maxFeatures": int64(0)}}),
			want:   []string{"spec.features.selection.maxFeatures", "greater than or equal to 1"}}),
		Entry("feature cap above what the filter keeps", invalidCase{
			mutate: withFeatures(map[string]any{"selection": map[string]any{"filterKeep": int64(5), "maxFeatures": int64(8)}}),
			want:   []string{"spec.features.selection", "maxFeatures must not exceed filterKeep"}}),
		Entry("filter count with no filter", invalidCase{
			mutate: withFeatures(map[string]any{"selection": map[string]any{"filter": "None", "filterKeep": int64(5)}}),
			want:   []string{"spec.features.selection", "filterKeep needs a filter other than None"}}),
		Entry("unknown feature filter", invalidCase{
			mutate: withFeatures(map[string]any{"selection": map[string]any{"filter": "Chi2"}}),
			want:   []string{"spec.features.selection.filter", `"Correlation", "MutualInformation", "None"`}}),
		Entry("unknown embedded selection", invalidCase{
			mutate: withFeatures(map[string]any{"selection": map[string]any{"embedded": "Ridge"}}),
			want:   []string{"spec.features.selection.embedded", `"Lasso", "None"`}}),
		Entry("features with no regression member", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				withFeatures(map[string]any{"lags": []any{int64(1)}})(u)
				set(u, []any{map[string]any{"family": "ETS"}}, "spec", "models")
			},
			want: []string{"spec", "features are used only by the regression families"}}),
		Entry("regression settings on ETS", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "ETS", "regression": map[string]any{"pooled": true}}}, "spec", "models")
			},
			want: []string{"spec.models[0]", "regression settings are only for families Ridge, Lasso and GradientBoosting"}}),
		Entry("penalty on boosted trees", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "GradientBoosting", "regression": map[string]any{"penalty": "0.5"}}}, "spec", "models")
			},
			want: []string{"spec.models[0]", "regression.penalty is only for families Ridge and Lasso"}}),
		Entry("hierarchy level naming an unknown column", invalidCase{
			mutate: withLevels([]any{"region"}),
			want:   []string{"spec", "hierarchy.levels may name only columns of source.columns.series"}}),
		Entry("hierarchy level naming every key column", invalidCase{
			mutate: withLevels([]any{"depot", "item"}),
			want:   []string{"spec", "each level must leave at least one out"}}),
		Entry("hierarchy level naming a column twice", invalidCase{
			mutate: withLevels([]any{"depot", "depot"}),
			want:   []string{"spec.hierarchy", "a hierarchy level must name each column once"}}),
		Entry("hierarchy with the same level twice", invalidCase{
			mutate: withLevels([]any{}, []any{"depot"}, []any{}),
			want:   []string{"spec.hierarchy", "hierarchy levels must be distinct"}}),
		Entry("hierarchy without levels", invalidCase{
			mutate: func(u *unstructured.Unstructured) { set(u, map[string]any{"levels": []any{}}, "spec", "hierarchy") },
			want:   []string{"spec.hierarchy.levels"}}),
		Entry("hierarchy sharded by an unknown column", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, map[string]any{"levels": []any{[]any{}}, "shardBy": []any{"region"}}, "spec", "hierarchy")
			},
			want: []string{"spec", "hierarchy.shardBy may name only columns of source.columns.series"}}),
		Entry("hierarchy with an unknown method", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, map[string]any{"levels": []any{[]any{}}, "method": "TopDown"}, "spec", "hierarchy")
			},
			want: []string{"spec.hierarchy.method"}}),
		Entry("hierarchy with covariate features", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				withFeatures(map[string]any{"covariates": []any{"price"}})(u)
				set(u, []any{"price"}, "spec", "source", "columns", "covariates")
				set(u, []any{map[string]any{"family": "Ridge"}}, "spec", "models")
				withLevels([]any{})(u)
			},
			want: []string{"spec", "hierarchy aggregates have no covariates"}}),
		Entry("zero penalty", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "Ridge", "regression": map[string]any{"penalty": "0.000"}}}, "spec", "models")
			},
			want: []string{"spec.models[0].regression.penalty", "penalty must be greater than 0"}}),
		Entry("negative penalty", invalidCase{
			mutate: func(u *unstructured.Unstructured) {
				set(u, []any{map[string]any{"family": "Lasso", "regression": map[string]any{"penalty": "-1"}}}, "spec", "models")
			},
			want: []string{"spec.models[0].regression.penalty", "should match"}}),
		Entry("boosting settings on Ridge", invalidCase{mutate: withTrees("Ridge", map[string]any{"rounds": int64(50)}), want: []string{"spec.models[0]", "regression.boosting is only for family GradientBoosting"}}),
		Entry("empty boosting settings on Lasso", invalidCase{mutate: withTrees("Lasso", map[string]any{}), want: []string{"spec.models[0]", "regression.boosting is only for family GradientBoosting"}}),
		Entry("zero rounds", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"rounds": int64(0)}), want: []string{"spec.models[0].regression.boosting.rounds", "greater than or equal to 1"}}),
		Entry("too many rounds", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"rounds": int64(5001)}), want: []string{"spec.models[0].regression.boosting.rounds", "less than or equal to 5000"}}),
		Entry("zero shrinkage", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"shrinkage": "0.0"}), want: []string{"spec.models[0].regression.boosting.shrinkage", "shrinkage must be greater than 0 and at most 1"}}),
		Entry("shrinkage above 1", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"shrinkage": "1.5"}), want: []string{"spec.models[0].regression.boosting.shrinkage", "shrinkage must be greater than 0 and at most 1"}}),
		Entry("shrinkage not a decimal", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"shrinkage": "1e-2"}), want: []string{"spec.models[0].regression.boosting.shrinkage", "should match"}}),
		Entry("tree depth of zero", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"treeDepth": int64(0)}), want: []string{"spec.models[0].regression.boosting.treeDepth", "greater than or equal to 1"}}),
		Entry("tree depth above 12", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"treeDepth": int64(13)}), want: []string{"spec.models[0].regression.boosting.treeDepth", "less than or equal to 12"}}),
		Entry("leaf of no rows", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"minLeafRows": int64(0)}), want: []string{"spec.models[0].regression.boosting.minLeafRows", "greater than or equal to 1"}}),
		Entry("row sample above 100 percent", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"rowSamplePercent": int64(101)}), want: []string{"spec.models[0].regression.boosting.rowSamplePercent", "less than or equal to 100"}}),
		Entry("row sample of 0 percent", invalidCase{mutate: withTrees("GradientBoosting", map[string]any{"rowSamplePercent": int64(0)}), want: []string{"spec.models[0].regression.boosting.rowSamplePercent", "greater than or equal to 1"}}),
		Entry("run without portfolio", invalidCase{run: true,
			mutate: func(u *unstructured.Unstructured) { del(u, "spec", "portfolioName") },
			want:   []string{"spec.portfolioName", "Required"}}),
		Entry("run naming a portfolio in another namespace", invalidCase{run: true,
			mutate: func(u *unstructured.Unstructured) { set(u, "other/demand", "spec", "portfolioName") },
			want:   []string{"spec.portfolioName"}}),
		Entry("scheduled run without a time", invalidCase{run: true,
			mutate: func(u *unstructured.Unstructured) { set(u, "Schedule", "spec", "trigger") },
			want:   []string{"spec", "scheduledTime is required when trigger is Schedule"}}),
		Entry("unknown trigger", invalidCase{run: true,
			mutate: func(u *unstructured.Unstructured) { set(u, "Cron", "spec", "trigger") },
			want:   []string{"spec.trigger", `"Schedule", "Manual", "Drift"`}}),
	)

	It("keeps a run's spec immutable", func() {
		u := validRun("immutable")
		Expect(k8sClient.Create(ctx, u)).To(Succeed())
		set(u, "another", "spec", "portfolioName")
		err := k8sClient.Update(ctx, u)
		Expect(err).To(HaveOccurred())
		Expect(err.Error()).To(ContainSubstring("spec is immutable"))
	})

	It("keeps status out of the main resource (status subresource)", func() {
		u := validPortfolio("status-sub")
		set(u, map[string]any{"lastSuccessfulRun": "forged"}, "status")
		Expect(k8sClient.Create(ctx, u)).To(Succeed())
		var fp forecastingv1alpha1.ForecastPortfolio
		Expect(k8sClient.Get(ctx, client.ObjectKeyFromObject(u), &fp)).To(Succeed())
		Expect(fp.Status.LastSuccessfulRun).To(BeEmpty())
		fp.Status.LastSuccessfulRun = "r1"
		fp.Status.ObservedGeneration = fp.Generation
		Expect(k8sClient.Status().Update(ctx, &fp)).To(Succeed())
		Expect(fp.Status.LastSuccessfulRun).To(Equal("r1"))
	})

	It("documents the spec for kubectl explain", func() {
		kubectl := filepath.Join(os.Getenv("KUBEBUILDER_ASSETS"), "kubectl")
		if _, err := os.Stat(kubectl); err != nil {
			Skip("kubectl not built in KUBEBUILDER_ASSETS")
		}
		kubeconfig := writeKubeconfig()
		// The apiserver publishes a new CRD's schema to discovery and OpenAPI a little after
		// the CRD is established; run first (focused alone, or its container shuffled first),
		// kubectl explain can ask before that and answer "couldn't find resource".
		var out string
		Eventually(func() error {
			b, err := exec.Command(kubectl, "--kubeconfig", kubeconfig, "explain", "forecastportfolio.spec").CombinedOutput()
			out = string(b)
			if err != nil {
				return fmt.Errorf("kubectl explain forecastportfolio.spec: %v: %s", err, b)
			}
			return nil
		}).WithTimeout(60 * time.Second).WithPolling(time.Second).Should(Succeed())
		for _, field := range []string{"schedule", "timeZone", "concurrencyPolicy", "source", "models", "selection", "sharding", "drift", "quantilePercents", "horizon"} {
			Expect(out).To(ContainSubstring(field + "\t"))
		}
		Expect(out).To(ContainSubstring("5-field cron expression"))
		Expect(explain(kubectl, kubeconfig, "forecastportfolio.spec.drift.thresholdPercent")).
			To(ContainSubstring("realized error exceeds this percent"))
		Expect(explain(kubectl, kubeconfig, "frun.status.shards")).To(ContainSubstring("folded"))
		Expect(explain(kubectl, kubeconfig, "forecastportfolio.spec.features")).
			To(ContainSubstring("regression members"))
		Expect(explain(kubectl, kubeconfig, "forecastportfolio.spec.features.selection.maxFeatures")).
			To(ContainSubstring("caps how many features"))
		Expect(explain(kubectl, kubeconfig, "forecastportfolio.spec.models.regression.boosting.shrinkage")).
			To(ContainSubstring("the learning rate"))
	})
})

func explain(kubectl, kubeconfig, path string) string {
	cmd := exec.Command(kubectl, "--kubeconfig", kubeconfig, "explain", path)
	out, err := cmd.CombinedOutput()
	Expect(err).NotTo(HaveOccurred(), "kubectl explain %s: %s", path, out)
	GinkgoWriter.Printf("kubectl explain %s:\n%s\n", path, out)
	return string(out)
}

// writeKubeconfig writes the envtest admin credentials for kubectl.
func writeKubeconfig() string {
	user, err := testEnv.ControlPlane.AddUser(envtest.User{Name: "almanac-test-admin", Groups: []string{"system:masters"}}, nil)
	Expect(err).NotTo(HaveOccurred())
	b, err := user.KubeConfig()
	Expect(err).NotTo(HaveOccurred())
	p := filepath.Join(GinkgoT().TempDir(), "kubeconfig")
	Expect(os.WriteFile(p, b, 0o600)).To(Succeed())
	return p
}

// withLevels sets spec.hierarchy.levels.
func withLevels(levels ...[]any) func(u *unstructured.Unstructured) {
	return func(u *unstructured.Unstructured) {
		var ls []any
		for _, l := range levels {
			ls = append(ls, l)
		}
		set(u, map[string]any{"levels": ls}, "spec", "hierarchy")
	}
}

// withTrees makes the zoo one member of family with regression.boosting set to boosting.
func withTrees(family string, boosting map[string]any) func(*unstructured.Unstructured) {
	return func(u *unstructured.Unstructured) {
		set(u, []any{map[string]any{"family": family, "regression": map[string]any{"boosting": boosting}}}, "spec", "models")
	}
}
