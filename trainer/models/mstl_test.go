package models

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/series"
)

// hourlyOrders is our own demo scenario: four weeks of hourly orders at a Fenwick Lane depot,
// with a day cycle, a weekend dip and noise (fixed PCG seed).
func hourlyOrders(n int) []float64 {
	rng := rand.New(rand.NewPCG(24, 168))
	y := make([]float64, n)
	for i := range y {
		weekend := 0.0
		if i%168 >= 120 {
			weekend = -15
		}
		y[i] = 100 + 30*math.Sin(2*math.Pi*float64(i)/24) + weekend + 3*rng.NormFloat64()
	}
	return y
}

// checkWeeklyDip: a week-ahead forecast from the end of hourlyOrders (Sunday 23:00) keeps the
// weekend 15 below the weekdays (steps 121..144 are next Saturday), and its 10% and 90%
// quantiles lie either side of the mean.
func checkWeeklyDip(t *testing.T, fam string, fc Forecast) {
	t.Helper()
	weekday, weekend := 0.0, 0.0
	for k := 0; k < 24; k++ {
		weekday += fc.Mean[k] / 24
		weekend += fc.Mean[120+k] / 24
	}
	if !(weekday-weekend > 10) {
		t.Errorf("%s: weekday mean %v, weekend %v: the weekly dip is lost", fam, weekday, weekend)
	}
	if !(fc.Quantiles[0][5] < fc.Mean[5] && fc.Mean[5] < fc.Quantiles[1][5]) {
		t.Errorf("%s: quantiles %v %v around %v", fam, fc.Quantiles[0][5], fc.Quantiles[1][5], fc.Mean[5])
	}
}

// TestMSTLMembersTakeTheFrequencysPeriods: through FitInputs an hourly series gets periods 24
// and 168, a declared list wins, too short a history drops the week, and the forecast
// repeats the weekend dip, which a 24-hour season alone cannot.
func TestMSTLMembersTakeTheFrequencysPeriods(t *testing.T) {
	y := hourlyOrders(24 * 7 * 4)
	for _, fam := range []string{FamilyMSTLETS, FamilyMSTLTheta, FamilyMSTLARIMA} {
		mod, err := New(Spec{Family: fam})
		if err != nil {
			t.Fatal(err)
		}
		f, err := FitWith(mod, y, 24, &Inputs{Freq: series.Hourly})
		if err != nil {
			t.Fatal(err)
		}
		if !strings.HasPrefix(f.Name(), "MSTL(24,168)+") || f.Params()["period2"] != 168 {
			t.Errorf("%s: %s %v, want periods 24 and 168", fam, f.Name(), f.Params())
		}
		fc := f.Forecast(168, []float64{0.1, 0.9})
		checkWeeklyDip(t, fam, fc)
		if in := f.InSample(); len(in) != len(y) {
			t.Errorf("%s: %d fitted values", fam, len(in))
		}
		f, err = FitWith(mod, y[:300], 24, &Inputs{Freq: series.Hourly})
		if err != nil || !strings.HasPrefix(f.Name(), "MSTL(24)+") {
			t.Errorf("%s on 300 hours: %v %v, want the week dropped", fam, f, err)
		}
	}
	mod, _ := New(Spec{Family: FamilyMSTLTheta, SeasonalPeriods: []float64{12}})
	if f, err := FitWith(mod, y, 24, &Inputs{Freq: series.Hourly}); err != nil || !strings.HasPrefix(f.Name(), "MSTL(12)+") {
		t.Errorf("declared period 12: %v %v", f, err)
	}
	// Without inputs the frequency is inferred from the season length; m = 1 has no period.
	mod, _ = New(Spec{Family: FamilyMSTLTheta})
	if f, err := mod.Fit(y, 24); err != nil || !strings.HasPrefix(f.Name(), "MSTL(24,168)+") {
		t.Errorf("Fit(y, 24): %v %v", f, err)
	}
	if f, err := mod.Fit(y, 1); err != nil || f.Name() != "MSTL()+Theta" {
		t.Errorf("Fit(y, 1): %v %v", f, err)
	}
	if _, err := New(Spec{Family: FamilyMSTLETS, SeasonalPeriods: []float64{1.5}}); err == nil || !strings.Contains(err.Error(), "seasonalPeriods[0]") {
		t.Errorf("period 1.5: %v", err)
	}
}

