package models

import (
	"math"
	"slices"
	"testing"

	"almanac.dev/almanac/trainer/numeric/classical"
	"almanac.dev/almanac/trainer/numeric/stationarity"
)

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

// TestSeasonIndicesRule: the decision of seasonIndices by history length (its doc comment;
// the STL seasonal-strength rule of R forecast 8.20's nsdiffs(test = "seas"), checked against
// R in test/reference/seasonstrength_test.go). A weekly series with a rising trend and a strong
// yearly cycle: between two and three seasons the autocorrelation test (classical, n >= 3m
// only) never adjusts and the strength does; at 3m and beyond the autocorrelation test's
// decision and indices stand where it adjusts, and the strength decides where the trend
// defeats it; at n <= 2m nothing adjusts. SeasonalAdjustedNaive (the
// bench's Naive2) keeps the autocorrelation rule throughout.
func TestSeasonIndicesRule(t *testing.T) {
	const m = 52
	y := make([]float64, 4*m)
	for i := range y {
		tt := float64(i)
		y[i] = (100 + 0.5*tt) * (1 + 0.3*math.Sin(2*math.Pi*tt/52.18)) * (1 + 0.02*math.Cos(1.7*tt))
	}
	for _, n := range []int{2 * m, 2*m + 1, 130, 3*m - 1, 3 * m, 4 * m} {
		x := y[:n]
		idx, ok := seasonIndices(x, m)
		old, oldOK := classical.SeasonalIndices(x, m)
		switch {
		case n <= 2*m:
			if ok {
				t.Errorf("n = %d <= 2m: seasonIndices adjusts", n)
			}
		case n < 3*m:
			if oldOK {
				t.Errorf("n = %d < 3m: classical.SeasonalIndices adjusts (M4 rule needs n >= 3m)", n)
			}
			if s := stationarity.SeasonalStrength(x, m); !ok || s <= stationarity.SeasonalStrengthThreshold {
				t.Errorf("n = %d: strength %.4f, seasonIndices adjusts %v; want a strong season found", n, s, ok)
			}
		case oldOK:
			if !ok || !slices.Equal(idx, old) {
				t.Errorf("n = %d >= 3m: the autocorrelation test adjusts, seasonIndices (%v) differs", n, ok)
			}
		default:
			// The trend defeats the autocorrelation test; the strength still finds the season.
			want, wantOK := classical.UsableIndices(x, m)
			if s := stationarity.SeasonalStrength(x, m); s <= stationarity.SeasonalStrengthThreshold || !ok || !wantOK || !slices.Equal(idx, want) {
				t.Errorf("n = %d >= 3m, autocorrelation test negative: strength %.4f, seasonIndices adjusts %v; want the classical indices", n, s, ok)
			}
		}
		f, err := adjNaiveModel{}.Fit(x, m)
		if err != nil {
			t.Fatal(err)
		}
		if got := f.Params()["seasonal"] == 1; got != oldOK {
			t.Errorf("n = %d: SeasonalAdjustedNaive seasonal %v, classical rule %v", n, got, oldOK)
		}
	}
}
