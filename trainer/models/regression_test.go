package models

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/series"
)

var fenwickStart = time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC) // a Monday

// promoSeries is weekly demand of 10 units plus 5 in promotion weeks (no noise), with the
// promotion plan known 8 weeks past the history.
func promoSeries(n int) ([]float64, map[string][]float64) {
	promo := make([]float64, n+8)
	for i := range promo {
		if i%5 == 0 || i%7 == 0 {
			promo[i] = 1
		}
	}
	y := make([]float64, n)
	for i := range y {
		y[i] = 10 + 5*promo[i]
	}
	return y, map[string][]float64{"promo": promo}
}

// A noiseless y = 10 + 5·promo: both learners forecast the planned promotion weeks at 15 and
// the others at 10 (the exact answer; penalties shrink it slightly, tolerance 0.3).
func TestRegressionPromotionKnownAnswer(t *testing.T) {
	y, cov := promoSeries(60)
	cfg := &features.Config{Covariates: []string{"promo"}, Lags: []int{1}}
	for _, fam := range []string{FamilyRidge, FamilyLasso} {
		mod, err := New(Spec{Family: fam, Features: cfg})
		if err != nil {
			t.Fatal(err)
		}
		fit, err := FitWith(mod, y, 52, &Inputs{Key: "fenwick/oats/bristol", Start: fenwickStart, Freq: series.Weekly, Covariates: cov, Horizon: 8})
		if err != nil {
			t.Fatal(fam, err)
		}
		fc := fit.Forecast(8, nil)
		for k, v := range fc.Mean {
			want := 10 + 5*cov["promo"][60+k]
			if math.Abs(v-want) > 0.3 {
				t.Errorf("%s step %d: %v, want %v", fam, k+1, v, want)
			}
		}
		if got := fit.(FeatureReporter).Features(); !slices.Contains(got, "covariate:promo") {
			t.Errorf("%s kept %v, want covariate:promo among them", fam, got)
		}
	}
}

// Direct strategy on an AR(1) y_t = 0.8·y_{t−1} + e_t: the best step-2 predictor from the
// origin is E[y_{t+1} | y_{t−1}] = 0.8²·y_{t−1} (AR(1) forecast function, Box & Jenkins; Hyndman
// & Athanasopoulos, FPP 3rd ed., section 9.8, from memory), so the step-2 model's weight on lag
// 2 is about 0.64 and the step-1 model's weight on lag 1 about 0.8.
func TestRegressionDirectAR1(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	y := make([]float64, 3000)
	for i := 1; i < len(y); i++ {
		y[i] = 0.8*y[i-1] + rng.NormFloat64()
	}
	cfg := &features.Config{Lags: []int{1, 2}}
	mod, _ := New(Spec{Family: FamilyRidge, Features: cfg, Regression: &RegressionOptions{Penalty: 1e-6}})
	fit, err := FitWith(mod, y, 1, &Inputs{Key: "ar1", Start: fenwickStart, Freq: series.Yearly, Horizon: 2})
	if err != nil {
		t.Fatal(err)
	}
	rf := fit.(*regressionFit)
	names := rf.set.Names()
	coef := func(step int, name string) float64 {
		st := rf.steps[step-1]
		for k, j := range st.cols {
			if names[j] == name {
				return st.lin.Coef[k]
			}
		}
		return 0
	}
	if got := coef(1, "lag1"); math.Abs(got-0.8) > 0.04 {
		t.Errorf("step 1 lag1 weight %v, want about 0.8", got)
	}
	if got := coef(2, "lag2"); math.Abs(got-0.64) > 0.04 {
		t.Errorf("step 2 lag2 weight %v, want about 0.64", got)
	}
	if slices.Contains(rf.steps[1].cols, slices.Index(names, "lag1")) {
		t.Error("step 2 used lag1, which is not known at the origin")
	}
}

