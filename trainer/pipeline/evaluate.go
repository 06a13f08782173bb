package pipeline

import (
	"math"
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
	idx := make(map[int64]int, actual.Len())
	for i := range actual.Values {
		idx[actual.PeriodAt(i).Unix()] = i
	}
	rows := append([]tables.ForecastRow(nil), prev...)
	sort.Slice(rows, func(i, j int) bool { return rows[i].Period.Before(rows[j].Period) })
	first, ok := idx[rows[0].Period.Unix()]
	if !ok || first < 2 {
		// The forecast starts outside this run's history (a series trimmed or restarted).
		return row, false
	}
	var y, f []float64
	for _, r := range rows {
		i, ok := idx[r.Period.Unix()]
		if !ok || math.IsNaN(actual.Values[i]) {
			continue
		}
		v := actual.Values[i]
		if nonNegative && v < 0 {
			v = 0 // series.Clean's rule for demand
		}
		y = append(y, v)
		f = append(f, r.Mean)
	}
	if len(y) == 0 {
		return row, false
	}
	hist := series.Series{Key: actual.Key, Start: actual.Start, Freq: actual.Freq, Values: append([]float64(nil), actual.Values[:first]...)}
	if err := series.Clean(&hist, series.CleanRules{NonNegative: nonNegative, MaxGapFraction: 1}); err != nil {
		return row, false
	}
	realized := backtest.Score(metric, y, f, hist.Values, actual.Freq.SeasonLength())
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
