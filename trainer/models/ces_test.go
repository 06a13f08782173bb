package models

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestCESHandWorked works the CES state space equations (Svetunkov, Kourentzes & Ord 2022;
// the form derived in ces.go) by hand on x = 10, 12, 11 with α0 = 1.5, α1 = 0.8, ℓ0 = 10, c0 = 5, so that
// ℓ_t = ℓ_{t−1} − 0.2 c_{t−1} + 0.7 e_t and c_t = ℓ_{t−1} − 0.5 c_{t−1} + 2.3 e_t:
//
//	t=1: x̂ = 10,  e = 0:   ℓ = 10 − 1 = 9,               c = 10 − 2.5 = 7.5
//	t=2: x̂ = 9,   e = 3:   ℓ = 9 − 1.5 + 2.1 = 9.6,       c = 9 − 3.75 + 6.9 = 12.15
//	t=3: x̂ = 9.6, e = 1.4: ℓ = 9.6 − 2.43 + 0.98 = 8.15,  c = 9.6 − 6.075 + 3.22 = 6.745
//	h=1: 8.15;  h=2: 8.15 − 0.2·6.745 = 6.801 (c = 8.15 − 3.3725 = 4.7775);  h=3: 6.801 − 0.9555 = 5.8455
//	ψ1 = w'g = 0.7, ψ2 = w'Fg = 0.7 − 0.2·2.3 = 0.24:  se_3 = σ √(1 + 0.49 + 0.0576)
func TestCESHandWorked(t *testing.T) {
	f := &cesFit{a0: 1.5, a1: 0.8, l0: 10, c0: 5}
	f.filter([]float64{10, 12, 11})
	for i, w := range []float64{10, 9, 9.6} {
		if math.Abs(f.fitted[i]-w) > 1e-12 {
			t.Errorf("x̂_%d = %v, by hand %v", i+1, f.fitted[i], w)
		}
	}
	if math.Abs(f.level-8.15) > 1e-12 || math.Abs(f.pot-6.745) > 1e-12 {
		t.Errorf("states (%v, %v), by hand (8.15, 6.745)", f.level, f.pot)
	}
	f.sigma2 = 4
	fc := f.Forecast(3, []float64{0.8413447460685429}) // Φ(1): the band is mean + se
	for k, w := range []float64{8.15, 6.801, 5.8455} {
		if math.Abs(fc.Mean[k]-w) > 1e-12 {
			t.Errorf("h=%d: %v, by hand %v", k+1, fc.Mean[k], w)
		}
	}
	for k, w := range []float64{2, 2 * math.Sqrt(1.49), 2 * math.Sqrt(1.5476)} {
		if se := fc.Quantiles[0][k] - fc.Mean[k]; math.Abs(se-w) > 1e-9 {
			t.Errorf("h=%d: se %v, by hand %v", k+1, se, w)
		}
	}
}

// TestCESIsTheComplexMethod: the state space filter equals the method written with complex
// numbers (Svetunkov & Kourentzes 2015; Svetunkov, Kourentzes & Ord 2022): with s_t = x̂_{t+1} + i ê_{t+1},
// s_t = (α0 + iα1)(x_t + i e_t) + (1 − α0 + i − iα1) s_{t−1}, e_t = x_t − Re s_{t−1}, and beyond the
// data e = 0 and x = Re s.
func TestCESIsTheComplexMethod(t *testing.T) {
	x := depotDemand()
	for _, p := range [][2]float64{{1.3, 1}, {1.6, 0.9}, {1.05, 0.7}} {
		f := &cesFit{a0: p[0], a1: p[1], l0: 190, c0: 120}
		f.filter(x)
		a := complex(p[0], p[1])
		b := complex(1-p[0], 1-p[1])
		s := complex(190, 120)
		for i, v := range x {
			if got, want := f.fitted[i], real(s); math.Abs(got-want) > 1e-9*math.Abs(want) {
				t.Fatalf("α=%v t=%d: %v, complex form %v", p, i+1, got, want)
			}
			e := v - real(s)
			s = a*complex(v, e) + b*s
		}
		fc := f.Forecast(10, nil).Mean
		for k := range fc {
			if want := real(s); math.Abs(fc[k]-want) > 1e-9*math.Abs(want) {
				t.Errorf("α=%v h=%d: %v, complex form %v", p, k+1, fc[k], want)
			}
			s = a*complex(real(s), 0) + b*s
		}
	}
}

// TestCESStabilityRegion: cesStable agrees with the three circles that bound CES's parameter
// region, (α0 − 2.5)² + α1² > 1.25, (α0 − 0.5)² + (α1 − 1)² > 0.25 and (α0 − 1.5)² + (α1 − 0.5)²
// < 1.5 (Svetunkov, Kourentzes & Ord 2022, from memory; they are also what the Jury conditions
// on D give when expanded by hand), on a grid over [0, 3] × [−1, 2].
func TestCESStabilityRegion(t *testing.T) {
	sq := func(v float64) float64 { return v * v }
	inside := 0
	for i := 0; i <= 300; i++ {
		for j := 0; j <= 300; j++ {
			a0, a1 := 0.01*float64(i)+0.0007, -1+0.01*float64(j)+0.0003 // off the boundary circles
			want := sq(a0-2.5)+sq(a1) > 1.25 && sq(a0-0.5)+sq(a1-1) > 0.25 && sq(a0-1.5)+sq(a1-0.5) < 1.5
			if got := cesStable(a0, a1); got != want {
				t.Errorf("(%v, %v): stable %v, circles %v", a0, a1, got, want)
			}
			if want {
				inside++
			}
		}
	}
	if inside == 0 {
		t.Error("no stable point on the grid")
	}
}

// TestCESBackcast: the initial states are those of the complex-number method run forward and
// backward over the series twice from (start, start/α0), and the SSE is that of the forward
// filter from them.
func TestCESBackcast(t *testing.T) {
	x := depotDemand()[:30]
	const a0, a1, start = 1.4, 0.9, 200.0
	a, b := complex(a0, a1), complex(1-a0, 1-a1)
	s := complex(start, start/a0)
	step := func(v float64) { s = a*complex(v, v-real(s)) + b*s }
	for range 2 {
		for _, v := range x {
			step(v)
		}
		for i := len(x) - 1; i >= 0; i-- {
			step(x[i])
		}
	}
	l0, c0, sse := cesBackcast(x, a0, a1, start)
	if math.Abs(l0-real(s)) > 1e-9*math.Abs(l0) || math.Abs(c0-imag(s)) > 1e-9*math.Abs(c0) {
		t.Errorf("backcast (%v, %v), complex form (%v, %v)", l0, c0, real(s), imag(s))
	}
	f := &cesFit{a0: a0, a1: a1, l0: l0, c0: c0}
	f.filter(x)
	if want := f.sigma2 * float64(len(x)-2); math.Abs(sse-want) > 1e-9*want {
		t.Errorf("SSE %v, filter %v", sse, want)
	}
}

// TestCESFit: no move of the estimated weights inside the stable region lowers the SSE; a
// trending series gets a trending forecast; Update on the fitted history changes nothing and
// on a longer one equals filtering it from the same initial states.
func TestCESFit(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 4))
	y := make([]float64, 40)
	for i := range y {
		y[i] = 80 + 1.5*float64(i) + 3*rng.NormFloat64()
	}
	m, err := New(Spec{Family: FamilyCES})
	if err != nil {
		t.Fatal(err)
	}
	fit, err := m.Fit(y[:36], 1)
	if err != nil {
		t.Fatal(err)
	}
	f := fit.(*cesFit)
	if !cesStable(f.a0, f.a1) {
		t.Fatalf("estimate (%v, %v) outside the stable region", f.a0, f.a1)
	}
	var start float64
	for _, v := range y[:10] {
		start += v / 10
	}
	l0, c0, best := cesBackcast(y[:36], f.a0, f.a1, start)
	if l0 != f.l0 || c0 != f.c0 {
		t.Errorf("initial states (%v, %v), backcast (%v, %v)", f.l0, f.c0, l0, c0)
	}
	for _, d := range []float64{-1e-3, 1e-3} {
		for _, p := range [][2]float64{{f.a0 + d, f.a1}, {f.a0, f.a1 + d}} {
			if !cesStable(p[0], p[1]) {
				continue // the estimate may lie on the region's edge
			}
			if _, _, s := cesBackcast(y[:36], p[0], p[1], start); s < best*(1-1e-6) {
				t.Errorf("SSE %v at %v below the estimate's %v", s, p, best)
			}
		}
	}
	if fc := fit.Forecast(12, nil).Mean; !(fc[11] > fc[0]+5) {
		t.Errorf("forecast %v does not follow the trend", fc)
	}
	same, err := f.Update(y[:36])
	if err != nil {
		t.Fatal(err)
	}
	if a, b := same.Forecast(3, nil).Mean, fit.Forecast(3, nil).Mean; a[2] != b[2] {
		t.Errorf("update on the fitted history: %v, fit %v", a, b)
	}
	longer, err := f.Update(y)
	if err != nil {
		t.Fatal(err)
	}
	g := &cesFit{a0: f.a0, a1: f.a1, l0: f.l0, c0: f.c0}
	g.filter(y)
	if a, b := longer.Forecast(3, nil).Mean, g.Forecast(3, nil).Mean; a[2] != b[2] {
		t.Errorf("update on a longer history: %v, filtered %v", a, b)
	}
	if _, err := f.Update(y[:30]); err == nil {
		t.Error("shorter history: want an error")
	}
	if _, err := m.Fit(y[:5], 1); err == nil {
		t.Error("5 observations: want an error")
	}
}
