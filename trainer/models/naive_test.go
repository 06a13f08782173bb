package models

import (
	"errors"
	"math"
	"testing"
)

// fitOrFail builds the family from a bare spec and fits it.
func fitFamily(t *testing.T, family string, y []float64, m int) Fitted {
	t.Helper()
	mod, err := New(Spec{Family: family})
	if err != nil {
		t.Fatalf("New(%s): %v", family, err)
	}
	f, err := mod.Fit(y, m)
	if err != nil {
		t.Fatalf("%s.Fit: %v", family, err)
	}
	return f
}

func wantNear(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol*math.Max(1, math.Abs(want)) {
		t.Errorf("%s = %.12g, want %.12g (tol %g)", what, got, want, tol)
	}
}

// The expected values below are worked by hand from the FPP3 section 5.5 formulas quoted in
// the walkModel doc comment; z_{0.975} = 1.959963984540054 (standard normal table).
func TestNaiveWorked(t *testing.T) {
	y := []float64{1, 3, 2, 5, 4}
	f := fitFamily(t, FamilyNaive, y, 1)
	// residuals 2, −1, 3, −1: Σe² = 15 over n−1 = 4 residuals, σ̂ = √3.75.
	sigma := math.Sqrt(15.0 / 4)
	wantNear(t, "sigma", f.Params()["sigma"], sigma, 1e-14)
	fc := f.Forecast(3, []float64{0.975})
	for k := 0; k < 3; k++ {
		wantNear(t, "mean", fc.Mean[k], 4, 0)
		wantNear(t, "q97.5", fc.Quantiles[0][k], 4+1.959963984540054*sigma*math.Sqrt(float64(k+1)), 1e-12)
	}
	ins := f.InSample()
	if !math.IsNaN(ins[0]) || ins[1] != 1 || ins[4] != 5 {
		t.Errorf("InSample = %v, want [NaN 1 3 2 5]", ins)
	}
}

func TestSeasonalNaiveWorked(t *testing.T) {
	y := []float64{1, 3, 2, 5, 4, 6}
	f := fitFamily(t, FamilySeasonalNaive, y, 2)
	// lag-2 residuals 1, 2, 2, 1: Σe² = 10 over 4, σ̂ = √2.5; k = ⌊(h−1)/2⌋.
	sigma := math.Sqrt(2.5)
	fc := f.Forecast(5, []float64{0.975})
	wantMean := []float64{4, 6, 4, 6, 4}
	wantK := []float64{0, 0, 1, 1, 2}
	for k := range wantMean {
		wantNear(t, "mean", fc.Mean[k], wantMean[k], 0)
		wantNear(t, "q97.5", fc.Quantiles[0][k], wantMean[k]+1.959963984540054*sigma*math.Sqrt(wantK[k]+1), 1e-12)
	}
	if got := f.Name(); got != "SeasonalNaive(m=2)" {
		t.Errorf("Name = %q", got)
	}
}

func TestDriftWorked(t *testing.T) {
	y := []float64{1, 3, 2, 5, 4}
	f := fitFamily(t, FamilyDrift, y, 1)
	// b = (4−1)/4 = 0.75; residuals of the differences 1.25, −1.75, 2.25, −1.75:
	// Σe² = 12.75, σ̂² = 12.75/(n−2) = 4.25; σ̂_h² = 4.25 h (1 + h/4).
	wantNear(t, "drift", f.Params()["drift"], 0.75, 1e-15)
	fc := f.Forecast(2, []float64{0.025, 0.975})
	for k := 0; k < 2; k++ {
		h := float64(k + 1)
		mean := 4 + 0.75*h
		se := math.Sqrt(4.25 * h * (1 + h/4))
		wantNear(t, "mean", fc.Mean[k], mean, 1e-14)
		wantNear(t, "q2.5", fc.Quantiles[0][k], mean-1.959963984540054*se, 1e-12)
		wantNear(t, "q97.5", fc.Quantiles[1][k], mean+1.959963984540054*se, 1e-12)
	}
}

// Student-t quantile t_{0.975, 2} = 4.302652729911275 (standard t table, value given to the
// table's 4.303 and computed to full precision with R's qt(0.975, 2)).
func TestMeanWorked(t *testing.T) {
	f := fitFamily(t, FamilyMean, []float64{2, 4, 6}, 1)
	// ȳ = 4, s = 2, σ̂_h = 2 √(1 + 1/3).
	fc := f.Forecast(2, []float64{0.975})
	wantNear(t, "mean", fc.Mean[1], 4, 0)
	wantNear(t, "q97.5", fc.Quantiles[0][1], 4+4.302652729911275*2*math.Sqrt(4.0/3), 1e-9)
}

func TestWalkBadInput(t *testing.T) {
	for _, fam := range []string{FamilyMean, FamilyNaive, FamilySeasonalNaive, FamilyDrift, FamilySeasonalAdjustedNaive} {
		mod, _ := New(Spec{Family: fam})
		if _, err := mod.Fit([]float64{1}, 1); !errors.Is(err, ErrTooShort) {
			t.Errorf("%s: Fit(len 1) err = %v, want ErrTooShort", fam, err)
		}
		if _, err := mod.Fit([]float64{1, 2, math.NaN(), 4, 5}, 1); err == nil {
			t.Errorf("%s: Fit with NaN succeeded", fam)
		}
	}
	mod, _ := New(Spec{Family: FamilySeasonalNaive})
	if _, err := mod.Fit([]float64{1, 2, 3, 4}, 4); !errors.Is(err, ErrTooShort) {
		t.Errorf("SeasonalNaive n = m: err = %v, want ErrTooShort", err)
	}
}

func TestForecastMisusePanics(t *testing.T) {
	f := fitFamily(t, FamilyNaive, []float64{1, 2, 3}, 1)
	for name, call := range map[string]func(){
		"negative h": func() { f.Forecast(-1, nil) },
		"level 1":    func() { f.Forecast(2, []float64{1}) },
		"level 0":    func() { f.Forecast(2, []float64{0}) },
	} {
		func() {
			defer func() {
				r := recover()
				if s, ok := r.(string); !ok || len(s) < 7 || s[:7] != "models:" {
					t.Errorf("%s: recovered %v, want a panic starting with \"models:\"", name, r)
				}
			}()
			call()
		}()
	}
}
