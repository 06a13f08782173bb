package models

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
)

// TestETSHandComputedSES checks ETS(A,N,N) against the simple exponential smoothing recursion
// worked by hand (HKOS 2008 section 2.1: l_t = l_{t-1} + alpha (y_t - l_{t-1}), mu_t = l_{t-1};
// class 1 variance sigma^2 (1 + (h-1) alpha^2), Table 6.1 with c_j = alpha).
// y = 10, 12, 11 with alpha = 0.5, l0 = 10: errors 0, 2, 0; levels 10, 11, 11.
func TestETSHandComputedSES(t *testing.T) {
	fit, err := ETSAt([]float64{10, 12, 11}, 1, ETSForm{"A", "N", "N"}, ETSParams{Alpha: 0.5, Level: 10})
	if err != nil {
		t.Fatal(err)
	}
	// SSE = 4, n = 3, k = 2: sigma2 = 4 / (3 - 2) = 4.
	wantLL := -1.5 * (math.Log(2*math.Pi*4/3) + 1)
	if math.Abs(fit.LogLik()-wantLL) > 1e-12 {
		t.Errorf("loglik %v, want %v", fit.LogLik(), wantLL)
	}
	if fit.Sigma2() != 4 {
		t.Errorf("sigma2 %v, want 4", fit.Sigma2())
	}
	if got := fit.InSample(); got[0] != 10 || got[1] != 10 || got[2] != 11 {
		t.Errorf("fitted %v, want [10 10 11]", got)
	}
	fc := fit.Forecast(2, []float64{0.975})
	z := 1.959963984540054
	want := []float64{11 + z*2, 11 + z*math.Sqrt(4*(1+0.25))}
	for k := range want {
		if fc.Mean[k] != 11 || math.Abs(fc.Quantiles[0][k]-want[k]) > 1e-9 {
			t.Errorf("step %d: mean %v quantile %v, want 11 and %v", k+1, fc.Mean[k], fc.Quantiles[0][k], want[k])
		}
	}
}

// TestSchurStable checks the unit-circle root test on polynomials with known roots
// (common practice: the Schur-Cohn step-down test).
func TestSchurStable(t *testing.T) {
	for _, c := range []struct {
		roots []float64
		want  bool
	}{
		{[]float64{0.5, -0.9}, true},
		{[]float64{0.5, 1.1}, false},
		{[]float64{-0.99, 0.2, 0.3}, true},
		{[]float64{0.2, -1.5, 0.1}, false},
	} {
		// Expand prod (z - r) into increasing-power coefficients.
		p := []float64{1}
		for _, r := range c.roots {
			q := make([]float64, len(p)+1)
			for i, a := range p {
				q[i+1] += a
				q[i] -= r * a
			}
			p = q
		}
		if got := schurStable(p, make([]float64, len(p))); got != c.want {
			t.Errorf("roots %v: stable %v, want %v", c.roots, got, c.want)
		}
	}
}

func TestETSBadInput(t *testing.T) {
	y := monthlyDemand(60)
	y[3] = math.NaN()
	if _, err := SelectETS(y, 12, nil); err == nil || !strings.Contains(err.Error(), "value 3") {
		t.Errorf("NaN: got %v, want an error naming value 3", err)
	}
	neg := []float64{1, -2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12}
	if _, err := FitETS(neg, 1, ETSForm{"M", "N", "N"}); err == nil || !strings.Contains(err.Error(), "strictly positive") {
		t.Errorf("negative data with M error: got %v", err)
	}
	if _, err := FitETS([]float64{1, 2, 3, 4, 5}, 1, ETSForm{"A", "A", "N"}); !errors.Is(err, ErrTooShort) {
		t.Errorf("short series: got %v, want ErrTooShort", err)
	}
	if _, err := New(Spec{Family: FamilyETS, Name: "ets-lite", ETS: &ETSOptions{Trends: []string{"M"}}}); err == nil ||
		!strings.Contains(err.Error(), "ets-lite: ets.trends[0]") {
		t.Errorf("bad trend code: got %v", err)
	}
	if _, err := FitETS(monthlyDemand(60), 12, ETSForm{"A", "X", "N"}); err == nil {
		t.Error("unknown trend code accepted")
	}
}

// TestETSRegistered checks the family is in the registry and honours the spec's restriction.
func TestETSRegistered(t *testing.T) {
	m, err := New(Spec{Family: FamilyETS, ETS: &ETSOptions{Errors: []string{"A"}, Seasons: []string{"N"}}})
	if err != nil {
		t.Fatal(err)
	}
	if m.Family() != FamilyETS || m.MinLength(12) != 7 {
		t.Errorf("family %q min length %d, want ETS and 7", m.Family(), m.MinLength(12))
	}
	fit, err := m.Fit(monthlyDemand(72), 12)
	if err != nil {
		t.Fatal(err)
	}
	if name := fit.Name(); !strings.HasPrefix(name, "ETS(A,") || !strings.HasSuffix(name, ",N)") {
		t.Errorf("restricted search chose %s", name)
	}
	if _, ok := fit.Params()["gamma"]; ok {
		t.Error("non-seasonal fit reports gamma")
	}
}

