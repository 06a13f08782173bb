package models

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/numeric/classical"
)

// olsLine returns the least-squares intercept (at t = 0) and slope of x on t = 1..len(x), by the
// textbook formulas (B = Σ(t − t̄)(x − x̄) / Σ(t − t̄)², A = x̄ − B t̄); one point gives the flat
// line through it, the start the DOTM recursions use.
func olsLine(x []float64) (a, b float64) {
	n := float64(len(x))
	tbar := (n + 1) / 2
	var xbar float64
	for _, v := range x {
		xbar += v
	}
	xbar /= n
	if len(x) == 1 {
		return xbar, 0
	}
	var sxy, sxx float64
	for i, v := range x {
		d := float64(i+1) - tbar
		sxy += d * (v - xbar)
		sxx += d * d
	}
	b = sxy / sxx
	return xbar - b*tbar, b
}

// thetaLinesMean is the Theta method spelled out with theta lines (Assimakopoulos & Nikolopoulos
// 2000; the generalised form of Fiorucci et al. 2016): with the line A + B·s fitted to
// x_1..x_k, the theta line Z_s = θ x_s + (1 − θ)(A + B s) is smoothed by SES from L_0 = θ ℓ_0
// over s = 1..k, and the forecast for period t > k is (1 − 1/θ)(A + B t) + L_k / θ.
func thetaLinesMean(x []float64, a, b float64, t int, alpha, theta, l0 float64) float64 {
	level := theta * l0
	for s, v := range x {
		z := theta*v + (1-theta)*(a+b*float64(s+1))
		level = alpha*z + (1-alpha)*level
	}
	return (1-1/theta)*(a+b*float64(t)) + level/theta
}

// TestDOTMHandWorked works the DOTM equations of Fiorucci et al. (2016) by hand on
// x = 10, 12, 11, 14 with α = 0.5, θ = 2 (w = 0.5), ℓ_0 = 5:
//
//	t=1: ℓ1 = 7.5; x̄1 = A1 = 10, B1 = 0
//	t=2: μ2 = ℓ1 + w(0.5·A1 + 1.5·B1) = 7.5 + 2.5 = 10;  ℓ2 = 9.75; x̄2 = 11, B2 = 2, A2 = 8
//	t=3: μ3 = 9.75 + 0.5(0.25·8 + 1.75·2) = 12.5;  ℓ3 = 10.375; x̄3 = 11, B3 = 0.5, A3 = 10
//	t=4: μ4 = 10.375 + 0.5(0.125·10 + 1.875·0.5) = 11.46875;  ℓ4 = 12.1875; B4 = 1.1, A4 = 9
//	h=1: 12.1875 + 0.5(0.0625·9 + 1.9375·1.1) = 13.534375 = 4331/320
//	h=2: with x5 := 13.534375: ℓ5 = 12.8609375, x̄5 = 12.106875, B5 = 0.906875,
//	     A5 = 9.38625; 12.8609375 + 0.5(0.03125·9.38625 + 1.96875·0.906875) = 1423391/102400
//
// (A_t, B_t are the least-squares lines on the first t points: (8, 2) through (1,10), (2,12).)
// SSE = 2² + 1.5² + 2.53125² = 12961/1024.
func TestDOTMHandWorked(t *testing.T) {
	x := []float64{10, 12, 11, 14}
	fitted := nanSlice(4)
	st, sse := otmFilter(x, 0.5, 0.5, 5, true, fitted)
	want := []float64{math.NaN(), 10, 12.5, 11.46875}
	for i, w := range want {
		if math.IsNaN(w) != math.IsNaN(fitted[i]) || (!math.IsNaN(w) && math.Abs(fitted[i]-w) > 1e-12) {
			t.Errorf("μ_%d = %v, by hand %v", i+1, fitted[i], w)
		}
	}
	if math.Abs(sse-12961.0/1024) > 1e-12 {
		t.Errorf("SSE %v, by hand %v", sse, 12961.0/1024)
	}
	if math.Abs(st.a-9) > 1e-12 || math.Abs(st.b-1.1) > 1e-12 || math.Abs(st.level-12.1875) > 1e-12 {
		t.Errorf("states A=%v B=%v ℓ=%v, by hand 9, 1.1, 12.1875", st.a, st.b, st.level)
	}
	f := &optThetaFit{dynamic: true, n: 4, alpha: 0.5, w: 0.5, l0: 5, sigma2: sse / 3, state: st}
	fc := f.Forecast(2, nil).Mean
	for k, w := range []float64{4331.0 / 320, 1423391.0 / 102400} {
		if math.Abs(fc[k]-w) > 1e-12 {
			t.Errorf("h=%d: %v, by hand %v", k+1, fc[k], w)
		}
	}
}

// TestOptThetaIsTheThetaLines checks the state space forms against the theta-line definition
// (thetaLinesMean): OTM's one-step means and forecasts equal the theta lines built on the line
// fitted to all n points (Fiorucci et al. 2016, their first theorem, any θ), and DOTM's equal the theta
// method re-run at every origin on the observations so far, the forecasts with the earlier
// forecasts taken as data.
func TestOptThetaIsTheThetaLines(t *testing.T) {
	x := depotDemand()[:40]
	n := len(x)
	for _, c := range []struct {
		dynamic          bool
		alpha, theta, l0 float64
	}{{false, 0.3, 2, 100}, {false, 0.7, 3.5, 150}, {true, 0.3, 2, 100}, {true, 0.6, 1.7, 210}} {
		w := 1 - 1/c.theta
		fitted := nanSlice(n)
		st, _ := otmFilter(x, c.alpha, w, c.l0, c.dynamic, fitted)
		f := &optThetaFit{dynamic: c.dynamic, n: n, alpha: c.alpha, w: w, l0: c.l0, state: st}
		fc := f.Forecast(8, nil).Mean
		ext := append(append([]float64(nil), x...), fc...)
		a, b := olsLine(x)
		for tt := 1; tt <= n+8; tt++ {
			var got float64
			if tt <= n {
				got = fitted[tt-1]
			} else {
				got = fc[tt-n-1]
			}
			data := ext[:tt-1]
			if c.dynamic {
				if tt == 1 {
					continue
				}
				a, b = olsLine(data)
			} else if tt > n {
				data = x // OTM: the forecasts smooth no further data
			}
			want := thetaLinesMean(data, a, b, tt, c.alpha, c.theta, c.l0)
			if math.Abs(got-want) > 1e-9*math.Abs(want) {
				t.Errorf("dynamic=%v α=%v θ=%v: t=%d: %v, theta lines %v", c.dynamic, c.alpha, c.theta, tt, got, want)
			}
		}
	}
}

