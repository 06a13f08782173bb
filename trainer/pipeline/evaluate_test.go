package pipeline

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// m1Like builds n yearly series of 30 history points and 6 new actuals, with a naive forecast
// (the last history value) as the previous run's forecast, and returns them with their forecasts.
//
// Construction (M1-like: the M1 yearly and monthly sets hold a few series whose history barely
// moves, which makes their MASE scale tiny; Makridakis et al. 1982 for the data set, the
// effect on mean MASE as measured by this project's bench on M1):
//   - ordinary series: a Gaussian random walk, level 1000, steps N(0, 20²). The naive forecast's
//     k-step error is N(0, k·20²) and the in-sample scale estimates E|step| = 20·sqrt(2/π), so
//     the expected MASE over h = 6 steps is (1/6) Σ_{k=1..6} sqrt(k) ≈ 1.81 (Hyndman & Koehler
//     2006, eq. (5)-(6); the half-normal mean sqrt(2/π)σ is a textbook fact);
//   - near-constant series (the last `flat` ones): 1000 throughout the history except one
//     period at 1000.01, so the scale is 2·0.01/29 ≈ 0.00069, then the new actuals move by
//     N(0, 20²) steps like the others: their MASE is in the tens of thousands.
func m1Like(n, flat int, seed uint64) ([]series.Series, [][]tables.ForecastRow) {
	rng := rand.New(rand.NewPCG(seed, 1))
	const hist, h = 30, 6
	start := time.Date(1950, 1, 1, 0, 0, 0, 0, time.UTC)
	var ss []series.Series
	var fcs [][]tables.ForecastRow
	for i := range n {
		v := make([]float64, hist+h)
		v[0] = 1000
		for t := 1; t < len(v); t++ {
			v[t] = v[t-1] + 20*rng.NormFloat64()
			if i >= n-flat && t < hist {
				v[t] = 1000
				if t == hist/2 {
					v[t] = 1000.01
				}
			}
		}
		s := series.Series{Key: fmt.Sprintf("item-%03d", i), Start: start, Freq: series.Yearly, Values: v}
		var rows []tables.ForecastRow
		for k := range h {
			rows = append(rows, tables.ForecastRow{Key: s.Key, Period: s.PeriodAt(hist + k), Step: k + 1, Mean: v[hist-1]})
		}
		ss, fcs = append(ss, s), append(fcs, rows)
	}
	return ss, fcs
}

// TestGeometricMeanResistsNearConstantSeries: on M1-like data where 3 series of 200 are
// near-constant, the arithmetic mean MASE explodes while the geometric mean (Davydenko &
// Fildes 2013 recommend geometric averaging of relative errors for exactly this reason) stays
// near the median, and so does the geometric ratio of realized to expected.
func TestGeometricMeanResistsNearConstantSeries(t *testing.T) {
	ss, fcs := m1Like(200, 3, 7)
	expected := 0.0
	for k := 1; k <= 6; k++ {
		expected += math.Sqrt(float64(k)) / 6
	}
	var acc summary.Accuracy
	var realized []float64
	d := DriftRule{Metric: backtest.MASE, Threshold: 1.3, MinPoints: 6}
	for i, s := range ss {
		row, ok := Evaluate(s, fcs[i], expected, d, true)
		if !ok {
			t.Fatalf("%s: not evaluated", s.Key)
		}
		accumulate(&acc, row)
		realized = append(realized, row.Realized)
	}
	sort.Float64s(realized)
	median := (realized[99] + realized[100]) / 2
	mean := acc.RealizedSum / float64(acc.Evaluated)
	geo := math.Exp(acc.RealizedLogSum / float64(acc.LogEvaluated))
	t.Logf("median %.3f, mean %.3f, geometric mean %.3f, largest %.0f", median, mean, geo, realized[len(realized)-1])
	if acc.LogEvaluated != 200 || acc.Evaluated != 200 {
		t.Fatalf("evaluated %d, in the log sums %d; want 200 and 200", acc.Evaluated, acc.LogEvaluated)
	}
	if mean < 10*median {
		t.Errorf("mean %.3f is not far above the median %.3f: the construction lost its near-constant series", mean, median)
	}
	if r := geo / median; r < 1/1.5 || r > 1.5 {
		t.Errorf("geometric mean %.3f is %.2f times the median %.3f, want within a factor 1.5", geo, r, median)
	}
	// Against the expectation: the ordinary series realize about what a random walk promises.
	ratio := math.Exp((acc.RealizedLogSum - acc.ExpectedLogSum) / float64(acc.LogEvaluated))
	if ratio > 1.3 {
		t.Errorf("geometric ratio %.3f would call drift on data that behaves as promised (mean ratio %.1f)", ratio, mean/expected)
	}
	if mean/expected <= 1.3 {
		t.Errorf("mean ratio %.2f: the arithmetic mean should call (false) drift here", mean/expected)
	}
}

// TestAccumulateSkipsZeroErrors: a zero error has no logarithm; the series stays in the
// arithmetic sums only.
func TestAccumulateSkipsZeroErrors(t *testing.T) {
	var a summary.Accuracy
	accumulate(&a, tables.EvaluationRow{Metric: "MASE", Points: 3, Expected: 2, Realized: 0})
	accumulate(&a, tables.EvaluationRow{Metric: "MASE", Points: 3, Expected: 2, Realized: 8})
	if a.Evaluated != 2 || a.LogEvaluated != 1 {
		t.Fatalf("evaluated %d, log-evaluated %d; want 2 and 1", a.Evaluated, a.LogEvaluated)
	}
	if a.ExpectedLogSum != math.Log(2) || a.RealizedLogSum != math.Log(8) {
		t.Errorf("log sums %v, %v; want ln 2 and ln 8", a.ExpectedLogSum, a.RealizedLogSum)
	}
}

// TestMovement works one case by hand: history 10, 12, 11, 13 has naive steps 2, 1, 2, so the
// scale is 5/3 (Hyndman & Koehler 2006, eq. (5)); the previous run forecast 13 for the periods
// 4, 5, 6 and this run forecasts 14, 12, 20 for 4, 5, 6 shifted by one (5, 6, 7 in the series'
// index), so periods 5 and 6 overlap: (|14 − 13| + |12 − 13|) / (5/3) = 1.2 over 2 points.
func TestMovement(t *testing.T) {
	s := series.Series{Key: "fenwick/oats", Start: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Yearly, Values: []float64{10, 12, 11, 13}}
	row := func(i int, v float64) tables.ForecastRow {
		return tables.ForecastRow{Key: s.Key, Period: s.PeriodAt(i), Mean: v}
	}
	prev := []tables.ForecastRow{row(3, 13), row(4, 13), row(5, 13)}
	next := []tables.ForecastRow{row(4, 14), row(5, 12), row(6, 20)}
	m, ok := Movement(s, next, prev)
	if !ok || m.Series != 1 || m.Points != 2 || math.Abs(m.MovementSum-1.2) > 1e-12 {
		t.Fatalf("Movement = %+v, %v; want 1 series, 2 points, sum 1.2", m, ok)
	}
	if _, ok := Movement(s, []tables.ForecastRow{row(6, 20)}, prev); ok {
		t.Errorf("no overlapping period, yet measured")
	}
	flat := s
	flat.Values = []float64{5, 5, 5, 5}
	if _, ok := Movement(flat, next, prev); ok {
		t.Errorf("zero scale, yet measured")
	}
}
