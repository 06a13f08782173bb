package controllers

import (
	"strconv"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

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
	expectedGeo   *prometheus.GaugeVec
	realizedGeo   *prometheus.GaugeVec
	coverage      *prometheus.GaugeVec
	promised      *prometheus.GaugeVec
	bias          *prometheus.GaugeVec
	movement      *prometheus.GaugeVec
	levelExp      *prometheus.GaugeVec
	levelReal     *prometheus.GaugeVec
	levelExpGeo   *prometheus.GaugeVec
	levelRealGeo  *prometheus.GaugeVec
	levelDrift    *prometheus.GaugeVec
	levelBand     *prometheus.GaugeVec
	levelBandExp  *prometheus.GaugeVec
	conditions    *prometheus.GaugeVec
	missed        *prometheus.CounterVec
	seriesDone    *prometheus.GaugeVec
	seriesPlanned *prometheus.GaugeVec
	seriesRate    *prometheus.GaugeVec
	remaining     *prometheus.GaugeVec
	stalled       *prometheus.GaugeVec

	mu sync.Mutex
	// missedDue is, per "namespace/portfolio", the schedule time whose misses were counted last.
	missedDue map[string]time.Time
}

// RunResults are the values of almanac_runs_total's result label.
var RunResults = []string{"succeeded", "degraded", "failed"}

// NewMetrics creates the collectors and registers them on reg.
func NewMetrics(reg prometheus.Registerer) (*Metrics, error) {
	m := &Metrics{
		missedDue: map[string]time.Time{},
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
		expectedGeo: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_accuracy_expected_geometric",
			Help: "Geometric mean backtest error the portfolio's last evaluated run promised, in its metric (series with both errors above 0).",
		}, []string{"namespace", "portfolio", "metric"}),
		realizedGeo: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_accuracy_realized_geometric",
			Help: "Geometric mean error the portfolio's last evaluated run realized on new actuals, in its metric; drift judges realized/expected of these by default.",
		}, []string{"namespace", "portfolio", "metric"}),
		coverage: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_quantile_coverage",
			Help: "Share of the new actuals at or below each published quantile of the portfolio's last evaluated run (a calibrated forecast gives the level).",
		}, []string{"namespace", "portfolio", "level"}),
		promised: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_quantile_coverage_expected",
			Help: "Share of the same new actuals each published quantile promised: per series its share on its own backtest, or the level for a series without one.",
		}, []string{"namespace", "portfolio", "level"}),
		bias: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_forecast_bias",
			Help: "Mean (forecast - actual) / scale over the new actuals of the portfolio's last evaluated run; the scale is each series' in-sample mean absolute naive error.",
		}, []string{"namespace", "portfolio"}),
		movement: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_forecast_movement",
			Help: "Mean |new - previous forecast| / scale over the periods both the portfolio's last evaluated run and its previous run forecast (MASE units).",
		}, []string{"namespace", "portfolio"}),
		levelExp: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_accuracy_expected",
			Help: "Mean backtest error the nodes of one hierarchy level promised, as of the portfolio's last evaluated run, in its metric (status.hierarchyLevels).",
		}, []string{"namespace", "portfolio", "hierarchy_level", "metric"}),
		levelReal: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_accuracy_realized",
			Help: "Mean error the nodes of one hierarchy level realized on new actuals, as of the portfolio's last evaluated run, in its metric.",
		}, []string{"namespace", "portfolio", "hierarchy_level", "metric"}),
		levelExpGeo: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_accuracy_expected_geometric",
			Help: "Geometric mean backtest error the nodes of one hierarchy level promised (nodes with both errors above 0).",
		}, []string{"namespace", "portfolio", "hierarchy_level", "metric"}),
		levelRealGeo: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_accuracy_realized_geometric",
			Help: "Geometric mean error the nodes of one hierarchy level realized on new actuals; drift judges realized/expected of these per level by default.",
		}, []string{"namespace", "portfolio", "hierarchy_level", "metric"}),
		levelDrift: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_accuracy_drift",
			Help: "spec.drift's rule on one hierarchy level's nodes alone: 1 above the threshold, 0 within; absent while the level is not judged (too few new actuals, none evaluated).",
		}, []string{"namespace", "portfolio", "hierarchy_level"}),
		levelBand: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_band_coverage",
			Help: "Share of one hierarchy level's new actuals inside the widest published band (lowest to highest quantile) of the portfolio's last evaluated run (status.hierarchyLevels[].accuracy.bandCoverage).",
		}, []string{"namespace", "portfolio", "hierarchy_level"}),
		levelBandExp: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_hierarchy_band_coverage_expected",
			Help: "Share of the same actuals the level's bands promised: per node its band's share on its own (reconciled) backtest.",
		}, []string{"namespace", "portfolio", "hierarchy_level"}),
		conditions: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_portfolio_condition",
			Help: "A portfolio condition (Ready, Reconciling, Stalled, AccuracyDrift) with its reason: 1 when True, 0 when False; absent while Unknown.",
		}, []string{"namespace", "portfolio", "type", "reason"}),
		missed: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "almanac_schedule_missed_total",
			Help: "Schedule times that passed without a run (past startingDeadlineSeconds, or skipped while the controller caught up).",
		}, []string{"namespace", "portfolio"}),
		seriesDone: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_run_series_done",
			Help: "Series an active run has forecast or rejected (folded shards plus the running shards' progress lines).",
		}, []string{"namespace", "portfolio", "run"}),
		seriesPlanned: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_run_series_planned",
			Help: "Series the active run's plan counted.",
		}, []string{"namespace", "portfolio", "run"}),
		seriesRate: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_run_series_per_second",
			Help: "An active run's current training rate (status.progress.seriesPerSecond).",
		}, []string{"namespace", "portfolio", "run"}),
		remaining: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_run_remaining_seconds",
			Help: "Seconds until the active run's estimated end of training (status.progress.estimatedEnd); absent without a rate.",
		}, []string{"namespace", "portfolio", "run"}),
		stalled: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Name: "almanac_run_stalled_shards",
			Help: "Running train shards of an active run with no progress for the portfolio's spec.sharding.stallAfterSeconds.",
		}, []string{"namespace", "portfolio", "run"}),
	}
	for _, c := range []prometheus.Collector{m.runs, m.duration, m.shardsPending, m.parallelism, m.expected, m.realized, m.expectedGeo, m.realizedGeo, m.coverage, m.promised, m.bias, m.movement,
		m.levelExp, m.levelReal, m.levelExpGeo, m.levelRealGeo, m.levelDrift, m.levelBand, m.levelBandExp, m.conditions, m.missed,
		m.seriesDone, m.seriesPlanned, m.seriesRate, m.remaining, m.stalled} {
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
	for _, g := range []*prometheus.GaugeVec{m.seriesDone, m.seriesPlanned, m.seriesRate, m.remaining, m.stalled} {
		g.DeletePartialMatch(labels)
	}
}