// TestOptThetaBands: for OTM the ψ weights are α, the SES band σ√(1 + (h−1)α²) (Hyndman et al.
// 2008, Table 6.1, class 1); for DOTM the band's variance matches a simulation of the model
// (20000 seeded paths, 5%).
func TestOptThetaBands(t *testing.T) {
	x := depotDemand()[:40]
	for _, dynamic := range []bool{false, true} {
		fitted := nanSlice(len(x))
		st, _ := otmFilter(x, 0.4, 0.6, 200, dynamic, fitted)
		f := &optThetaFit{dynamic: dynamic, n: len(x), alpha: 0.4, w: 0.6, sigma2: 4, state: st}
		const h = 6
		fc := f.Forecast(h, []float64{0.8413447460685429}) // Φ(1): the band is mean + se
		rng := rand.New(rand.NewPCG(7, 11))
		const paths = 20000
		var sq [h]float64
		for range paths {
			s := st
			for k := range h {
				v := s.mean(0.4, 0.6) + 2*rng.NormFloat64()
				d := v - fc.Mean[k]
				sq[k] += d * d
				s.absorb(v, 0.4, dynamic)
			}
		}
		for k := range h {
			se := fc.Quantiles[0][k] - fc.Mean[k]
			if !dynamic {
				if want := 2 * math.Sqrt(1+float64(k)*0.16); math.Abs(se-want) > 1e-9 {
					t.Errorf("OTM h=%d: se %v, SES band %v", k+1, se, want)
				}
			}
			if sim := math.Sqrt(sq[k] / paths); math.Abs(se-sim) > 0.05*sim {
				t.Errorf("dynamic=%v h=%d: se %v, simulated %v", dynamic, k+1, se, sim)
			}
		}
	}
}

// TestOptThetaFitMinimises: the estimates are a minimum of the SSE within the bounds (moving α,
// θ or ℓ_0 does not lower it), and a trending series gives a trending forecast.
func TestOptThetaFitMinimises(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	y := make([]float64, 36)
	for i := range y {
		y[i] = 50 + 2*float64(i) + 4*rng.NormFloat64()
	}
	for _, fam := range []string{FamilyOTM, FamilyDOTM} {
		m, err := New(Spec{Family: fam})
		if err != nil {
			t.Fatal(err)
		}
		fit, err := m.Fit(y, 1)
		if err != nil {
			t.Fatal(err)
		}
		f := fit.(*optThetaFit)
		sse := func(alpha, w, l0 float64) float64 {
			_, s := otmFilter(y, alpha, w, l0, f.dynamic, nanSlice(len(y)))
			return s
		}
		best := sse(f.alpha, f.w, f.l0)
		for _, d := range []float64{-1e-3, 1e-3} {
			for _, p := range [][3]float64{{f.alpha + d, f.w, f.l0}, {f.alpha, f.w + d, f.l0}, {f.alpha, f.w, f.l0 + d*100}} {
				if p[0] < otmAlphaMin || p[0] > otmAlphaMax || p[1] < 0 || p[1] > otmWMax {
					continue
				}
				if s := sse(p[0], p[1], p[2]); s < best*(1-1e-9) {
					t.Errorf("%s: SSE %v at %v below the estimate's %v", fam, s, p, best)
				}
			}
		}
		fc := fit.Forecast(12, nil).Mean
		if !(fc[11] > fc[0]+10) {
			t.Errorf("%s: forecast %v does not follow the trend", fam, fc)
		}
		if fit.Name() != fam {
			t.Errorf("name %q", fit.Name())
		}
	}
}

// TestDOTMSeasonal: a seasonal series is adjusted as the Theta family adjusts it, and the
// forecast is the adjusted forecast times the seasonal index.
func TestDOTMSeasonal(t *testing.T) {
	m, err := New(Spec{Family: FamilyDOTM})
	if err != nil {
		t.Fatal(err)
	}
	fit, err := m.Fit(airPassengers, 12)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(fit.Name(), "seasonal m=12") {
		t.Fatalf("name %q: not adjusted", fit.Name())
	}
	idx, _ := classical.SeasonalIndices(airPassengers, 12)
	x := make([]float64, len(airPassengers))
	classical.Deseasonalize(x, airPassengers, idx)
	adj, err := m.Fit(x, 1)
	if err != nil {
		t.Fatal(err)
	}
	got, plain := fit.Forecast(12, nil).Mean, adj.Forecast(12, nil).Mean
	for k := range got {
		if want := plain[k] * idx[(len(x)+k)%12]; math.Abs(got[k]-want) > 1e-9*want {
			t.Errorf("h=%d: %v, adjusted forecast × index %v", k+1, got[k], want)
		}
	}
	if _, err := m.Fit([]float64{1, 2, 3}, 1); err == nil {
		t.Error("3 observations: want an error")
	}
}
