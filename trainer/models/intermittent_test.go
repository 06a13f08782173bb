package models

import (
	"errors"
	"math"
	"testing"
)

func fitWeights(t *testing.T, family string, y []float64, a, b float64) Fitted {
	t.Helper()
	mod, err := New(Spec{Family: family, Smoothing: &SmoothingOptions{Alpha: a, Beta: b}})
	if err != nil {
		t.Fatalf("New(%s): %v", family, err)
	}
	f, err := mod.Fit(y, 1)
	if err != nil {
		t.Fatalf("%s.Fit: %v", family, err)
	}
	return f
}

func wantSlice(t *testing.T, what string, got, want []float64, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: len %d, want %d", what, len(got), len(want))
	}
	for i := range want {
		if math.IsNaN(want[i]) != math.IsNaN(got[i]) || !math.IsNaN(want[i]) && math.Abs(got[i]-want[i]) > tol {
			t.Errorf("%s[%d] = %.12g, want %.12g", what, i, got[i], want[i])
		}
	}
}

// workedY is the hand example: periods 1..7, demands of 3, 2 and 4 at periods 2, 5 and 7.
var workedY = []float64{0, 3, 0, 0, 2, 0, 4}

// Worked by hand from Croston (1972)'s separate smoothing of sizes and intervals (the updating
// equations as restated in Syntetos & Boylan 2005, section 2; equation numbers not checked),
// with the start-up of the intermittentModel doc comment, α = β = 0.5:
//
//	t=2 y=3: start ẑ=3, p̂=2 (first interval counted from the origin)
//	t=3,4:   forecast 3/2 = 1.5
//	t=5 y=2, q=3: ẑ = 3 + .5(2−3) = 2.5, p̂ = 2 + .5(3−2) = 2.5
//	t=6,7:   forecast 2.5/2.5 = 1
//	t=7 y=4, q=2: ẑ = 2.5 + .5(4−2.5) = 3.25, p̂ = 2.5 + .5(2−2.5) = 2.25
//	forecast 3.25/2.25 = 13/9; in-sample errors −1.5, −1.5, .5, −1, 3: MSE = 14.75/5 = 2.95
func TestCrostonWorked(t *testing.T) {
	f := fitWeights(t, FamilyCroston, workedY, 0.5, 0.5)
	wantSlice(t, "fitted", f.InSample(), []float64{math.NaN(), 0, 1.5, 1.5, 1.5, 1, 1}, 1e-15)
	fc := f.Forecast(3, []float64{0.5, 0.9})
	wantSlice(t, "mean", fc.Mean, []float64{13.0 / 9, 13.0 / 9, 13.0 / 9}, 1e-15)
	if fc.Quantiles != nil {
		t.Error("Croston must return Quantiles == nil")
	}
	p := f.Params()
	wantSlice(t, "params", []float64{p["demand"], p["interval"], p["mse"]}, []float64{3.25, 2.25, 2.95}, 1e-15)
}

// Worked by hand from Syntetos & Boylan (2005), the bias-corrected estimator (1 − β/2)·ẑ/p̂:
// with β = 0.5 the factor is 0.75, so every Croston value above is multiplied by 0.75.
func TestSBAWorked(t *testing.T) {
	f := fitWeights(t, FamilySBA, workedY, 0.5, 0.5)
	wantSlice(t, "fitted", f.InSample(), []float64{math.NaN(), 0, 1.125, 1.125, 1.125, 0.75, 0.75}, 1e-15)
	wantSlice(t, "mean", f.Forecast(1, nil).Mean, []float64{13.0 / 12}, 1e-15)
}

// Worked by hand from Teunter, Syntetos & Babai (2011), the TSB updating equations (section 3;
// equation numbers not checked), α = β = 0.5, start d̂ = 1/t₁ = 1/2, ẑ = 3 at t = 2:
//
//	t=3 forecast .5·3 = 1.5;   y=0: d̂ = .25
//	t=4 forecast .75;          y=0: d̂ = .125
//	t=5 forecast .375;         y=2: d̂ = .125 + .5(.875) = .5625, ẑ = 2.5
//	t=6 forecast 1.40625;      y=0: d̂ = .28125
//	t=7 forecast .703125;      y=4: d̂ = .28125 + .5(.71875) = .640625, ẑ = 3.25
//	forecast .640625 · 3.25 = 2.08203125
func TestTSBWorked(t *testing.T) {
	f := fitWeights(t, FamilyTSB, workedY, 0.5, 0.5)
	wantSlice(t, "fitted", f.InSample(), []float64{math.NaN(), 0, 1.5, 0.75, 0.375, 1.40625, 0.703125}, 1e-15)
	wantSlice(t, "mean", f.Forecast(2, nil).Mean, []float64{2.08203125, 2.08203125}, 1e-15)
	if p := f.Params()["probability"]; p != 0.640625 {
		t.Errorf("probability = %v, want 0.640625", p)
	}
}

