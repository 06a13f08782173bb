package models

import "testing"

func TestSeasonalAdjustedNaive(t *testing.T) {
	// Exactly multiplicative series: level 10 with indices 0.5, 1, 1.5; adjusted series is
	// constant 10, so σ̂_a = 0 and the forecast repeats the pattern.
	y := make([]float64, 12)
	pat := []float64{0.5, 1, 1.5}
	for i := range y {
		y[i] = 10 * pat[i%3]
	}
	f := fitFamily(t, FamilySeasonalAdjustedNaive, y, 3)
	if f.Params()["seasonal"] != 1 {
		t.Fatalf("not seasonal: %v", f.Params())
	}
	fc := f.Forecast(3, nil)
	for k, want := range []float64{5, 10, 15} { // n = 12 ≡ 0 (mod 3)
		wantNear(t, "mean", fc.Mean[k], want, 1e-12)
	}
	// Too short for the test: plain naive.
	f = fitFamily(t, FamilySeasonalAdjustedNaive, y[:8], 3)
	if f.Params()["seasonal"] != 0 || f.Forecast(1, nil).Mean[0] != y[7] {
		t.Errorf("n < 3m: want plain naive, got %v %v", f.Name(), f.Forecast(1, nil).Mean)
	}
}
