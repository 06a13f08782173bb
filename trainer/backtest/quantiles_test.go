package backtest

import (
	"math"
	"slices"
	"testing"
)

// A hand-worked case: y = 0..5 has a naive scale of 1 on every prefix; one origin fitted on 4
// points with errors (actual − forecast) 0.5 and −2, a published mean 10 and quantiles 10 and
// 11 (offsets 0 and 1). Level 0.5: 0.5 > 0, −2 <= 0, one below; pinball 0.5·0.5 + 0.5·2 = 1.25.
// Level 0.9: both below (0.5 <= 1, −2 <= 1); pinball 0.1·0.5 + 0.1·3 = 0.35. Bias −(0.5 − 2).
func TestQuantilesOnBacktest(t *testing.T) {
	y := []float64{0, 1, 2, 3, 4, 5}
	rec, ok := QuantilesOnBacktest(y, 1, []int{4}, [][]float64{{0.5, -2}}, []float64{0.5, 0.9}, []float64{10, 10}, [][]float64{{10, 10}, {11, 11}})
	if !ok || rec.Points != 2 || !slices.Equal(rec.Below, []int{1, 2}) || rec.BiasSum != 1.5 ||
		math.Abs(rec.PinballSum[0]-1.25) > 1e-12 || math.Abs(rec.PinballSum[1]-0.35) > 1e-12 {
		t.Errorf("got %+v %v", rec, ok)
	}
	// A constant history has no scale: nothing to score.
	if _, ok := QuantilesOnBacktest([]float64{3, 3, 3, 3, 3}, 1, []int{3}, [][]float64{{0, 0}}, []float64{0.5}, []float64{3, 3}, [][]float64{{3, 3}}); ok {
		t.Errorf("scored a series without scale")
	}
	// Quantiles of the wrong shape are refused.
	if _, ok := QuantilesOnBacktest(y, 1, []int{4}, [][]float64{{0.5, -2}}, []float64{0.5, 0.9}, []float64{10, 10}, [][]float64{{10, 10}}); ok {
		t.Errorf("scored quantiles with a level missing")
	}
}