// A forecast from history y[:t] does not change when the covariate values after the forecast
// periods change, and the forecast needs the covariate's known future values: without them the
// fit fails naming the series and the covariate.
func TestRegressionFitNoLeakage(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	y, cov := promoSeries(70)
	for i := range y {
		y[i] += rng.NormFloat64()
	}
	cfg := &features.Config{Covariates: []string{"promo"}, CovariateLags: []int{1}, Lags: []int{1, 2}, Windows: []int{4}, Stats: features.StatNames, Calendar: features.CalendarNames}
	mod, _ := New(Spec{Family: FamilyLasso, Features: cfg})
	in := Inputs{Key: "fenwick/tea/leeds", Start: fenwickStart, Freq: series.Weekly, Covariates: cov, Horizon: 4}
	a, err := FitWith(mod, y[:60], 52, &in)
	if err != nil {
		t.Fatal(err)
	}
	c2 := slices.Clone(cov["promo"])
	for i := 64; i < len(c2); i++ {
		c2[i] = 1 - c2[i]
	}
	in2 := in
	in2.Covariates = map[string][]float64{"promo": c2}
	b, err := FitWith(mod, y[:60], 52, &in2)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(a.Forecast(4, nil).Mean, b.Forecast(4, nil).Mean) {
		t.Error("forecast changed when covariates after the forecast periods changed")
	}
	short := Inputs{Key: "fenwick/tea/leeds", Start: fenwickStart, Freq: series.Weekly, Covariates: map[string][]float64{"promo": cov["promo"][:70]}, Horizon: 4}
	_, err = FitWith(mod, y, 52, &short)
	if err == nil || !strings.Contains(err.Error(), `fenwick/tea/leeds: covariate "promo" has no known value`) {
		t.Errorf("missing future covariate: %v", err)
	}
}

// MinLength is the longest lag or window plus MinRegressionRows; a shorter series is
// ErrTooShort, as for the other families.
func TestRegressionMinLength(t *testing.T) {
	mod, _ := New(Spec{Family: FamilyRidge, Features: &features.Config{Lags: []int{1, 13}, Windows: []int{4}, Stats: []string{"mean"}}})
	if got := mod.MinLength(52); got != 13+MinRegressionRows {
		t.Errorf("MinLength = %d", got)
	}
	if _, err := mod.Fit(make([]float64, 20), 52); !errors.Is(err, ErrTooShort) {
		t.Errorf("short series: %v", err)
	}
	if def, _ := New(Spec{Family: FamilyLasso}); def.MinLength(12) != 12+MinRegressionRows {
		t.Errorf("default monthly MinLength = %d (lag 12 is the longest default)", def.MinLength(12))
	}
	if _, err := New(Spec{Family: FamilyRidge, Regression: &RegressionOptions{Penalty: -1}}); err == nil {
		t.Error("negative penalty accepted")
	}
}

// A pooled member without declared features takes features.PooledDefaults (longest lag 336
// hours for hourly data), a per-series one features.Defaults (longest reach the 168-hour
// window); a declared set wins for both.
func TestPooledMemberFeatures(t *testing.T) {
	pooled, _ := New(Spec{Family: FamilyRidge, Regression: &RegressionOptions{AcrossShard: true}})
	single, _ := New(Spec{Family: FamilyRidge})
	declared, _ := New(Spec{Family: FamilyRidge, Regression: &RegressionOptions{AcrossShard: true}, Features: &features.Config{Lags: []int{1, 24}}})
	for _, c := range []struct {
		name string
		mod  Model
		want int
	}{{"pooled", pooled, 336}, {"per series", single, 168}, {"declared", declared, 24}} {
		if got := c.mod.MinLength(24); got != c.want+MinRegressionRows {
			t.Errorf("%s: MinLength(24) = %d, want %d", c.name, got, c.want+MinRegressionRows)
		}
	}
	ys, ins := hourlyPool(rand.New(rand.NewPCG(3, 9)), 4, 500, 2, func(k, i int) float64 {
		return 50 + 10*math.Sin(2*math.Pi*float64(i)/24) + 5*math.Sin(2*math.Pi*float64(i)/168)
	}, 1)
	sh, err := FitShared(Spec{Family: FamilyRidge, Regression: &RegressionOptions{AcrossShard: true}}, 24, ys, ins, 2)
	if err != nil {
		t.Fatal(err)
	}
	names := sh.Features()
	for _, want := range []string{"lag47", "lag336"} {
		if !slices.Contains(names, want) {
			t.Errorf("pooled fit without declared features lacks %s: %v", want, names)
		}
	}
}

// Fit without Inputs keeps only target lags and rolling statistics (there is no calendar to
// read): the weekly defaults' calendar and Fourier features are not generated.
func TestRegressionFitWithoutInputs(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	y := make([]float64, 120)
	for i := range y {
		y[i] = 100 + 10*math.Sin(2*math.Pi*float64(i)/52) + rng.NormFloat64()
	}
	mod, _ := New(Spec{Family: FamilyRidge})
	fit, err := mod.Fit(y, 52)
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range fit.(*regressionFit).set.Names() {
		if !strings.HasPrefix(n, "lag") && !strings.HasPrefix(n, "rolling") {
			t.Errorf("feature %s generated without a calendar", n)
		}
	}
	for k, v := range fit.Forecast(4, nil).Mean {
		if math.IsNaN(v) || math.Abs(v-100) > 30 {
			t.Errorf("step %d: %v", k+1, v)
		}
	}
}

