package controllers

import (
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

func TestMetrics(t *testing.T) {
	reg := prometheus.NewRegistry()
	m, err := NewMetrics(reg)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := NewMetrics(reg); err == nil {
		t.Error("registering twice on one registry succeeded")
	}
	run := fenwickRun("fenwick-weekly-29933550")
	m.runProgress(run, 7, 3)
	if got := testutil.ToFloat64(m.shardsPending.WithLabelValues("planning", "fenwick-weekly", run.Name)); got != 7 {
		t.Errorf("shards pending = %v, want 7", got)
	}
	m.runEnded(run, "degraded", 120)
	if got := testutil.ToFloat64(m.runs.WithLabelValues("planning", "fenwick-weekly", "degraded")); got != 1 {
		t.Errorf("runs_total = %v, want 1", got)
	}
	if n := testutil.CollectAndCount(m.parallelism); n != 0 {
		t.Errorf("parallelism series after the run ended = %d, want 0", n)
	}
	if n := testutil.CollectAndCount(m.duration); n != 1 {
		t.Errorf("duration series = %d, want 1", n)
	}
	m.accuracy("planning", "fenwick-weekly", &forecastingv1alpha1.AccuracyStatus{Metric: "MASE", Expected: "0.8125", Realized: "0.9000",
		ExpectedGeometric: "0.7500", RealizedGeometric: "0.6250", Bias: "-0.1250", Movement: "0.3750",
		Calibration: []forecastingv1alpha1.QuantileCalibration{{Level: "0.1", Realized: "0.125"}, {Level: "0.9", Realized: "0.875", Expected: "0.917"}}})
	if got := testutil.ToFloat64(m.promised.WithLabelValues("planning", "fenwick-weekly", "0.9")); got != 0.917 {
		t.Errorf("promised coverage of 0.9 = %v, want 0.917", got)
	}
	if n := testutil.CollectAndCount(m.promised); n != 1 {
		t.Errorf("%d promised coverage series, want 1 (the 0.1 level promised none)", n)
	}
	if got := testutil.ToFloat64(m.coverage.WithLabelValues("planning", "fenwick-weekly", "0.9")); got != 0.875 {
		t.Errorf("coverage of 0.9 = %v, want 0.875", got)
	}
	if got := testutil.ToFloat64(m.bias.WithLabelValues("planning", "fenwick-weekly")); got != -0.125 {
		t.Errorf("bias = %v, want -0.125", got)
	}
	if got := testutil.ToFloat64(m.movement.WithLabelValues("planning", "fenwick-weekly")); got != 0.375 {
		t.Errorf("movement = %v, want 0.375", got)
	}
	if got := testutil.ToFloat64(m.realized.WithLabelValues("planning", "fenwick-weekly", "MASE")); got != 0.9 {
		t.Errorf("realized = %v, want 0.9", got)
	}
	if got := testutil.ToFloat64(m.realizedGeo.WithLabelValues("planning", "fenwick-weekly", "MASE")); got != 0.625 {
		t.Errorf("realized geometric = %v, want 0.625", got)
	}
	if got := testutil.ToFloat64(m.expectedGeo.WithLabelValues("planning", "fenwick-weekly", "MASE")); got != 0.75 {
		t.Errorf("expected geometric = %v, want 0.75", got)
	}
	m.accuracy("planning", "fenwick-weekly", nil)
	if n := testutil.CollectAndCount(m.expected) + testutil.CollectAndCount(m.realizedGeo) + testutil.CollectAndCount(m.coverage) + testutil.CollectAndCount(m.promised) + testutil.CollectAndCount(m.bias) + testutil.CollectAndCount(m.movement); n != 0 {
		t.Errorf("accuracy series after the portfolio went away = %d, want 0", n)
	}
	var none *Metrics
	none.runProgress(run, 1, 1) // a nil *Metrics records nothing and does not panic
	none.portfolioState("planning", "fenwick-weekly", nil, 1, time.Time{})
}

func TestPortfolioStateMetrics(t *testing.T) {
	m, err := NewMetrics(prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	stalled := []metav1.Condition{
		{Type: forecastingv1alpha1.PortfolioStalled, Status: metav1.ConditionTrue, Reason: "MissingSecret"},
		{Type: forecastingv1alpha1.PortfolioReady, Status: metav1.ConditionFalse, Reason: "MissingSecret"},
		{Type: forecastingv1alpha1.PortfolioAccuracyDrift, Status: metav1.ConditionUnknown, Reason: "NotEvaluated"},
	}
	m.portfolioState("depot-north", "fenwick-weekly", stalled, 0, time.Time{})
	if got := testutil.ToFloat64(m.conditions.WithLabelValues("depot-north", "fenwick-weekly", "Stalled", "MissingSecret")); got != 1 {
		t.Errorf("Stalled = %v, want 1", got)
	}
	if n := testutil.CollectAndCount(m.conditions); n != 2 {
		t.Errorf("%d condition series, want 2 (Unknown is left out)", n)
	}
	// The counters exist at 0 before anything happened, so the first failure is an increase.
	if n := testutil.CollectAndCount(m.runs); n != len(RunResults) {
		t.Errorf("%d runs_total series after the first reconcile, want %d", n, len(RunResults))
	}
	if got := testutil.ToFloat64(m.missed.WithLabelValues("depot-north", "fenwick-weekly")); got != 0 {
		t.Errorf("missed = %v, want 0", got)
	}

	// A reason change replaces the series instead of adding one.
	fixed := []metav1.Condition{{Type: forecastingv1alpha1.PortfolioStalled, Status: metav1.ConditionFalse, Reason: "SpecValid"}}
	due := time.Date(2026, 12, 7, 6, 0, 0, 0, time.UTC)
	m.portfolioState("depot-north", "fenwick-weekly", fixed, 3, due)
	if n := testutil.CollectAndCount(m.conditions); n != 1 {
		t.Errorf("%d condition series after the reason changed, want 1", n)
	}
	// Reconciles that report the same missed time again count it once; a later one adds.
	m.portfolioState("depot-north", "fenwick-weekly", fixed, 3, due)
	m.portfolioState("depot-north", "fenwick-weekly", fixed, 1, due.Add(24*time.Hour))
	if got := testutil.ToFloat64(m.missed.WithLabelValues("depot-north", "fenwick-weekly")); got != 4 {
		t.Errorf("missed = %v, want 3 + 1", got)
	}

	m.portfolioGone("depot-north", "fenwick-weekly")
	for name, c := range map[string]prometheus.Collector{"conditions": m.conditions, "missed": m.missed, "runs": m.runs} {
		if n := testutil.CollectAndCount(c); n != 0 {
			t.Errorf("%s: %d series after the portfolio was deleted, want 0", name, n)
		}
	}
}

// TestLevelMetrics: the per-level series from status.hierarchyLevels (driftedTree's
// hand-worked values), a drift series only for judged levels, all gone with the portfolio.
func TestLevelMetrics(t *testing.T) {
	m, err := NewMetrics(prometheus.NewRegistry())
	if err != nil {
		t.Fatal(err)
	}
	levels, _ := levelDrift(driftedTree(t), forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 100})
	m.levels("planning", "fenwick-weekly", levels)
	for _, tc := range []struct {
		g     *prometheus.GaugeVec
		level string
		want  float64
	}{
		{m.levelExp, "depot", 2.5}, {m.levelReal, "depot", 3}, {m.levelExpGeo, "depot", 2}, {m.levelRealGeo, "depot", 3},
		{m.levelExp, "total", 1}, {m.levelReal, "total", 3}, {m.levelRealGeo, "item", 1.2},
	} {
		if got := testutil.ToFloat64(tc.g.WithLabelValues("planning", "fenwick-weekly", tc.level, "MASE")); got != tc.want {
			t.Errorf("%s level %s = %v, want %v", describe(tc.g), tc.level, got, tc.want)
		}
	}
	for level, want := range map[string]float64{"depot": 1, "item": 0, "item+depot": 0} {
		if got := testutil.ToFloat64(m.levelDrift.WithLabelValues("planning", "fenwick-weekly", level)); got != want {
			t.Errorf("drift of %s = %v, want %v", level, got, want)
		}
	}
	// total (TooFewPoints) and category (NotEvaluated) are not judged: no drift series; category
	// has no accuracy either: 4 levels with accuracy.
	if n := testutil.CollectAndCount(m.levelDrift); n != 3 {
		t.Errorf("%d level drift series, want 3", n)
	}
	if n := testutil.CollectAndCount(m.levelExp); n != 4 {
		t.Errorf("%d level expected series, want 4", n)
	}
	// Only the depot level sent a calibration (driftedTree): its band held 0.700, promised 0.800.
	if got, want := testutil.ToFloat64(m.levelBand.WithLabelValues("planning", "fenwick-weekly", "depot")), 0.7; got != want {
		t.Errorf("band coverage of depot = %v, want %v", got, want)
	}
	if got, want := testutil.ToFloat64(m.levelBandExp.WithLabelValues("planning", "fenwick-weekly", "depot")), 0.8; got != want {
		t.Errorf("promised band coverage of depot = %v, want %v", got, want)
	}
	if n := testutil.CollectAndCount(m.levelBand) + testutil.CollectAndCount(m.levelBandExp); n != 2 {
		t.Errorf("%d band series, want 2 (depot only)", n)
	}
	// A later status with fewer levels replaces the series.
	m.levels("planning", "fenwick-weekly", levels[2:3])
	if n := testutil.CollectAndCount(m.levelExp) + testutil.CollectAndCount(m.levelDrift); n != 2 {
		t.Errorf("%d series after one level remained, want 2", n)
	}
	m.levels("planning", "fenwick-weekly", nil)
	for _, g := range []*prometheus.GaugeVec{m.levelExp, m.levelReal, m.levelExpGeo, m.levelRealGeo, m.levelDrift, m.levelBand, m.levelBandExp} {
		if n := testutil.CollectAndCount(g); n != 0 {
			t.Errorf("%s: %d series after the portfolio went away", describe(g), n)
		}
	}
}

// describe names a collector for a test message.
func describe(c prometheus.Collector) string {
	ch := make(chan *prometheus.Desc, 1)
	c.Describe(ch)
	return (<-ch).String()
}
