package controllers

import (
	"testing"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"

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
	m.accuracy("planning", "fenwick-weekly", &forecastingv1alpha1.AccuracyStatus{Metric: "MASE", Expected: "0.8125", Realized: "0.9000"})
	if got := testutil.ToFloat64(m.realized.WithLabelValues("planning", "fenwick-weekly", "MASE")); got != 0.9 {
		t.Errorf("realized = %v, want 0.9", got)
	}
	m.accuracy("planning", "fenwick-weekly", nil)
	if n := testutil.CollectAndCount(m.expected); n != 0 {
		t.Errorf("expected series after the portfolio went away = %d, want 0", n)
	}
	var none *Metrics
	none.runProgress(run, 1, 1) // a nil *Metrics records nothing and does not panic
}
