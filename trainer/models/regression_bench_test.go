package models

import (
	"math"
	"math/rand/v2"
	"testing"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/series"
)

// benchWeekly is two years of weekly demand with promotions and a yearly swing.
func benchWeekly() ([]float64, map[string][]float64) {
	rng := rand.New(rand.NewPCG(5, 5))
	promo := make([]float64, 112)
	for i := range promo {
		if rng.Float64() < 0.2 {
			promo[i] = 1
		}
	}
	y := make([]float64, 104)
	for i := range y {
		y[i] = 100 * (1 + 0.2*math.Sin(2*math.Pi*float64(i)/52.18)) * (1 + 0.5*promo[i]) * (1 + 0.05*rng.NormFloat64())
	}
	return y, map[string][]float64{"promo": promo}
}

// BenchmarkRegressionFit is one fit of an 8-step direct model on 104 weeks with the weekly
// default features plus a promotion covariate (34 generated columns), next to ETS's automatic
// selection on the same series as the reference measured in the same run: compare the ns/op
// ratios, not the absolute figures.
func BenchmarkRegressionFit(b *testing.B) {
	y, cov := benchWeekly()
	cfg := features.Defaults(series.Weekly)
	cfg.Covariates = []string{"promo"}
	in := &Inputs{Key: "bench", Start: fenwickStart, Freq: series.Weekly, Covariates: cov, Horizon: 8}
	for _, fam := range []string{FamilyRidge, FamilyLasso, FamilyGradientBoosting, FamilyETS} {
		mod, err := New(Spec{Family: fam, Features: &cfg})
		if err != nil {
			b.Fatal(err)
		}
		b.Run(fam, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				fit, err := FitWith(mod, y, 52, in)
				if err != nil {
					b.Fatal(err)
				}
				_ = fit.Forecast(8, nil)
			}
		})
	}
}