// Obsolescence, the motivation of TSB (Teunter, Syntetos & Babai 2011, section 1): after demand
// stops, Croston's forecast stays put while TSB's decays by (1 − β) per zero period.
func TestTSBDecaysCrostonDoesNot(t *testing.T) {
	y := append([]float64{2, 2, 2, 2}, make([]float64, 10)...)
	cr := fitWeights(t, FamilyCroston, y, 0.2, 0.2).Forecast(1, nil).Mean[0]
	ts := fitWeights(t, FamilyTSB, y, 0.2, 0.2).Forecast(1, nil).Mean[0]
	// Croston: ẑ = 2, p̂ = 1 (all intervals 1). TSB: d̂ = 1 after the run, then 0.8^10.
	wantSlice(t, "croston, tsb", []float64{cr, ts}, []float64{2, 2 * math.Pow(0.8, 10)}, 1e-14)
}

func TestIntermittentEstimatedWeights(t *testing.T) {
	y := []float64{0, 0, 5, 0, 0, 0, 6, 0, 4, 0, 0, 0, 0, 7, 0, 0, 5, 0, 0, 6, 0, 0, 0, 4, 0, 5}
	for _, fam := range []string{FamilyCroston, FamilySBA, FamilyTSB} {
		est := fitWeights(t, fam, y, 0, 0).Params()
		fixed := fitWeights(t, fam, y, 0.1, 0.1).Params()
		if est["mse"] > fixed["mse"] {
			t.Errorf("%s: estimated weights MSE %.6g > fixed 0.1 MSE %.6g", fam, est["mse"], fixed["mse"])
		}
		for _, k := range []string{"alpha", "beta"} {
			w := est[k]
			if r := math.Round(w / weightGridStep); w < 0.05 || w > 0.5 || math.Abs(w-r*weightGridStep) > 1e-12 {
				t.Errorf("%s: %s = %v not on the 0.05..0.50 grid", fam, k, w)
			}
		}
		// Fixing one weight estimates only the other.
		half := fitWeights(t, fam, y, 0.3, 0).Params()
		if half["alpha"] != 0.3 {
			t.Errorf("%s: fixed alpha 0.3 became %v", fam, half["alpha"])
		}
	}
}

func TestIntermittentEdgeCases(t *testing.T) {
	for _, fam := range []string{FamilyCroston, FamilySBA, FamilyTSB} {
		f := fitWeights(t, fam, []float64{0, 0, 0}, 0, 0)
		if got := f.Forecast(2, nil).Mean; got[0] != 0 || got[1] != 0 {
			t.Errorf("%s all-zero: forecast %v, want 0", fam, got)
		}
		mod, _ := New(Spec{Family: fam})
		if _, err := mod.Fit([]float64{1, -1, 2}, 1); err == nil {
			t.Errorf("%s: negative demand accepted", fam)
		}
		if _, err := mod.Fit([]float64{1, math.Inf(1)}, 1); err == nil {
			t.Errorf("%s: Inf accepted", fam)
		}
		if _, err := mod.Fit([]float64{1}, 1); !errors.Is(err, ErrTooShort) {
			t.Errorf("%s: len 1: %v", fam, err)
		}
		if _, err := New(Spec{Family: fam, Smoothing: &SmoothingOptions{Alpha: 1.5}}); err == nil {
			t.Errorf("%s: alpha 1.5 accepted", fam)
		}
	}
}

// Benchmark sizes: a weekly series of two years with the default (estimated) weights, the
// case the zoo runs for every intermittent series.
func BenchmarkCrostonFit(b *testing.B) {
	y := make([]float64, 104)
	for i := range y {
		if (7*i)%11 < 3 {
			y[i] = float64(1 + (5*i)%7)
		}
	}
	mod, _ := New(Spec{Family: FamilyCroston})
	b.ReportAllocs()
	for b.Loop() {
		if _, err := mod.Fit(y, 1); err != nil {
			b.Fatal(err)
		}
	}
}
