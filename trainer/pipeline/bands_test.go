package pipeline

import (
	"context"
	"math"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/synth"
)

// TestUnitBandsMeetTheirPooledBacktest: a unit of 48 weekly series (one object) publishes
// bands widened or narrowed by its pooled backtest (quantileWidth Backtest,
// selection.CalibrateBands), so over the unit the models table's promise, the share of
// backtest points at or below each quantile, is the quantile's level up to the interpolation of
// one order statistic among the points. With quantileWidth Model the same run publishes ETS's
// own bands, which promise 0.063 and 0.853 on this data (73 and 983 of 1152 points): the check
// fails without the calibration, and the Model run must keep those bands. A hierarchical run
// takes its bands from reconciled backtest errors and is not checked here (hierarchy tests
// cover its promise).
func TestUnitBandsMeetTheirPooledBacktest(t *testing.T) {
	levels := []float64{0.1, 0.9}
	points, below := unitBandPromise(t, runconfig.QuantileWidthBacktest)
	for j, tau := range levels {
		share := float64(below[j]) / float64(points)
		if math.Abs(share-tau) > 2/float64(points)+1e-9 {
			t.Errorf("Backtest, level %.1f: %d of %d backtest points below (%.4f); want the level", tau, below[j], points, share)
		}
	}
	mp, mb := unitBandPromise(t, runconfig.QuantileWidthModel)
	if mp != points {
		t.Fatalf("Model: %d backtest points, Backtest %d: the same series and origins must be scored", mp, points)
	}
	// ETS's bands are too narrow in both tails here (above); Model must publish them so.
	if lo, hi := float64(mb[0])/float64(mp), float64(mb[1])/float64(mp); !(lo < levels[0]-0.02 && hi < levels[1]-0.02) {
		t.Errorf("Model: promise %.4f / %.4f, want ETS's own bands (about 0.063 / 0.853), not calibrated ones", lo, hi)
	}
}

// unitBandPromise runs the 48-series unit with the given quantileWidth and returns the models
// table's backtest points and the points at or below the 10% and 90% quantiles, summed.
func unitBandPromise(t *testing.T, width string) (points int, below []int) {
	t.Helper()
	ctx := context.Background()
	dir := t.TempDir()
	in, out := "file://"+dir+"/in/", "file://"+dir+"/out/"
	o := synth.Options{Items: 48, Depots: 1, Frequency: synth.Weekly, Periods: 150, Seed: 7}
	if _, err := o.Write(ctx, mustOpen(t, in), "", synth.CSV); err != nil {
		t.Fatal(err)
	}
	cfg := &runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind, Run: "flp-bands-1", Trigger: "Manual",
		Source: runconfig.Source{URI: in, Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true, Partitioning: runconfig.PartitionObjects,
			Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: o.DateColumn(), Value: "units"}},
		Output: runconfig.Output{URI: out, Format: "csv"}, Horizon: 8, QuantilePercents: []int{10, 90}, QuantileWidth: width,
		Models:    []runconfig.Model{{Family: models.FamilyETS}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 1, BacktestRefit: runconfig.RefitOnce, Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:  runconfig.Sharding{TargetSeriesPerShard: 1000},
		Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 1},
	}
	env := Env{Now: func() time.Time { return time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC) }, Workers: 2}
	if _, err := RunLocal(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	m := checkPublished(t, mustOpen(t, out), cfg.Run)
	if len(m.Units) != 1 {
		t.Fatalf("%d units, want one of every series", len(m.Units))
	}
	below = make([]int, 2)
	series := 0
	for _, r := range unitModels(t, mustOpen(t, out), m.Units[0], "csv") {
		if r.Backtest == nil {
			continue
		}
		series++
		points += r.Backtest.Points
		for j := range below {
			below[j] += r.Backtest.Below[j]
		}
	}
	if series < 30 {
		t.Fatalf("%s: %d series with a backtest record, want at least 30 to pool", width, series)
	}
	t.Logf("%s: %d series, %d points, below %v", width, series, points, below)
	return points, below
}
