package models

import (
	"math"
	"testing"
)

// TestETSARIMAThetaIsTheMemberMean: the combination member's forecast mean and quantiles are
// the equal-weight averages of its members fitted on their own (the definition; Makridakis &
// Hibon 2000 and Hyndman & Athanasopoulos FPP3 section 13.4 on forecast combinations).
func TestETSARIMAThetaIsTheMemberMean(t *testing.T) {
	y := depotDemand()
	levels := []float64{0.1, 0.9}
	trio, err := New(Spec{Family: FamilyETSARIMATheta})
	if err != nil {
		t.Fatal(err)
	}
	fit, err := trio.Fit(y, 12)
	if err != nil {
		t.Fatal(err)
	}
	got := fit.Forecast(6, levels)
	var fcs []Forecast
	for _, f := range []string{FamilyETS, FamilyARIMA, FamilyTheta} {
		m, err := New(Spec{Family: f})
		if err != nil {
			t.Fatal(err)
		}
		mf, err := m.Fit(y, 12)
		if err != nil {
			t.Fatal(err)
		}
		fcs = append(fcs, mf.Forecast(6, levels))
	}
	for k := 0; k < 6; k++ {
		want := (fcs[0].Mean[k] + fcs[1].Mean[k] + fcs[2].Mean[k]) / 3
		if math.Abs(got.Mean[k]-want) > 1e-9*math.Abs(want) {
			t.Errorf("step %d: mean %v, members' average %v", k+1, got.Mean[k], want)
		}
		for j := range levels {
			wq := (fcs[0].Quantiles[j][k] + fcs[1].Quantiles[j][k] + fcs[2].Quantiles[j][k]) / 3
			if math.Abs(got.Quantiles[j][k]-wq) > 1e-9*math.Abs(wq) {
				t.Errorf("step %d level %v: %v, members' average %v", k+1, levels[j], got.Quantiles[j][k], wq)
			}
		}
	}
	if n := fit.Name(); len(n) < 10 || n[:5] != "mean(" {
		t.Errorf("name %q does not list the members", n)
	}
}
