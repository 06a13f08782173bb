package models

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestPACFRoundTrip: pacfToCoef maps the partial autocorrelations of an AR(2) to its
// coefficients by Durbin-Levinson (Box, Jenkins & Reinsel 2008, eq. 3.2.37): for pi = (a, b),
// phi_1 = a (1 - b), phi_2 = b; coefToPACF inverts it.
func TestPACFRoundTrip(t *testing.T) {
	a, b := 0.6, -0.3
	u := []float64{math.Atanh(a), math.Atanh(b)}
	c := make([]float64, 2)
	pacfToCoef(c, u, make([]float64, 2))
	if want := []float64{a * (1 - b), b}; math.Abs(c[0]-want[0]) > 1e-15 || math.Abs(c[1]-want[1]) > 1e-15 {
		t.Fatalf("coefficients %v, want %v", c, want)
	}
	back := make([]float64, 2)
	if !coefToPACF(back, c) || math.Abs(back[0]-u[0]) > 1e-12 || math.Abs(back[1]-u[1]) > 1e-12 {
		t.Fatalf("inverse %v, want %v", back, u)
	}
	if coefToPACF(back, []float64{1.2, 0}) {
		t.Fatal("a non-stationary AR(1) was accepted")
	}
}

// TestExpand multiplies (1 - 0.5B)(1 - 0.4B^4) = 1 - 0.5B - 0.4B^4 + 0.2B^5 and
// (1 + 0.3B)(1 + 0.2B^4) = 1 + 0.3B + 0.2B^4 + 0.06B^5 by hand.
func TestExpand(t *testing.T) {
	ar := expand(make([]float64, 5), []float64{0.5}, []float64{0.4}, 4, -1)
	ma := expand(make([]float64, 5), []float64{0.3}, []float64{0.2}, 4, 1)
	for i, want := range []float64{0.5, 0, 0, 0.4, -0.2} {
		if math.Abs(ar[i]-want) > 1e-15 {
			t.Errorf("AR lag %d: %v, want %v", i+1, ar[i], want)
		}
	}
	for i, want := range []float64{0.3, 0, 0, 0.2, 0.06} {
		if math.Abs(ma[i]-want) > 1e-15 {
			t.Errorf("MA lag %d: %v, want %v", i+1, ma[i], want)
		}
	}
}

// TestDifference: for y = t^2 (t = 0..5) the lag-2 difference of 0,1,4,9,16,25 is
// 4,8,12,16 and its first difference 4,4,4 (by hand); and
// polynomial (1-B)(1-B^2) = 1 - B - B^2 + B^3, so delta = (1, 1, -1).
func TestDifference(t *testing.T) {
	w := difference([]float64{0, 1, 4, 9, 16, 25}, 1, 1, 2)
	if len(w) != 3 || w[0] != 4 || w[1] != 4 || w[2] != 4 {
		t.Errorf("difference = %v, want [4 4 4]", w)
	}
	d := diffPoly(1, 1, 2)
	if len(d) != 3 || d[0] != 1 || d[1] != 1 || d[2] != -1 {
		t.Errorf("diffPoly = %v, want [1 1 -1]", d)
	}
}

// TestAR1ExactLikelihood checks the Kalman filter against the closed form of the exact AR(1)
// likelihood (Hamilton 1994, "Time Series Analysis", eq. 5.2.9), concentrated over sigma^2:
//
//	S = (1 - phi^2) x_1^2 + sum_{t>=2} (x_t - phi x_{t-1})^2,
//	log L = -n/2 (log(2 pi S/n) + 1) + 1/2 log(1 - phi^2).
func TestAR1ExactLikelihood(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	y := make([]float64, 60)
	const phi, mu = 0.7, 3.0
	x := 0.0
	for i := range y {
		x = phi*x + rng.NormFloat64()
		y[i] = mu + x
	}
	fit, err := ARIMAAt(y, 1, ARIMAOrder{P: 1, Constant: true}, ARIMACoef{AR: []float64{phi}, Constant: mu})
	if err != nil {
		t.Fatal(err)
	}
	n := float64(len(y))
	S := (1 - phi*phi) * (y[0] - mu) * (y[0] - mu)
	for i := 1; i < len(y); i++ {
		e := (y[i] - mu) - phi*(y[i-1]-mu)
		S += e * e
	}
	want := -n/2*(math.Log(2*math.Pi*S/n)+1) + 0.5*math.Log(1-phi*phi)
	if d := math.Abs(fit.LogLik() - want); d > 1e-10 {
		t.Errorf("loglik %.12g, closed form %.12g", fit.LogLik(), want)
	}
	// The forecast of a stationary AR(1) is mu + phi^h (y_n - mu) with variance
	// sigma^2 (1 - phi^{2h}) / (1 - phi^2) (Hamilton 1994, section 4.2).
	mean, v := fit.forecastMoments(3)
	for h := 1; h <= 3; h++ {
		wm := mu + math.Pow(phi, float64(h))*(y[len(y)-1]-mu)
		wv := (1 - math.Pow(phi, float64(2*h))) / (1 - phi*phi)
		if math.Abs(mean[h-1]-wm) > 1e-12 || math.Abs(v[h-1]-wv) > 1e-12 {
			t.Errorf("h=%d: mean %v var %v, want %v %v", h, mean[h-1], v[h-1], wm, wv)
		}
	}
}