// runSeries sets an active run's progress gauges from status.progress.
func (m *Metrics) runSeries(run *forecastingv1alpha1.ForecastRun, p *forecastingv1alpha1.RunProgress, stalled int) {
	if m == nil || p == nil {
		return
	}
	lv := []string{run.Namespace, run.Spec.PortfolioName, run.Name}
	m.seriesDone.WithLabelValues(lv...).Set(float64(p.SeriesDone))
	m.seriesPlanned.WithLabelValues(lv...).Set(float64(p.SeriesPlanned))
	m.stalled.WithLabelValues(lv...).Set(float64(stalled))
	setParsed(m.seriesRate, p.SeriesPerSecond, lv...)
	m.remaining.DeleteLabelValues(lv...)
	if p.EstimatedEnd != nil && p.ObservedTime != nil {
		m.remaining.WithLabelValues(lv...).Set(max(p.EstimatedEnd.Sub(p.ObservedTime.Time).Seconds(), 0))
	}
}

// accuracy sets a portfolio's accuracy gauges from its status block (nil: drop them).
func (m *Metrics) accuracy(namespace, portfolio string, acc *forecastingv1alpha1.AccuracyStatus) {
	if m == nil {
		return
	}
	labels := prometheus.Labels{"namespace": namespace, "portfolio": portfolio}
	m.expected.DeletePartialMatch(labels)
	m.realized.DeletePartialMatch(labels)
	m.expectedGeo.DeletePartialMatch(labels)
	m.realizedGeo.DeletePartialMatch(labels)
	m.coverage.DeletePartialMatch(labels)
	m.promised.DeletePartialMatch(labels)
	m.bias.DeletePartialMatch(labels)
	m.movement.DeletePartialMatch(labels)
	if acc == nil {
		return
	}
	metric := string(acc.Metric)
	setParsed(m.expected, acc.Expected, namespace, portfolio, metric)
	setParsed(m.realized, acc.Realized, namespace, portfolio, metric)
	setParsed(m.expectedGeo, acc.ExpectedGeometric, namespace, portfolio, metric)
	setParsed(m.realizedGeo, acc.RealizedGeometric, namespace, portfolio, metric)
	for _, q := range acc.Calibration {
		setParsed(m.coverage, q.Realized, namespace, portfolio, q.Level)
		setParsed(m.promised, q.Expected, namespace, portfolio, q.Level)
	}
	setParsed(m.bias, acc.Bias, namespace, portfolio)
	setParsed(m.movement, acc.Movement, namespace, portfolio)
}

