package models

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/series"
)

// interactionSeries: weekly demand 20, 30 in a promotion week, 60 when the promotion also has
// an end-of-aisle display, with 2% noise; plans known 8 weeks ahead. The display alone does
// nothing. A sum of per-covariate effects cannot express this (the display's effect depends on
// the promotion), trees can.
func interactionSeries(n int) ([]float64, map[string][]float64) {
	rng := rand.New(rand.NewPCG(31, 32))
	promo, display := make([]float64, n+8), make([]float64, n+8)
	for i := range promo {
		promo[i] = float64(rng.IntN(2))
		display[i] = float64(rng.IntN(2))
	}
	// the forecast weeks cover all four combinations twice
	for k, c := range [][2]float64{{0, 0}, {1, 0}, {0, 1}, {1, 1}, {1, 1}, {0, 1}, {1, 0}, {0, 0}} {
		promo[n+k], display[n+k] = c[0], c[1]
	}
	y := make([]float64, n)
	for i := range y {
		y[i] = truth(promo[i], display[i]) * (1 + 0.02*rng.NormFloat64())
	}
	return y, map[string][]float64{"promo": promo, "display": display}
}

func truth(promo, display float64) float64 {
	switch {
	case promo == 1 && display == 1:
		return 60
	case promo == 1:
		return 30
	}
	return 20
}

// GradientBoosting recovers the interaction (known answer: 20 / 30 / 20 / 60 for the four
// plans) within 10%, early stopping keeps fewer than the 500 allowed rounds, and both
// covariates are recorded. Lasso, additive, misses at least one combination by more than 10%.
func TestGradientBoostingInteraction(t *testing.T) {
	y, cov := interactionSeries(150)
	cfg := &features.Config{Covariates: []string{"promo", "display"}, Lags: []int{1}}
	in := &Inputs{Key: "fenwick/cold-brew/bath", Start: fenwickStart, Freq: series.Weekly, Covariates: cov, Horizon: 8}
	mod, _ := New(Spec{Family: FamilyGradientBoosting, Features: cfg})
	fit, err := FitWith(mod, y, 52, in)
	if err != nil {
		t.Fatal(err)
	}
	for k, v := range fit.Forecast(8, nil).Mean {
		want := truth(cov["promo"][150+k], cov["display"][150+k])
		if math.Abs(v-want) > 0.1*want {
			t.Errorf("step %d (promo %v display %v): %v, want %v", k+1, cov["promo"][150+k], cov["display"][150+k], v, want)
		}
	}
	if r := fit.Params()["rounds"]; !(r >= 1 && r < 500) {
		t.Errorf("step 1 kept %v rounds: early stopping did not stop", r)
	}
	if got := fit.(FeatureReporter).Features(); !slices.Contains(got, "covariate:promo") || !slices.Contains(got, "covariate:display") {
		t.Errorf("recorded features %v", got)
	}
	lasso, _ := New(Spec{Family: FamilyLasso, Features: cfg})
	lf, err := FitWith(lasso, y, 52, in)
	if err != nil {
		t.Fatal(err)
	}
	worst := 0.0
	for k, v := range lf.Forecast(8, nil).Mean {
		want := truth(cov["promo"][150+k], cov["display"][150+k])
		worst = math.Max(worst, math.Abs(v-want)/want)
	}
	if worst <= 0.1 {
		t.Errorf("lasso's worst relative error %v: the case does not need an interaction", worst)
	}
}