// TestKalmanFilterAllocatesNothing: the likelihood evaluation in the fit's inner loop reuses
// its scratch.
func TestKalmanFilterAllocatesNothing(t *testing.T) {
	y := depotDemand()
	ft := newARIMAFitter(y, 12)
	ft.setOrder(ARIMAOrder{P: 1, Q: 1, SD: 1, SQ: 1, SP: 1})
	u := []float64{0.3, -0.2, 0.1, -0.4}
	ft.decode(u)
	ft.ml(nil)
	if n := testing.AllocsPerRun(50, func() { ft.decode(u); ft.ml(nil) }); n != 0 {
		t.Errorf("likelihood evaluation allocates %v times", n)
	}
}

// depotDemand is our own demo scenario: eight years of monthly spare-part demand at a depot,
// with growth and a winter peak (fixed PCG seed).
func depotDemand() []float64 {
	rng := rand.New(rand.NewPCG(2026, 12))
	y := make([]float64, 96)
	for i := range y {
		y[i] = 200 + 1.5*float64(i) + 30*math.Cos(2*math.Pi*float64(i)/12) + 8*rng.NormFloat64()
	}
	return y
}

// TestSelectARIMADemo: on the depot demand the search differences seasonally, and its
// forecasts continue the winter peak (the December step, 12 ahead of the last December, is
// above the June step).
func TestSelectARIMADemo(t *testing.T) {
	y := depotDemand()
	fit, err := SelectARIMA(y, 12, ARIMABounds{})
	if err != nil {
		t.Fatal(err)
	}
	if fit.Order().SD != 1 {
		t.Errorf("chose %s, want a seasonal difference", fit.Name())
	}
	fc := fit.Forecast(12, []float64{0.1, 0.9})
	// y[95] is month 11 of the cycle (index 95 = 7*12 + 11); step 1 is month 0, the peak.
	if !(fc.Mean[0] > fc.Mean[6]) {
		t.Errorf("peak month forecast %v not above the trough %v", fc.Mean[0], fc.Mean[6])
	}
	for k := range fc.Mean {
		if !(fc.Quantiles[0][k] < fc.Mean[k] && fc.Mean[k] < fc.Quantiles[1][k]) {
			t.Fatalf("step %d: bounds %v, %v around %v", k+1, fc.Quantiles[0][k], fc.Quantiles[1][k], fc.Mean[k])
		}
	}
	if len(fit.Candidates()) < 4 {
		t.Errorf("only %d candidates tried", len(fit.Candidates()))
	}
}

// BenchmarkARIMALikelihood times one exact likelihood evaluation of a seasonal model on 96
// months (report allocations with -benchmem: zero expected).
func BenchmarkARIMALikelihood(b *testing.B) {
	ft := newARIMAFitter(depotDemand(), 12)
	ft.setOrder(ARIMAOrder{P: 2, Q: 1, SD: 1, SP: 1, SQ: 1})
	u := []float64{0.3, -0.2, 0.1, 0.2, -0.4}
	b.ReportAllocs()
	for b.Loop() {
		ft.decode(u)
		ft.ml(nil)
	}
}

// BenchmarkSelectARIMA times the whole order search on 96 months.
func BenchmarkSelectARIMA(b *testing.B) {
	y := depotDemand()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := SelectARIMA(y, 12, ARIMABounds{}); err != nil {
			b.Fatal(err)
		}
	}
}

// TestSelectARIMAEdgeCases: short and constant series still get a model, bad input is an
// error, and misuse panics.
func TestSelectARIMAEdgeCases(t *testing.T) {
	if fit, err := SelectARIMA([]float64{3, 5, 4, 6, 5}, 1, ARIMABounds{}); err != nil {
		t.Errorf("five values: %v", err)
	} else if fc := fit.Forecast(2, nil); math.IsNaN(fc.Mean[0]) {
		t.Errorf("five values: forecast %v", fc.Mean)
	}
	if _, err := SelectARIMA([]float64{1, math.NaN(), 3, 4, 5, 6}, 1, ARIMABounds{}); err == nil {
		t.Error("NaN accepted")
	}
	// A constant series: the likelihood grows without bound as the mean approaches the value,
	// so the search stops with the mean at the constant (to the optimiser's tolerance).
	if fit, err := SelectARIMA([]float64{2, 2, 2, 2, 2, 2, 2, 2}, 1, ARIMABounds{}); err != nil {
		t.Errorf("constant series: %v", err)
	} else if fc := fit.Forecast(3, []float64{0.1, 0.9}); math.Abs(fc.Mean[2]-2) > 1e-3 || fc.Quantiles[1][2]-fc.Quantiles[0][2] > 1e-2 {
		t.Errorf("constant series: %s forecasts %v, bounds %v", fit.Name(), fc.Mean, fc.Quantiles)
	}
	if _, err := FitARIMA(depotDemand(), 12, ARIMAOrder{D: 1, SD: 1, Constant: true}); err == nil {
		t.Error("constant with d + D = 2 accepted")
	}
	defer func() {
		if recover() == nil {
			t.Error("season length 0 did not panic")
		}
	}()
	SelectARIMA(depotDemand(), 0, ARIMABounds{})
}
