package models

import (
	"math"
	"math/rand/v2"
	"slices"
	"strings"
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

// promotionFlagSeries: weekly demand 20, 30 in a promotion week, with 2% noise; the promotion plan is
// known 4 weeks ahead (the forecast weeks: on, off, on, off).
func promotionFlagSeries(n int) ([]float64, map[string][]float64) {
	rng := rand.New(rand.NewPCG(41, 42))
	promo := make([]float64, n+4)
	for i := range promo[:n] {
		promo[i] = float64(rng.IntN(2))
	}
	copy(promo[n:], []float64{1, 0, 1, 0})
	y := make([]float64, n)
	for i := range y {
		y[i] = (20 + 10*promo[i]) * (1 + 0.02*rng.NormFloat64())
	}
	return y, map[string][]float64{"promo": promo}
}

// fitTrees fits a GradientBoosting member on the promotion covariate alone with the given
// settings (nil: none) and returns its fit.
func fitTrees(t *testing.T, y []float64, cov map[string][]float64, b *BoostingOptions) *regressionFit {
	t.Helper()
	sp := Spec{Family: FamilyGradientBoosting, Features: &features.Config{Covariates: []string{"promo"}}}
	if b != nil {
		sp.Regression = &RegressionOptions{Boosting: b}
	}
	mod, err := New(sp)
	if err != nil {
		t.Fatal(err)
	}
	fit, err := FitWith(mod, y, 52, &Inputs{Key: "fenwick/oat-milk/harbour", Start: fenwickStart, Freq: series.Weekly, Covariates: cov, Horizon: 4})
	if err != nil {
		t.Fatal(err)
	}
	return fit.(*regressionFit)
}

// The member's boosting settings reach boost.Fit: without them the forecasts are exactly those
// of DefaultBoosting (the values the API documents, TestDefaultsAreTheCRDs); one round of
// shrinkage 1 is the one-split regression tree in closed form; fewer rounds, row sampling and a
// leaf size no split can meet each change the fit.
func TestGradientBoostingSettings(t *testing.T) {
	const n = 120
	y, cov := promotionFlagSeries(n)
	mean := func(f *regressionFit) []float64 { return f.Forecast(4, nil).Mean }
	unset := mean(fitTrees(t, y, cov, nil))
	def := DefaultBoosting()
	if got := mean(fitTrees(t, y, cov, &def)); !slices.Equal(got, unset) {
		t.Errorf("DefaultBoosting forecasts %v, without settings %v", got, unset)
	}
	for k, v := range unset { // the defaults learn the promotion (known answer 30 on, 20 off)
		if want := 20 + 10*cov["promo"][n+k]; math.Abs(v-want) > 0.05*want {
			t.Errorf("default step %d: %v, want about %v", k+1, v, want)
		}
	}

	// One round, shrinkage 1, one split: F = F0 + w with F0 the mean target and, in each leaf,
	// w = Σ(y − F0)/(n_leaf + λ), λ = 1 (second-order leaf value of the squared loss, Chen &
	// Guestrin 2016, eq. 5). Step h's rows are the targets y[t], t = h−1..n−1, each with the
	// promotion flag of its own period.
	one := def
	one.Rounds, one.Shrinkage, one.TreeDepth = 1, 1, 1
	f1 := fitTrees(t, y, cov, &one)
	for k, got := range mean(f1) {
		h := k + 1
		f0, rows := 0.0, 0.0
		for i := h - 1; i < n; i++ {
			f0, rows = f0+y[i], rows+1
		}
		f0 /= rows
		g, c := 0.0, 0.0
		for i := h - 1; i < n; i++ {
			if cov["promo"][i] == cov["promo"][n+k] {
				g, c = g+y[i]-f0, c+1
			}
		}
		if want := f0 + g/(c+1); math.Abs(got-want) > 1e-9*want {
			t.Errorf("one tree, step %d: %v, want %v", h, got, want)
		}
		if r := f1.steps[k].tree.Rounds(); r != 1 {
			t.Errorf("one tree, step %d: %d rounds", h, r)
		}
	}

	few := def
	few.Rounds = 1
	f := fitTrees(t, y, cov, &few)
	if got := mean(f); slices.Equal(got, unset) || f.Params()["rounds"] != 1 {
		t.Errorf("rounds 1: forecasts %v (default %v), %v rounds kept", got, unset, f.Params()["rounds"])
	}
	half := def
	half.RowFraction = 0.5
	if got := mean(fitTrees(t, y, cov, &half)); slices.Equal(got, unset) || !slices.Equal(got, mean(fitTrees(t, y, cov, &half))) {
		t.Errorf("half the rows per tree: forecasts %v, default %v; want different and repeatable", got, unset)
	}
	// A leaf of 1000 rows cannot be met by 120: every tree is one leaf, and for the squared loss
	// that leaf adds nothing to F0, the step's mean target.
	big := def
	big.MinLeafRows = 1000
	for k, got := range mean(fitTrees(t, y, cov, &big)) {
		sum := 0.0
		for i := k; i < n; i++ {
			sum += y[i]
		}
		if want := sum / float64(n-k); math.Abs(got-want) > 1e-9*want {
			t.Errorf("no split possible, step %d: %v, want the mean target %v", k+1, got, want)
		}
	}
}

// Depth reaches the trees: with the promotion and display interaction, one round of depth 1
// has at most two leaves, so it gives at most two values over the four plans; depth 2 gives
// all three levels (20, 30, 60).
func TestGradientBoostingTreeDepth(t *testing.T) {
	y, cov := interactionSeries(150)
	cfg := &features.Config{Covariates: []string{"promo", "display"}}
	distinct := func(depth int) int {
		b := DefaultBoosting()
		b.Rounds, b.Shrinkage, b.TreeDepth = 1, 1, depth
		mod, err := New(Spec{Family: FamilyGradientBoosting, Features: cfg, Regression: &RegressionOptions{Boosting: &b}})
		if err != nil {
			t.Fatal(err)
		}
		fit, err := FitWith(mod, y, 52, &Inputs{Key: "fenwick/cold-brew/bath", Start: fenwickStart, Freq: series.Weekly, Covariates: cov, Horizon: 1})
		if err != nil {
			t.Fatal(err)
		}
		f := fit.(*regressionFit)
		st, names := f.steps[0], f.set.Names()
		seen := map[float64]bool{}
		for _, plan := range [][2]float64{{0, 0}, {1, 0}, {0, 1}, {1, 1}} {
			row := make([]float64, len(st.cols))
			for j, c := range st.cols {
				switch names[c] {
				case "covariate:promo":
					row[j] = plan[0]
				case "covariate:display":
					row[j] = plan[1]
				}
			}
			seen[st.predict(row)] = true
		}
		return len(seen)
	}
	if d1, d2 := distinct(1), distinct(2); d1 > 2 || d2 != 3 {
		t.Errorf("distinct forecasts over the four plans: depth 1 %d (want at most 2), depth 2 %d (want 3)", d1, d2)
	}
}

// Boosting settings are refused on the other families and out of the learner's range (the API's
// narrower ranges are checked by runconfig), naming the member and the learner's field.
func TestGradientBoostingSettingsRefused(t *testing.T) {
	def := DefaultBoosting()
	bad := func(edit func(*BoostingOptions)) *BoostingOptions { b := def; edit(&b); return &b }
	for name, tc := range map[string]struct {
		family string
		b      *BoostingOptions
		want   string
	}{
		"on Ridge":         {FamilyRidge, &def, "regression.boosting is only for family GradientBoosting"},
		"zero rounds":      {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.Rounds = 0 }), "Params.Rounds"},
		"shrinkage 0":      {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.Shrinkage = 0 }), "Params.LearningRate"},
		"shrinkage 1.5":    {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.Shrinkage = 1.5 }), "Params.LearningRate"},
		"depth 31":         {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.TreeDepth = 31 }), "Params.MaxDepth"},
		"no leaf rows":     {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.MinLeafRows = 0 }), "Params.MinLeaf"},
		"row fraction 0":   {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.RowFraction = 0 }), "Params.RowFraction"},
		"row fraction NaN": {FamilyGradientBoosting, bad(func(b *BoostingOptions) { b.RowFraction = math.NaN() }), "Params.RowFraction"},
	} {
		_, err := New(Spec{Family: tc.family, Name: "trees", Regression: &RegressionOptions{Boosting: tc.b}})
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), "trees") {
			t.Errorf("%s: New = %v, want an error naming the member and %q", name, err, tc.want)
		}
	}
}
