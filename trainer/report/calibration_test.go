package report

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// The report folds the evaluation table's per-series records into the same sums the trainer's
// shards send the controller (pipeline.Calibrate folded by summary.Calibration.Add), so the
// chart's promise and tolerance are the drift check's: counts and pairs exactly, the float
// sums to rounding. Generated data: 30 series of 20 N(50, 5²) points, 4 new actuals each,
// every third series without a backtest record (its promise is the levels).
func TestCalibrationSumsMatchTheTrainers(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 19))
	levels := []float64{0.1, 0.5, 0.9}
	start := time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC)
	var want summary.Calibration
	var rows []tables.EvaluationRow
	for i := range 30 {
		v := make([]float64, 24)
		for k := range v {
			v[k] = 50 + 5*rng.NormFloat64()
		}
		s := series.Series{Key: fmt.Sprintf("item-%d", i), Start: start, Freq: series.Yearly, Values: v}
		var prev []tables.ForecastRow
		for k := range 4 {
			prev = append(prev, tables.ForecastRow{Key: s.Key, Period: s.PeriodAt(20 + k), Step: k + 1, Mean: 50, Quantiles: []float64{44, 50, 56}})
		}
		var promised *tables.Calibration
		if i%3 != 0 {
			promised = &tables.Calibration{Levels: levels, Points: 12, Below: []int{1 + i%2, 6, 11}, Pinball: []float64{0.1, 0.3, 0.1}, Bias: 0.05}
		}
		c, ok := pipeline.Calibrate(s, prev, levels, false, promised)
		if !ok {
			t.Fatalf("%s: not calibrated", s.Key)
		}
		want.Add(c)
		rows = append(rows, tables.EvaluationRow{Key: s.Key, Points: c.Points, Metric: "MASE", Calibration: pipeline.EvaluationRecord(c)})
	}
	got, skipped := calibrationSums(rows)
	if skipped != 0 || got.Points != want.Points || got.Series != want.Series || got.Pairs != want.Pairs ||
		!slices.Equal(got.Below, want.Below) || !slices.Equal(got.BelowPairs, want.BelowPairs) ||
		got.BacktestSeries != want.BacktestSeries || got.BacktestPoints != want.BacktestPoints || got.BacktestActuals != want.BacktestActuals {
		t.Fatalf("report sums %+v\ntrainer sums %+v", got, want)
	}
	for j := range levels {
		for _, pair := range [][2]float64{{got.Expected[j], want.Expected[j]}, {got.ExpectedVar[j], want.ExpectedVar[j]}, {got.PinballSum[j], want.PinballSum[j]}} {
			if math.Abs(pair[0]-pair[1]) > 1e-9*math.Max(1, math.Abs(pair[1])) {
				t.Errorf("level %v: report %v, trainer %v", levels[j], pair[0], pair[1])
			}
		}
	}
	if want.BacktestSeries != 20 {
		t.Errorf("%d backtested series, want 20", want.BacktestSeries)
	}
}

// movedMost orders by movement and judges each move against the new actuals' miss.
func TestMovedMost(t *testing.T) {
	models := []tables.ModelRow{
		{Key: "a", Movement: 2, MovementPoints: 3}, {Key: "b", Movement: 1.5, MovementPoints: 3},
		{Key: "c", Movement: 2.5, MovementPoints: 2}, {Key: "d"}, {Key: "e", Movement: 0.1, MovementPoints: 1},
	}
	evals := map[string]*tables.EvaluationRow{
		"a": {Key: "a", Points: 2, Metric: "MASE", Realized: 2.5}, "b": {Key: "b", Points: 2, Metric: "MASE", Realized: 0.5},
	}
	got := movedMost(models, evals, []string{"item"}, map[string]string{"a": "s001"}, 3)
	if len(got) != 3 || got[0].Cells[0] != "c" || got[1].Cells[0] != "a" || got[2].Cells[0] != "b" {
		t.Fatalf("order %+v", got)
	}
	if got[0].Missed != "" || got[0].Justified != "no new actuals: the move comes from re-estimation alone" ||
		got[1].Justified[:4] != "yes:" || got[1].Anchor != "s001" || got[2].Justified[:3] != "no:" {
		t.Errorf("verdicts %+v", got)
	}
}
