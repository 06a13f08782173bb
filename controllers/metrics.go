package controllers

import (
	"strconv"

	"github.com/prometheus/client_golang/prometheus"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// Metrics are the manager's Prometheus series, all prefixed almanac_. Register them once on
// controller-runtime's metrics.Registry (see NewMetrics); the manager serves them on its
// metrics endpoint.
type Metrics struct {
	runs          *prometheus.CounterVec
	duration      *prometheus.HistogramVec
	shardsPending *prometheus.GaugeVec
	parallelism   *prometheus.GaugeVec
	expected      *prometheus.GaugeVec
	realized      *prometheus.GaugeVec
}

// NewMetrics creates the collectors and registers them on reg.
func NewMetrics(reg prometheus.Registerer) (*Metrics, error) {
	m := &Metrics{
		runs: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "almanac_runs_total",
			Help: "Forecast runs that ended, by result (succeeded, degraded, failed).",
		}, []string{"namespace", "portfolio", "result"}),
		duration: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name: "almanac_run_duration_seconds",
			Help: "Wall time of forecast runs from start to completion.",
			// 1 minute to about 17 hours.
			Buckets: prometheus.ExponentialBuckets(60, 2, 11),
		}, []string{"namespace", "portfolio", "result"}),
		shardsPending: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_shards_pending",
			Help: "Shards of an active run not yet finished.",
		}, []string{"namespace", "portfolio", "run"}),
		parallelism: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_run_parallelism",
			Help: "Trainer pods an active run may run at once.",
		}, []string{"namespace", "portfolio", "run"}),
		expected: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_accuracy_expected",
			Help: "Mean backtest error the portfolio's last evaluated run promised, in its metric.",
		}, []string{"namespace", "portfolio", "metric"}),
		realized: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_accuracy_realized",
			Help: "Mean error the portfolio's last evaluated run realized on new actuals, in its metric.",
		}, []string{"namespace", "portfolio", "metric"}),
	}
	for _, c := range []prometheus.Collector{m.runs, m.duration, m.shardsPending, m.parallelism, m.expected, m.realized} {
		if err := reg.Register(c); err != nil {
			return nil, err
		}
	}
	return m, nil
}

// runEnded counts a run that reached a final state; result is succeeded, degraded or failed.
func (m *Metrics) runEnded(run *forecastingv1alpha1.ForecastRun, result string, seconds float64) {
	if m == nil {
		return
	}
	m.runs.WithLabelValues(run.Namespace, run.Spec.PortfolioName, result).Inc()
	if seconds >= 0 {
		m.duration.WithLabelValues(run.Namespace, run.Spec.PortfolioName, result).Observe(seconds)
	}
	m.forgetRun(run.Namespace, run.Name)
}

// runProgress sets the gauges of an active run.
func (m *Metrics) runProgress(run *forecastingv1alpha1.ForecastRun, pending, parallelism int32) {
	if m == nil {
		return
	}
	m.shardsPending.WithLabelValues(run.Namespace, run.Spec.PortfolioName, run.Name).Set(float64(pending))
	m.parallelism.WithLabelValues(run.Namespace, run.Spec.PortfolioName, run.Name).Set(float64(parallelism))
}

// forgetRun drops an ended or deleted run's gauges.
func (m *Metrics) forgetRun(namespace, run string) {
	if m == nil {
		return
	}
	labels := prometheus.Labels{"namespace": namespace, "run": run}
	m.shardsPending.DeletePartialMatch(labels)
	m.parallelism.DeletePartialMatch(labels)
}

// accuracy sets a portfolio's accuracy gauges from its status block (nil: drop them).
func (m *Metrics) accuracy(namespace, portfolio string, acc *forecastingv1alpha1.AccuracyStatus) {
	if m == nil {
		return
	}
	labels := prometheus.Labels{"namespace": namespace, "portfolio": portfolio}
	m.expected.DeletePartialMatch(labels)
	m.realized.DeletePartialMatch(labels)
	if acc == nil {
		return
	}
	metric := string(acc.Metric)
	if v, err := strconv.ParseFloat(acc.Expected, 64); err == nil {
		m.expected.WithLabelValues(namespace, portfolio, metric).Set(v)
	}
	if v, err := strconv.ParseFloat(acc.Realized, 64); err == nil {
		m.realized.WithLabelValues(namespace, portfolio, metric).Set(v)
	}
}
