package pipeline

import (
	"math"
	"slices"
	"sort"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// Evaluate compares the previous run's forecast of one series with the actuals that have
// arrived since. actual is the series as collected this run (missing periods NaN); prev are
// the previous forecast's rows for it; expected is the previous run's backtest score in d.Metric
// (its models table). The result is ok when at least one forecast period now has an actual and
// both errors are finite:
//
//	points   = forecast periods with an observed actual
//	realized = metric(actuals, previous means) over those points, scaled (MASE, RMSSE) by the
//	           history before the first forecast period, gaps filled as series.Clean does
//	drifted  = points >= d.MinPoints and expected > 0 and realized/expected > d.Threshold
//
// (MASE as Hyndman & Koehler 2006, eq. (5)-(6), with the seasonal-naive scale for m > 1.)
// The season length is the frequency's, as selection uses.
func Evaluate(actual series.Series, prev []tables.ForecastRow, expected float64, d DriftRule, nonNegative bool) (tables.EvaluationRow, bool) {
	metric := d.Metric
	if metric == backtest.Bias {
		expected = math.Abs(expected) // selection ranks Bias by its absolute value
	}
	row := tables.EvaluationRow{Key: actual.Key, Metric: string(metric), Expected: expected}
	if len(prev) == 0 || math.IsNaN(expected) || math.IsInf(expected, 0) {
		return row, false
	}
	y, matched, hist, ok := newActuals(actual, prev, nonNegative)
	if !ok {
		return row, false
	}
	f := make([]float64, len(matched))
	for i, r := range matched {
		f[i] = r.Mean
	}
	realized := backtest.Score(metric, y, f, hist, backtest.ScaleLag(len(hist), actual.Freq.SeasonLength()))
	if metric == backtest.Bias {
		realized = math.Abs(realized)
	}
	if math.IsNaN(realized) || math.IsInf(realized, 0) {
		return row, false
	}
	row.Points, row.Realized = len(y), realized
	row.Drifted = len(y) >= d.MinPoints && expected > 0 && realized/expected > d.Threshold
	return row, true
}

// newActuals pairs the previous forecast rows of one series with the actuals that arrived since:
// y are the observed actuals (negative ones set to 0 when nonNegative, series.Clean's rule for
// demand), matched the forecast rows of the same periods in period order, and hist the history
// before the first forecast period, gaps filled as series.Clean does. ok is false when the
// forecast starts outside this run's history (a series trimmed or restarted), no forecast
// period has an actual yet, or the history cannot be cleaned.
func newActuals(actual series.Series, prev []tables.ForecastRow, nonNegative bool) (y []float64, matched []tables.ForecastRow, hist []float64, ok bool) {
	if len(prev) == 0 {
		return nil, nil, nil, false
	}
	idx := make(map[int64]int, actual.Len())
	for i := range actual.Values {
		idx[actual.PeriodAt(i).Unix()] = i
	}
	rows := append([]tables.ForecastRow(nil), prev...)
	sort.Slice(rows, func(i, j int) bool { return rows[i].Period.Before(rows[j].Period) })
	first, found := idx[rows[0].Period.Unix()]
	if !found || first < 2 {
		return nil, nil, nil, false
	}
	for _, r := range rows {
		i, found := idx[r.Period.Unix()]
		if !found || math.IsNaN(actual.Values[i]) {
			continue
		}
		v := actual.Values[i]
		if nonNegative && v < 0 {
			v = 0
		}
		y = append(y, v)
		matched = append(matched, r)
	}
	if len(y) == 0 {
		return nil, nil, nil, false
	}
	h := series.Series{Key: actual.Key, Start: actual.Start, Freq: actual.Freq, Values: append([]float64(nil), actual.Values[:first]...)}
	if err := series.Clean(&h, series.CleanRules{NonNegative: nonNegative, MaxGapFraction: 1}); err != nil {
		return nil, nil, nil, false
	}
	return y, matched, h.Values, true
}

// Calibrate measures the previous run's published quantiles and mean of one series on the
// actuals that arrived since (paired as newActuals does), scaled by the series' in-sample
// mean absolute (seasonal) naive error s (backtest.NaiveScale, the MASE scale of Hyndman &
// Koehler 2006). levels are the quantile levels of the previous forecast table's columns;
// promised is the series' record on its own backtest from the previous models table (nil
// when it has none). Over the n new actuals y_t with quantile forecasts q_τ,t and mean
// forecast f_t:
//
//	below[τ]      = #{ t : y_t <= q_τ,t }                 (a calibrated forecast expects n·τ)
//	pinballSum[τ] = n · backtest.Pinball(τ, y, q_τ) / s    (the scaled pinball loss of the M5
//	                uncertainty competition, Competitor's Guide 2020, times n)
//	biasSum       = Σ_t (f_t − y_t) / s                    (positive: over-forecast)
//
// and the expectation and pair counts of summary.Calibration: the promised share p_τ is the
// backtest's below/points when promised has the same levels and points, τ otherwise. Sums
// over series and shards divided by the points give the realized coverage of each quantile,
// the mean scaled pinball loss and the mean scaled bias. ok is false when nothing is
// comparable, the scale is 0 or undefined, or a row lacks a quantile of levels.
func Calibrate(actual series.Series, prev []tables.ForecastRow, levels []float64, nonNegative bool, promised *tables.Calibration) (summary.Calibration, bool) {
	c := summary.Calibration{Levels: levels}
	y, matched, hist, ok := newActuals(actual, prev, nonNegative)
	if !ok {
		return c, false
	}
	scale := backtest.NaiveScale(hist, backtest.ScaleLag(len(hist), actual.Freq.SeasonLength()), 1)
	if !(scale > 0) || math.IsInf(scale, 0) {
		return c, false
	}
	n := len(y)
	c.Series, c.Points = 1, n
	c.Below, c.PinballSum = make([]int, len(levels)), make([]float64, len(levels))
	q := make([]float64, n)
	for j, tau := range levels {
		for i, r := range matched {
			if len(r.Quantiles) != len(levels) || math.IsNaN(r.Quantiles[j]) {
				return c, false
			}
			q[i] = r.Quantiles[j]
			if y[i] <= q[i] {
				c.Below[j]++
			}
		}
		c.PinballSum[j] = float64(n) * backtest.Pinball(tau, y, q) / scale
	}
	for i, r := range matched {
		c.BiasSum += (r.Mean - y[i]) / scale
	}
	fn := float64(n)
	c.Pairs = n * (n - 1)
	c.BelowPairs, c.Expected = make([]int, len(levels)), make([]float64, len(levels))
	c.ExpectedVar, c.ExpectedPinballSum = make([]float64, len(levels)), make([]float64, len(levels))
	backtested := promised != nil && promised.Points > 0 && slices.Equal(promised.Levels, levels) &&
		len(promised.Below) == len(levels) && len(promised.Pinball) == len(levels)
	if backtested {
		c.BacktestSeries, c.BacktestPoints, c.BacktestActuals = 1, promised.Points, n
		c.ExpectedBiasSum = fn * promised.Bias
	}
	for j, tau := range levels {
		c.BelowPairs[j] = c.Below[j] * (c.Below[j] - 1)
		p := tau
		if backtested {
			m := float64(promised.Points)
			p = float64(promised.Below[j]) / m
			c.ExpectedVar[j] = fn * fn * p * (1 - p) / m
			c.ExpectedPinballSum[j] = fn * promised.Pinball[j]
		}
		c.Expected[j] = fn * p
	}
	return c, true
}

// EvaluationRecord is the per-series record of a Calibrate result for the evaluation table:
// means instead of sums, and the promised shares.
func EvaluationRecord(c summary.Calibration) *tables.Calibration {
	if c.Series != 1 || c.Points == 0 {
		return nil
	}
	n := float64(c.Points)
	r := &tables.Calibration{Levels: c.Levels, Points: c.Points, Below: c.Below, Bias: c.BiasSum / n, Pinball: make([]float64, len(c.Levels))}
	for j := range c.Levels {
		r.Pinball[j] = c.PinballSum[j] / n
	}
	if c.HasExpectation() {
		r.Promised, r.PromisedPoints = make([]float64, len(c.Levels)), c.BacktestPoints
		for j := range c.Levels {
			r.Promised[j] = c.Expected[j] / n
		}
	}
	return r
}

// Movement measures how far a series' new forecast moved from the previous run's over the
// periods both forecast (nervousness of the forecast, common practice in demand planning):
//
//	movementSum = Σ_{t in both} |f_new,t − f_prev,t| / s
//
// with s the in-sample mean absolute (seasonal) naive error of the series as collected this
// run (backtest.NaiveScale, the MASE scale of Hyndman & Koehler 2006), so movementSum/points is
// in the same unit as MASE: 1 means the forecast moved, on average, by one typical naive step.
// ok is false when no period overlaps or the scale is 0 or undefined.
func Movement(s series.Series, next, prev []tables.ForecastRow) (summary.Stability, bool) {
	var st summary.Stability
	if len(next) == 0 || len(prev) == 0 {
		return st, false
	}
	scale := backtest.NaiveScale(s.Values, backtest.ScaleLag(len(s.Values), s.Freq.SeasonLength()), 1)
	if !(scale > 0) || math.IsInf(scale, 0) {
		return st, false
	}
	old := make(map[int64]float64, len(prev))
	for _, r := range prev {
		old[r.Period.Unix()] = r.Mean
	}
	for _, r := range next {
		if p, ok := old[r.Period.Unix()]; ok {
			st.Points++
			st.MovementSum += math.Abs(r.Mean-p) / scale
		}
	}
	if st.Points == 0 {
		return st, false
	}
	st.Series = 1
	return st, true
}

// accumulate adds an evaluation row to accuracy sums; a row whose expected and realized errors
// are both above 0 also adds their natural logarithms to the geometric means' sums (a zero
// error has no logarithm; such series are in the arithmetic means only).
func accumulate(a *summary.Accuracy, r tables.EvaluationRow) {
	a.Metric = r.Metric
	a.Evaluated++
	a.EvaluatedPoints += r.Points
	a.ExpectedSum += r.Expected
	a.RealizedSum += r.Realized
	if r.Drifted {
		a.Drifted++
	}
	if r.Expected > 0 && r.Realized > 0 {
		a.LogEvaluated++
		a.ExpectedLogSum += math.Log(r.Expected)
		a.RealizedLogSum += math.Log(r.Realized)
	}
}