// setParsed sets g's series of the label values lv to the decimal string v; an empty or
// unparsable v (a status field not filled) sets nothing.
func setParsed(g *prometheus.GaugeVec, v string, lv ...string) {
	if f, err := strconv.ParseFloat(v, 64); err == nil {
		g.WithLabelValues(lv...).Set(f)
	}
}

// levels sets a portfolio's per-level accuracy and band-coverage gauges from status.hierarchyLevels
// (nil: drop them). The series are apart from the run-level almanac_accuracy_* ones, not those with
// a level label, so that a selector of one portfolio's run-level accuracy keeps matching one
// series; their label is hierarchy_level (the tables' column) because level already means a
// quantile's probability on almanac_quantile_coverage. At most maxHierarchyLevels levels (addLevels
// refuses more), so at most 9 series of each name per portfolio.
func (m *Metrics) levels(namespace, portfolio string, levels []forecastingv1alpha1.LevelAccuracy) {
	if m == nil {
		return
	}
	labels := prometheus.Labels{"namespace": namespace, "portfolio": portfolio}
	for _, g := range []*prometheus.GaugeVec{m.levelExp, m.levelReal, m.levelExpGeo, m.levelRealGeo, m.levelDrift, m.levelBand, m.levelBandExp} {
		g.DeletePartialMatch(labels)
	}
	for _, l := range levels[:min(len(levels), maxHierarchyLevels)] {
		switch l.Drift {
		case forecastingv1alpha1.ReasonAboveThreshold:
			m.levelDrift.WithLabelValues(namespace, portfolio, l.Name).Set(1)
		case forecastingv1alpha1.ReasonWithinThreshold:
			m.levelDrift.WithLabelValues(namespace, portfolio, l.Name).Set(0)
		}
		acc := l.Accuracy
		if acc == nil {
			continue
		}
		lv := []string{namespace, portfolio, l.Name, string(acc.Metric)}
		setParsed(m.levelExp, acc.Expected, lv...)
		setParsed(m.levelReal, acc.Realized, lv...)
		setParsed(m.levelExpGeo, acc.ExpectedGeometric, lv...)
		setParsed(m.levelRealGeo, acc.RealizedGeometric, lv...)
		setParsed(m.levelBand, acc.BandCoverage, namespace, portfolio, l.Name)
		setParsed(m.levelBandExp, acc.ExpectedBandCoverage, namespace, portfolio, l.Name)
	}
}

// portfolioState sets a portfolio's condition gauges and counts its missed schedule times. It
// also creates the portfolio's counters at 0, so that the first failed run or missed schedule is
// an increase from 0 that rate() and increase() can see, not a new series starting at 1.
// missed schedule times are counted once per missedDue, however often a reconcile reports it.
func (m *Metrics) portfolioState(namespace, portfolio string, conds []metav1.Condition, missed int, missedDue time.Time) {
	if m == nil {
		return
	}
	m.conditions.DeletePartialMatch(prometheus.Labels{"namespace": namespace, "portfolio": portfolio})
	for _, c := range conds {
		switch c.Status {
		case metav1.ConditionTrue:
			m.conditions.WithLabelValues(namespace, portfolio, c.Type, c.Reason).Set(1)
		case metav1.ConditionFalse:
			m.conditions.WithLabelValues(namespace, portfolio, c.Type, c.Reason).Set(0)
		}
	}
	for _, r := range RunResults {
		m.runs.WithLabelValues(namespace, portfolio, r)
	}
	counter := m.missed.WithLabelValues(namespace, portfolio)
	if missed <= 0 {
		return
	}
	key := namespace + "/" + portfolio
	m.mu.Lock()
	defer m.mu.Unlock()
	if !m.missedDue[key].Equal(missedDue) {
		m.missedDue[key] = missedDue
		counter.Add(float64(missed))
	}
}

// portfolioGone drops a deleted portfolio's series.
func (m *Metrics) portfolioGone(namespace, portfolio string) {
	if m == nil {
		return
	}
	labels := prometheus.Labels{"namespace": namespace, "portfolio": portfolio}
	m.conditions.DeletePartialMatch(labels)
	m.missed.DeletePartialMatch(labels)
	m.runs.DeletePartialMatch(labels)
	m.duration.DeletePartialMatch(labels)
	m.mu.Lock()
	delete(m.missedDue, namespace+"/"+portfolio)
	m.mu.Unlock()
}
