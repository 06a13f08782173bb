package models

import (
	"math"
	"sort"
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

// Updating carries the estimates forward (Tashman 2000, section 3, "updating"): an ARIMA fit
// updated on its own history has the same log likelihood, on a longer one it equals ARIMAAt at
// the same coefficients, and a shorter history is refused. The combination updates ETS and
// ARIMA that way and refits Theta, so its forecast is the mean of those three.
func TestARIMAAndTrioUpdate(t *testing.T) {
	y := airPassengers
	fit, err := SelectARIMA(y[:120], 12, ARIMABounds{})
	if err != nil {
		t.Fatal(err)
	}
	same, err := fit.Update(y[:120])
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(same.(*ARIMAFit).LogLik() - fit.LogLik()); d > 1e-9*math.Abs(fit.LogLik()) {
		t.Errorf("update on the fitted history changes the log likelihood by %g", d)
	}
	longer, err := fit.Update(y)
	if err != nil {
		t.Fatal(err)
	}
	at, err := ARIMAAt(y, 12, fit.Order(), fit.Coef())
	if err != nil {
		t.Fatal(err)
	}
	a, b := longer.Forecast(6, nil).Mean, at.Forecast(6, nil).Mean
	for k := range a {
		if a[k] != b[k] {
			t.Errorf("step %d: updated %v, ARIMAAt %v", k+1, a[k], b[k])
		}
	}
	if _, err := fit.Update(y[:100]); err == nil {
		t.Error("update on a shorter history: no error")
	}

	trio, err := New(Spec{Family: FamilyETSARIMATheta})
	if err != nil {
		t.Fatal(err)
	}
	tf, err := trio.Fit(y[:120], 12)
	if err != nil {
		t.Fatal(err)
	}
	tu, err := tf.(interface {
		Update([]float64) (Fitted, error)
	}).Update(y)
	if err != nil {
		t.Fatal(err)
	}
	members := tf.(*combinationFit).fits
	etsU, err := members[0].(interface { // the Akaike-weighted ETS forms (etsAkaikeFit) or one form
		Update([]float64) (Fitted, error)
	}).Update(y)
	if err != nil {
		t.Fatal(err)
	}
	arU, err := members[1].(*ARIMAFit).Update(y)
	if err != nil {
		t.Fatal(err)
	}
	th, err := New(Spec{Family: FamilyTheta})
	if err != nil {
		t.Fatal(err)
	}
	thF, err := th.Fit(y, 12)
	if err != nil {
		t.Fatal(err)
	}
	got := tu.Forecast(6, nil).Mean
	e, r, h := etsU.Forecast(6, nil).Mean, arU.Forecast(6, nil).Mean, thF.Forecast(6, nil).Mean
	for k := range got {
		want := (e[k] + r[k] + h[k]) / 3
		if math.Abs(got[k]-want) > 1e-9*math.Abs(want) {
			t.Errorf("step %d: updated combination %v, mean of updated members %v", k+1, got[k], want)
		}
	}
	if tu.Name() == "" || tu.(*combinationFit).n != len(y) {
		t.Errorf("updated combination %q covers %d observations, want %d", tu.Name(), tu.(*combinationFit).n, len(y))
	}
}

// TestCombinationReduce: the mean and the median by their definitions (the median of an even
// count is the mean of the middle two), and NaN passes through.
func TestCombinationReduce(t *testing.T) {
	mean, med := combination{}, combination{median: true}
	for _, c := range []struct {
		v         []float64
		mean, med float64
	}{{[]float64{3, 1, 2}, 2, 2}, {[]float64{4, 1, 10, 2}, 4.25, 3}, {[]float64{7}, 7, 7}, {[]float64{1, 9}, 5, 5}} {
		if got := mean.reduce(append([]float64(nil), c.v...)); got != c.mean {
			t.Errorf("mean %v = %v, want %v", c.v, got, c.mean)
		}
		if got := med.reduce(append([]float64(nil), c.v...)); got != c.med {
			t.Errorf("median %v = %v, want %v", c.v, got, c.med)
		}
	}
	if got := med.reduce([]float64{1, math.NaN(), 3}); !math.IsNaN(got) {
		t.Errorf("median with a NaN = %v", got)
	}
}

// TestETSARIMADOTMCESMedian: the four-member combinations of Petropoulos & Svetunkov (2020)
// forecast the step-by-step median (and mean) of ETS, ARIMA, DOTM and CES fitted on their own,
// quantiles level by level; an updated median is the median of the updated members (CES and
// ETS, ARIMA carried forward, DOTM refitted).
func TestETSARIMADOTMCESMedian(t *testing.T) {
	y := depotDemand()
	levels := []float64{0.1, 0.9}
	var fcs, upd []Forecast
	for _, f := range []string{FamilyETS, FamilyARIMA, FamilyDOTM, FamilyCES} {
		m, err := New(Spec{Family: f})
		if err != nil {
			t.Fatal(err)
		}
		mf, err := m.Fit(y[:84], 12)
		if err != nil {
			t.Fatal(err)
		}
		fcs = append(fcs, mf.Forecast(6, levels))
		var uf Fitted
		if u, ok := mf.(interface {
			Update([]float64) (Fitted, error)
		}); ok {
			uf, err = u.Update(y)
		} else {
			uf, err = m.Fit(y, 12)
		}
		if err != nil {
			t.Fatal(err)
		}
		upd = append(upd, uf.Forecast(6, nil))
	}
	med4 := func(a, b, c, d float64) float64 {
		v := []float64{a, b, c, d}
		sort.Float64s(v)
		return (v[1] + v[2]) / 2
	}
	for _, fam := range []string{FamilyETSARIMADOTMCESMedian, FamilyETSARIMADOTMCESMean} {
		m, err := New(Spec{Family: fam})
		if err != nil {
			t.Fatal(err)
		}
		fit, err := m.Fit(y[:84], 12)
		if err != nil {
			t.Fatal(err)
		}
		comb := med4
		if fam == FamilyETSARIMADOTMCESMean {
			comb = func(a, b, c, d float64) float64 { return (a + b + c + d) / 4 }
		}
		got := fit.Forecast(6, levels)
		for k := range 6 {
			if want := comb(fcs[0].Mean[k], fcs[1].Mean[k], fcs[2].Mean[k], fcs[3].Mean[k]); math.Abs(got.Mean[k]-want) > 1e-9*math.Abs(want) {
				t.Errorf("%s step %d: %v, members %v", fam, k+1, got.Mean[k], want)
			}
			for j := range levels {
				q := func(i int) float64 { return fcs[i].Quantiles[j][k] }
				if want := comb(q(0), q(1), q(2), q(3)); math.Abs(got.Quantiles[j][k]-want) > 1e-9*math.Abs(want) {
					t.Errorf("%s step %d level %v: %v, members %v", fam, k+1, levels[j], got.Quantiles[j][k], want)
				}
			}
		}
		u, err := fit.(*combinationFit).Update(y)
		if err != nil {
			t.Fatal(err)
		}
		gu := u.Forecast(6, nil).Mean
		for k := range 6 {
			if want := comb(upd[0].Mean[k], upd[1].Mean[k], upd[2].Mean[k], upd[3].Mean[k]); math.Abs(gu[k]-want) > 1e-9*math.Abs(want) {
				t.Errorf("%s updated step %d: %v, updated members %v", fam, k+1, gu[k], want)
			}
		}
	}
}