// TestETSRecoversSimulatedWeights simulates ETS(A,N,N) with alpha = 0.3 (fixed PCG seed) and
// checks the estimate is near it (common practice: a consistency check of the estimator).
func TestETSRecoversSimulatedWeights(t *testing.T) {
	y := make([]float64, 400)
	l := 100.0
	e := monthlyDemand(400) // reuse the generator's noise: relative deviations from its mean path
	for i := range y {
		noise := (e[i]/((500+2*float64(i))*(1+0.25*math.Sin(2*math.Pi*float64(i)/12)+0.1*math.Cos(4*math.Pi*float64(i)/12))) - 1) * 100
		y[i] = l + noise
		l += 0.3 * noise
	}
	fit, err := FitETS(y, 1, ETSForm{"A", "N", "N"})
	if err != nil {
		t.Fatal(err)
	}
	if a := fit.Parameters().Alpha; math.Abs(a-0.3) > 0.1 {
		t.Errorf("alpha %v, want about 0.3", a)
	}
}

// ExampleETSAt forecasts weekly croissant sales at the invented Harbour Street bakery with
// Holt's linear method, ETS(A,A,N), at given weights. The output was checked by hand: final
// level 157.648 and slope 4.204 (HKOS 2008 Table 2.3 recursions), SSE 9.136 so sigma^2 =
// 9.136/6, c_1 = alpha + beta = 0.6, c_2 = alpha + 2 beta = 0.7, z_0.9 = 1.2816.
func ExampleETSAt() {
	sales := []float64{120, 124, 129, 131, 137, 140, 146, 149, 153, 158}
	fit, err := ETSAt(sales, 1, ETSForm{"A", "A", "N"}, ETSParams{Alpha: 0.5, Beta: 0.1, Phi: 1, Level: 116, Slope: 4})
	if err != nil {
		panic(err)
	}
	fc := fit.Forecast(3, []float64{0.1, 0.9})
	fmt.Println(fit.Name())
	for k := range fc.Mean {
		fmt.Printf("week +%d: %.1f [%.1f, %.1f]\n", k+1, fc.Mean[k], fc.Quantiles[0][k], fc.Quantiles[1][k])
	}
	// Output:
	// ETS(A,A,N)
	// week +1: 161.9 [160.3, 163.4]
	// week +2: 166.1 [164.2, 167.9]
	// week +3: 170.3 [168.1, 172.4]
}

// TestETSScreenedSearch checks the two-stage search of SelectETS against refining every form
// (our own design, see SelectETS): on AirPassengers (R datasets) and a generated monthly
// series both must choose the same form with the same AICc, every allowed form must appear
// once in Candidates, and exactly etsRefined of them must be refined.
func TestETSScreenedSearch(t *testing.T) {
	for name, y := range map[string][]float64{"AirPassengers": airPassengers, "generated": monthlyDemand(120)} {
		got, err := SelectETS(y, 12, nil)
		if err != nil {
			t.Fatal(err)
		}
		all, err := selectETS(y, 12, nil, len(etsForms(nil)))
		if err != nil {
			t.Fatal(err)
		}
		if got.Name() != all.Name() || math.Abs(got.AICc()-all.AICc()) > 1e-9 {
			t.Errorf("%s: screened search chose %s (AICc %.4f), refining every form %s (AICc %.4f)",
				name, got.Name(), got.AICc(), all.Name(), all.AICc())
		}
		seen, refined := map[ETSForm]bool{}, 0
		for _, c := range got.Candidates() {
			if seen[c.Form] {
				t.Errorf("%s: %s listed twice", name, c.Form)
			}
			seen[c.Form] = true
			if !c.Screened {
				refined++
			}
			if c.Screened && c.AICc < got.AICc() {
				t.Errorf("%s: screened %s has AICc %.4f below the chosen %.4f", name, c.Form, c.AICc, got.AICc())
			}
		}
		if len(seen) != len(etsForms(nil)) || refined != etsRefined {
			t.Errorf("%s: %d forms listed (want %d), %d refined (want %d)", name, len(seen), len(etsForms(nil)), refined, etsRefined)
		}
		if got.Evaluations() >= all.Evaluations() {
			t.Errorf("%s: screened search used %d evaluations, full %d", name, got.Evaluations(), all.Evaluations())
		}
	}
}

// Update keeps the estimates: on the fitted history it reproduces the fit, and on a longer one
// it equals ETSAt at the fit's parameters (the recursion of HKOS 2008 Table 2.3 run further).
func TestETSUpdate(t *testing.T) {
	y := airPassengers
	fit, err := FitETS(y[:120], 12, ETSForm{"M", "A", "M"})
	if err != nil {
		t.Fatal(err)
	}
	same, err := fit.Update(y[:120])
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(same.(*ETSFit).LogLik() - fit.LogLik()); d > 1e-9 {
		t.Errorf("update on the fitted history changes the log likelihood by %g", d)
	}
	longer, err := fit.Update(y)
	if err != nil {
		t.Fatal(err)
	}
	at, err := ETSAt(y, 12, fit.Form(), fit.Parameters())
	if err != nil {
		t.Fatal(err)
	}
	if a, b := longer.Forecast(6, nil).Mean, at.Forecast(6, nil).Mean; fmt.Sprint(a) != fmt.Sprint(b) {
		t.Errorf("updated forecast %v, ETSAt %v", a, b)
	}
	if _, err := fit.Update(y[:100]); err == nil {
		t.Error("update on a shorter history: no error")
	}
}
