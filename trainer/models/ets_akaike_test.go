package models

import (
	"math"
	"testing"
)

// Akaike weights (Burnham & Anderson 2002, eq. 2.14; Kolassa 2011): criteria 100 and 102 give
// Δ = 0 and 2, so w = 1/(1 + e^−1) = 0.7310585786 and e^−1/(1 + e^−1) = 0.2689414214 (worked
// by hand); equal criteria give equal weights; a form 20 units worse weighs e^−10/(1+e^−10).
func TestAkaikeWeights(t *testing.T) {
	for _, c := range []struct {
		aicc, want []float64
	}{
		{[]float64{100, 102}, []float64{0.7310585786300049, 0.2689414213699951}},
		{[]float64{102, 100}, []float64{0.2689414213699951, 0.7310585786300049}},
		{[]float64{-5, -5, -5}, []float64{1.0 / 3, 1.0 / 3, 1.0 / 3}},
		{[]float64{0, 20}, []float64{1 / (1 + math.Exp(-10)), math.Exp(-10) / (1 + math.Exp(-10))}},
	} {
		got := akaikeWeights(c.aicc)
		for i := range got {
			if math.Abs(got[i]-c.want[i]) > 1e-15 {
				t.Errorf("akaikeWeights(%v) = %v, want %v", c.aicc, got, c.want)
				break
			}
		}
	}
}

// The ETS zoo member forecasts with the Akaike-weighted mean of the forms SelectETS refined:
// mean, every quantile level and the fitted values are the weighted means of the forms' own,
// with the weights of their AICc; Update carries every form forward (ETSFit.Update) and keeps
// the weights. AirPassengers (R datasets) and a generated monthly series.
func TestETSMemberIsAkaikeWeighted(t *testing.T) {
	levels := []float64{0.1, 0.5, 0.9}
	m, err := New(Spec{Family: FamilyETS})
	if err != nil {
		t.Fatal(err)
	}
	for name, y := range map[string][]float64{"AirPassengers": airPassengers, "generated": monthlyDemand(120)} {
		sel, err := SelectETS(y[:120], 12, nil)
		if err != nil {
			t.Fatal(err)
		}
		if len(sel.refined) != etsRefined || sel.refined[0] != sel {
			t.Fatalf("%s: %d refined fits (want %d, the chosen one first)", name, len(sel.refined), etsRefined)
		}
		fit, err := m.Fit(y[:120], 12)
		if err != nil {
			t.Fatal(err)
		}
		a, ok := fit.(*etsAkaikeFit)
		if !ok {
			t.Fatalf("%s: ETS member fit is %T", name, fit)
		}
		f1, f2 := sel.refined[0], sel.refined[1]
		w2 := math.Exp(-(f2.AICc()-f1.AICc())/2) / (1 + math.Exp(-(f2.AICc()-f1.AICc())/2))
		if math.Abs(a.weights[1]-w2) > 1e-12 || math.Abs(a.weights[0]+a.weights[1]-1) > 1e-15 || !(w2 > 0 && w2 <= 0.5) {
			t.Errorf("%s: weights %v, want %v for %s", name, a.weights, []float64{1 - w2, w2}, f2.Name())
		}
		if want := f1.Name() + "+" + f2.Name(); a.Name() != want {
			t.Errorf("%s: name %q, want %q", name, a.Name(), want)
		}
		check := func(what string, got Fitted, g1, g2 Fitted) {
			fc, c1, c2 := got.Forecast(18, levels), g1.Forecast(18, levels), g2.Forecast(18, levels)
			for k := range fc.Mean {
				if want := (1-w2)*c1.Mean[k] + w2*c2.Mean[k]; math.Abs(fc.Mean[k]-want) > 1e-9*math.Abs(want) {
					t.Errorf("%s %s: mean step %d = %v, want %v", name, what, k+1, fc.Mean[k], want)
				}
				for j := range levels {
					if want := (1-w2)*c1.Quantiles[j][k] + w2*c2.Quantiles[j][k]; math.Abs(fc.Quantiles[j][k]-want) > 1e-9*math.Abs(want) {
						t.Errorf("%s %s: level %v step %d = %v, want %v", name, what, levels[j], k+1, fc.Quantiles[j][k], want)
					}
				}
			}
			in, i1, i2 := got.InSample(), g1.InSample(), g2.InSample()
			for k := range in {
				if want := (1-w2)*i1[k] + w2*i2[k]; !(math.Abs(in[k]-want) <= 1e-9*math.Abs(want)) && !(math.IsNaN(in[k]) && math.IsNaN(want)) {
					t.Errorf("%s %s: fitted %d = %v, want %v", name, what, k, in[k], want)
					break
				}
			}
		}
		check("fit", a, f1, f2)
		up, err := a.Update(y)
		if err != nil {
			t.Fatal(err)
		}
		u1, err1 := f1.Update(y)
		u2, err2 := f2.Update(y)
		if err1 != nil || err2 != nil {
			t.Fatal(err1, err2)
		}
		check("update", up, u1, u2)
		if p := a.Params(); p["weight1"] != a.weights[0] || p["weight2"] != a.weights[1] || p["alpha"] != f1.Params()["alpha"] {
			t.Errorf("%s: params %v", name, p)
		}
	}
	// One allowed form: the member returns that form's fit itself.
	one, err := New(Spec{Family: FamilyETS, ETS: &ETSOptions{Errors: []string{"A"}, Trends: []string{"N"}, Seasons: []string{"N"}}})
	if err != nil {
		t.Fatal(err)
	}
	if fit, err := one.Fit(airPassengers, 12); err != nil || fit.Name() != "ETS(A,N,N)" {
		t.Errorf("one form: %v, %v", fit, err)
	} else if _, ok := fit.(*ETSFit); !ok {
		t.Errorf("one form: fit is %T, want *ETSFit", fit)
	}
}