// A pooled model's own step errors (Shared.Quantiles): eight hourly series of a daily wave plus
// Gaussian noise of standard deviation 2 (invented). The lags and waves of features.PooledDefaults
// describe the wave, so the best forecast errs by the noise alone, and the 2.5% and 97.5%
// quantiles lie about 1.96 σ = 3.92 below and above the mean at every step (the normal
// quantile; common practice); the estimate from the series' training residuals must be within
// 15% of that, and the quantiles must be ordered.
func TestSharedQuantilesFromStepResiduals(t *testing.T) {
	const sigma, h = 2.0, 6
	ys, ins := hourlyPool(rand.New(rand.NewPCG(5, 17)), 8, 600, h, func(k, i int) float64 {
		return 100 + float64(10*k) + 10*math.Sin(2*math.Pi*float64(i)/24)
	}, sigma)
	sh, err := FitShared(Spec{Family: FamilyRidge, Regression: &RegressionOptions{AcrossShard: true}}, 24, ys, ins, h)
	if err != nil {
		t.Fatal(err)
	}
	levels := []float64{0.025, 0.5, 0.975}
	for i := range ys {
		mean, err := sh.Forecast(i, h)
		if err != nil {
			t.Fatal(err)
		}
		q := sh.Quantiles(i, mean, levels)
		if q == nil {
			t.Fatalf("series %d: no quantiles", i)
		}
		for k := range mean {
			lo, mid, hi := mean[k]-q[0][k], q[1][k]-mean[k], q[2][k]-mean[k]
			if !(q[0][k] < q[1][k] && q[1][k] < q[2][k]) {
				t.Errorf("series %d step %d: quantiles %v %v %v not increasing", i, k+1, q[0][k], q[1][k], q[2][k])
			}
			for _, d := range []float64{lo, hi} {
				if math.Abs(d-1.96*sigma) > 0.15*1.96*sigma {
					t.Errorf("series %d step %d: offset %.3f from the mean, want 1.96σ = %.2f within 15%%", i, k+1, d, 1.96*sigma)
				}
			}
			if math.Abs(mid) > 0.5 {
				t.Errorf("series %d step %d: median %.3f from the mean", i, k+1, mid)
			}
		}
	}
	if q := sh.Quantiles(0, make([]float64, h), nil); q != nil {
		t.Error("quantiles without levels")
	}
}

// A pooled GradientBoosting member has no residual quantiles (its trees may follow the training
// rows closely); selection then takes its bands from the backtest errors.
func TestSharedQuantilesLinearOnly(t *testing.T) {
	ys, ins := hourlyPool(rand.New(rand.NewPCG(6, 1)), 3, 400, 2, func(k, i int) float64 {
		return 50 + 10*math.Sin(2*math.Pi*float64(i)/24)
	}, 1)
	fc := features.Config{Lags: []int{1, 24}}
	sh, err := FitShared(Spec{Family: FamilyGradientBoosting, Features: &fc, Regression: &RegressionOptions{AcrossShard: true, Boosting: &BoostingOptions{Rounds: 20, Shrinkage: 0.3, TreeDepth: 3, MinLeafRows: 5, RowFraction: 1}}}, 24, ys, ins, 2)
	if err != nil {
		t.Fatal(err)
	}
	mean, _ := sh.Forecast(0, 2)
	if q := sh.Quantiles(0, mean, []float64{0.1, 0.9}); q != nil {
		t.Errorf("pooled GradientBoosting has residual quantiles %v", q)
	}
	lin, err := FitShared(Spec{Family: FamilyRidge, Features: &fc, Regression: &RegressionOptions{AcrossShard: true}}, 24, ys, ins, 2)
	if err != nil {
		t.Fatal(err)
	}
	mean, _ = lin.Forecast(0, 2)
	if q := lin.Quantiles(0, mean, []float64{0.1, 0.9}); q == nil {
		t.Error("pooled Ridge has no residual quantiles")
	}
}

// hourlyPool returns count invented hourly series of n values, signal(k, i) plus Gaussian noise
// of standard deviation sd, with their Inputs for horizon h.
func hourlyPool(rng *rand.Rand, count, n, h int, signal func(k, i int) float64, sd float64) ([][]float64, []Inputs) {
	var ys [][]float64
	var ins []Inputs
	for k := range count {
		y := make([]float64, n)
		for i := range y {
			y[i] = signal(k, i) + sd*rng.NormFloat64()
		}
		ys = append(ys, y)
		ins = append(ins, Inputs{Key: string(rune('a' + k)), Start: fenwickStart, Freq: series.Hourly, Horizon: h})
	}
	return ys, ins
}
