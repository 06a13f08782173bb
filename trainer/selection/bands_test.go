package selection

import (
	"math"
	"testing"
)

// bandPool builds n one-step results with mean 0 and the 2.5%, 50% and 97.5% quantiles at
// -2, 0 and 2, scale 1 everywhere, whose backtest errors together are -4.00, -3.99, ..., -0.01,
// 0.01, ..., 4.00 (800 points, n*perSeries of them dealt out in order).
func bandPool(n int) []*Result {
	var errs []float64
	for i := 1; i <= 400; i++ {
		errs = append(errs, -float64(i)/100, float64(i)/100)
	}
	per := len(errs) / n
	pool := make([]*Result, n)
	for s := range pool {
		b := bandBacktest{scale: 1}
		for _, e := range errs[s*per : (s+1)*per] {
			b.scales = append(b.scales, 1)
			b.errs = append(b.errs, []float64{e})
		}
		pool[s] = &Result{Levels: []float64{0.025, 0.5, 0.975}, Mean: []float64{0}, Quantiles: [][]float64{{-2}, {0}, {2}}, band: b}
	}
	return pool
}

// TestCalibrateBandsByHand: the pooled ratios r = u/d are e/2 on the upper side and -e/2 on
// the lower side, both the 800 values ±0.005, ..., ±2.000. Their 0.975 quantile (Hyndman & Fan
// definition 7: h = 0.975·799 = 779.025, between the 780th and 781st smallest, 1.900 and
// 1.905) is 1.900 + 0.025·0.005 = 1.900125 for both tails; the median level keeps 1. The new
// band is ±3.80025, and the recomputed promise puts 780 of 800 points at or below it (every
// negative error and 0.01..3.80): 0.975.
func TestCalibrateBandsByHand(t *testing.T) {
	pool := bandPool(40)
	c := CalibrateBands(pool, false)
	want := []float64{1.900125, 1, 1.900125}
	for j := range want {
		if math.Abs(c[j]-want[j]) > 1e-12 {
			t.Fatalf("factors %v, want %v", c, want)
		}
	}
	r := pool[7]
	if math.Abs(r.Quantiles[0][0]+3.80025) > 1e-12 || r.Quantiles[1][0] != 0 || math.Abs(r.Quantiles[2][0]-3.80025) > 1e-12 {
		t.Errorf("band %v, want ±3.80025 around 0", r.Quantiles)
	}
	below := [3]int{}
	points := 0
	for _, p := range pool {
		points += p.Backtest.Points
		for j := range below {
			below[j] += p.Backtest.Below[j]
		}
	}
	if points != 800 || below != [3]int{20, 400, 780} {
		t.Errorf("promise: %d points, below %v; want 800, [20 400 780]", points, below)
	}
}

// TestCalibrateBandsKeepsSmallPools: 29 series are too few to pool (minBandSeries), so every
// factor is 1 and the bands stay; a pool without band backtests gives no factors.
func TestCalibrateBandsKeepsSmallPools(t *testing.T) {
	pool := bandPool(40)[:29]
	if c := CalibrateBands(pool, false); len(c) != 3 || c[0] != 1 || c[1] != 1 || c[2] != 1 || pool[0].Quantiles[2][0] != 2 {
		t.Errorf("29 series: factors %v, band %v; want 1s and the band as it was", c, pool[0].Quantiles)
	}
	if c := CalibrateBands([]*Result{{Mean: []float64{1}}}, false); c != nil {
		t.Errorf("no band backtest: %v", c)
	}
}

// TestScaleBandsKeepsOrderAndSign: factors that would cross two levels on one side leave the
// quantiles sorted; a non-negative series' scaled lower quantile is clipped at 0; the rows are
// new (the old ones may belong to another result).
func TestScaleBandsKeepsOrderAndSign(t *testing.T) {
	old := [][]float64{{4, 4}, {9, 9}, {11, 11}}
	r := &Result{Levels: []float64{0.05, 0.1, 0.9}, Mean: []float64{10, 10}, Quantiles: old,
		band: bandBacktest{scale: 1, scales: []float64{1}, errs: [][]float64{{0, 0}}}}
	ScaleBands(r, []float64{0.1, 3, 1}, true) // 10 - 0.6 = 9.4 and 10 - 3 = 7: crossed
	if want := [][]float64{{7, 7}, {9.4, 9.4}, {11, 11}}; !equalRows(r.Quantiles, want) {
		t.Errorf("crossed levels: %v, want %v", r.Quantiles, want)
	}
	if old[0][0] != 4 {
		t.Errorf("the old rows changed: %v", old)
	}
	// Twice: 10 + 3·(7 − 10) = 1, then 10 + 3·(1 − 10) = −17, clipped to 0.
	ScaleBands(r, []float64{3, 1, 1}, true)
	ScaleBands(r, []float64{3, 1, 1}, true)
	if r.Quantiles[0][0] != 0 {
		t.Errorf("non-negative: lowest quantile %v, want 0", r.Quantiles[0][0])
	}
}

func equalRows(a, b [][]float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if len(a[i]) != len(b[i]) {
			return false
		}
		for k := range a[i] {
			if math.Abs(a[i][k]-b[i][k]) > 1e-12 {
				return false
			}
		}
	}
	return true
}