// TestFourierARIMAHourly: on four weeks of hourly orders the harmonic regression takes periods
// 24 and 168 from the frequency, chooses pairs for both, and its forecast keeps the weekend
// dip and the day cycle.
func TestFourierARIMAHourly(t *testing.T) {
	y := hourlyOrders(24 * 7 * 4)
	mod, err := New(Spec{Family: FamilyFourierARIMA})
	if err != nil {
		t.Fatal(err)
	}
	f, err := FitWith(mod, y, 24, &Inputs{Freq: series.Hourly})
	if err != nil {
		t.Fatal(err)
	}
	p := f.Params()
	if !strings.HasPrefix(f.Name(), "Fourier(24:") || p["harmonics1"] < 1 || p["harmonics2"] < 1 {
		t.Fatalf("%s %v: want pairs for 24 and 168", f.Name(), p)
	}
	// The day cycle is 30 sin(2 pi t / 24) with t = 0 at y[0]: at R's t = 1..n the S1-24 term
	// sin(2 pi t / 24) carries it with coefficient near 30 cos(2 pi / 24) = 28.98 and C1-24
	// near -30 sin(2 pi / 24) = -7.76.
	if math.Abs(p["S1-24"]-28.98) > 1.5 || math.Abs(p["C1-24"]+7.76) > 1.5 {
		t.Errorf("day-cycle coefficients S1-24 %v, C1-24 %v", p["S1-24"], p["C1-24"])
	}
	fc := f.Forecast(168, []float64{0.1, 0.9})
	checkWeeklyDip(t, FamilyFourierARIMA, fc)
	if g, err := mod.Fit(y[:40], 24); err != nil || !strings.HasPrefix(g.Name(), "Fourier()+") {
		t.Errorf("40 hours: %v %v, want no period kept", g, err)
	}
}

// TestMultiSeasonalUpdate: carried forward to a longer history, the MSTL and Fourier members
// keep their adjusted model's estimates (the same ETS form, ARIMA order and Fourier pairs) and
// forecast from the new end: updating on the history they were fitted on gives their forecast
// back, and an update on a longer history is what a fit there with the same estimates gives.
func TestMultiSeasonalUpdate(t *testing.T) {
	y := hourlyOrders(24 * 7 * 4)
	type updater interface {
		Update([]float64) (Fitted, error)
	}
	for _, fam := range []string{FamilyMSTLETS, FamilyMSTLTheta, FamilyMSTLARIMA, FamilyFourierARIMA} {
		mod, err := New(Spec{Family: fam})
		if err != nil {
			t.Fatal(err)
		}
		f, err := FitWith(mod, y[:600], 24, &Inputs{Freq: series.Hourly})
		if err != nil {
			t.Fatal(err)
		}
		u, ok := f.(updater)
		if !ok {
			t.Fatalf("%s: fit is not an updater", fam)
		}
		same, err := u.Update(y[:600])
		if err != nil {
			t.Fatal(err)
		}
		a, b := f.Forecast(24, nil).Mean, same.Forecast(24, nil).Mean
		for k := range a {
			if math.Abs(a[k]-b[k]) > 1e-9*math.Max(1, math.Abs(a[k])) {
				t.Fatalf("%s: update on the fitted history forecasts %v, the fit %v (step %d)", fam, b[k], a[k], k+1)
			}
		}
		longer, err := u.Update(y)
		if err != nil {
			t.Fatal(err)
		}
		if longer.Name() != f.Name() {
			t.Errorf("%s: update changed the model from %s to %s", fam, f.Name(), longer.Name())
		}
		if _, err := u.Update(y[:500]); err == nil {
			t.Errorf("%s: update on a shorter history accepted", fam)
		}
		checkWeeklyDip(t, fam, longer.Forecast(168, []float64{0.1, 0.9}))
	}
}

// BenchmarkMultiSeasonalFit fits each multi-seasonal family, and seasonal naive and Theta for
// scale, on 960 hours (M4 hourly's longest training length) of the demo orders.
func BenchmarkMultiSeasonalFit(b *testing.B) {
	y := hourlyOrders(960)
	for _, fam := range []string{FamilySeasonalNaive, FamilyTheta, FamilyMSTLTheta, FamilyMSTLETS, FamilyMSTLARIMA, FamilyFourierARIMA} {
		mod, err := New(Spec{Family: fam})
		if err != nil {
			b.Fatal(err)
		}
		b.Run(fam, func(b *testing.B) {
			for b.Loop() {
				if _, err := FitWith(mod, y, 24, &Inputs{Freq: series.Hourly}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
