package backtest

import (
	"math"
	"testing"
)

// TestSymmetricMAPE: the M4 Competitor's Guide (2018) sMAPE, worked by hand: y = (100, 50, 0),
// f = (110, 40, 0) gives terms 200*10/210 = 9.5238, 200*10/90 = 22.2222 and 0 for the exact
// zero (0/0, counted as 0), mean 10.5820. A zero actual against a non-zero forecast is the
// formula's largest term, 200. Empty input is NaN.
func TestSymmetricMAPE(t *testing.T) {
	for _, c := range []struct {
		y, f []float64
		want float64
	}{
		{[]float64{100, 50, 0}, []float64{110, 40, 0}, (2000.0/210 + 2000.0/90) / 3},
		{[]float64{0, 0}, []float64{0, 0}, 0},
		{[]float64{0}, []float64{3}, 200},
		{[]float64{-10}, []float64{10}, 200},
	} {
		if got := SymmetricMAPE(c.y, c.f); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("SymmetricMAPE(%v, %v) = %v, want %v", c.y, c.f, got, c.want)
		}
	}
	if got := SymmetricMAPE(nil, nil); !math.IsNaN(got) {
		t.Errorf("empty input: %v, want NaN", got)
	}
}
