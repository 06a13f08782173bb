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
		// The series ends at hour 671 = Sunday 23:00 of week 4; steps 121..144 are next weekend.
		fc := f.Forecast(168, []float64{0.1, 0.9})
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
