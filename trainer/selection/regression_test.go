package selection

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// fenwickPromos makes weekly demand for Fenwick Lane Provisions items at a few sites: a level
// per series, a mild yearly swing, and promotion weeks (about one in five, planned 8 weeks
// ahead) that lift demand by 60%, with 5% noise. Promotions drive most of the week-to-week
// change, so a model that reads the plan should beat the ones that cannot.
func fenwickPromos(n, h int, seed uint64) []series.Series {
	rng := rand.New(rand.NewPCG(seed, 99))
	items := []string{"oat-porridge-1kg", "earl-grey-80", "marmalade-454g", "rye-loaf"}
	sites := []string{"bristol", "leeds"}
	start := time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC) // a Monday
	var out []series.Series
	for _, it := range items {
		for _, st := range sites {
			level := 40 + 200*rng.Float64()
			promo := make([]float64, n+h)
			for i := range promo {
				if rng.Float64() < 0.2 {
					promo[i] = 1
				}
			}
			y := make([]float64, n)
			for i := range y {
				season := 1 + 0.1*math.Sin(2*math.Pi*float64(i)/52.18)
				y[i] = level * season * (1 + 0.6*promo[i]) * (1 + 0.05*rng.NormFloat64())
			}
			out = append(out, series.Series{Key: "fenwick/" + it + "/" + st, Start: start, Freq: series.Weekly, Values: y, Covariates: map[string][]float64{"promo": promo}})
		}
	}
	return out
}

func promoConfig(zoo ...models.Spec) Config {
	return Config{
		Horizon: 8, Zoo: zoo, Levels: []float64{0.1, 0.5, 0.9},
		Features: &features.Config{
			Calendar: []string{features.Month}, Covariates: []string{"promo"}, Lags: []int{1, 2},
			Windows: []int{4}, Stats: []string{features.StatMean},
			Selection: features.Selection{Filter: features.FilterCorrelation, Embedded: features.EmbeddedLasso, MaxFeatures: 8},
		},
	}
}

// Promotions drive demand: on every series the lasso member (which reads the promotion plan)
// backtests better than seasonal naive and ETS, is chosen, and reports covariate:promo among its
// kept features; the member fitted across the shard also scores better than ETS everywhere.
func TestPromotionsDriveDemand(t *testing.T) {
	in := fenwickPromos(104, 8, 1)
	cfg := promoConfig(
		models.Spec{Family: models.FamilySeasonalNaive},
		models.Spec{Family: models.FamilyETS},
		models.Spec{Family: models.FamilyLasso},
		models.Spec{Family: models.FamilyLasso, Name: "LassoShard", Regression: &models.RegressionOptions{AcrossShard: true}},
	)
	err := ForecastMany(context.Background(), in, cfg, 2, func(i int, r Result, err error) {
		if err != nil {
			t.Fatalf("%s: %v", in[i].Key, err)
		}
		lasso, shard, ets := r.Scores[models.FamilyLasso], r.Scores["LassoShard"], r.Scores[models.FamilyETS]
		if !(lasso < ets && lasso < r.Scores[models.FamilySeasonalNaive]) || !(shard < ets) {
			t.Errorf("%s: MASE lasso %.3f shard %.3f ETS %.3f seasonal naive %.3f; notes %v", r.Key, lasso, shard, ets, r.Scores[models.FamilySeasonalNaive], r.Notes)
		}
		t.Logf("%s: MASE lasso %.3f shard %.3f ETS %.3f seasonal naive %.3f; kept %v", r.Key, lasso, shard, ets, r.Scores[models.FamilySeasonalNaive], r.Features)
		if r.Family != models.FamilyLasso {
			t.Errorf("%s: chose %s", r.Key, r.Chosen)
		}
		if !slices.Contains(r.Features[r.Chosen], "covariate:promo") {
			t.Errorf("%s: %s kept %v", r.Key, r.Chosen, r.Features)
		}
		for k, v := range r.Mean {
			p := in[i].Covariates["promo"][104+k]
			if p == 1 && k > 0 && in[i].Covariates["promo"][104+k-1] == 0 && !(v > r.Mean[k-1]) {
				t.Errorf("%s: step %d is a promotion week after a normal one but the forecast falls (%v -> %v)", r.Key, k+1, r.Mean[k-1], v)
			}
		}
	})
	if err != nil {
		t.Fatal(err)
	}
}

// The member fitted across the shard sees, at a backtest origin, only what every series knew
// before that origin's period: changing another series' values from that period on leaves this
// series' forecast unchanged, while changing them before it does change it (the model is
// really shared).
func TestAcrossShardNoLeakage(t *testing.T) {
	in := fenwickPromos(80, 4, 2)
	sp := models.Spec{Family: models.FamilyRidge, Name: "RidgeShard", Regression: &models.RegressionOptions{AcrossShard: true}}
	cfg := promoConfig(sp).withDefaults()
	cfg.Horizon = 4
	sp.Features = cfg.Features
	const t0 = 60
	forecastAt := func(in []series.Series) []float64 {
		sm := newShardModels(in, cfg)
		base, _ := models.New(sp)
		fit, err := sm.member(sp, in[0].Key, base).Fit(in[0].Values[:t0], 52)
		if err != nil {
			t.Fatal(err)
		}
		return fit.Forecast(4, nil).Mean
	}
	want := forecastAt(in)
	later := slices.Clone(in)
	later[3].Values = slices.Clone(in[3].Values)
	for i := t0; i < len(later[3].Values); i++ {
		later[3].Values[i] *= 5
	}
	if got := forecastAt(later); !slices.Equal(got, want) {
		t.Errorf("forecast changed when another series changed after the origin: %v vs %v", got, want)
	}
	earlier := slices.Clone(in)
	earlier[3].Values = slices.Clone(in[3].Values)
	for i := 0; i < t0; i++ {
		earlier[3].Values[i] *= 1 + float64(i%3)
	}
	if got := forecastAt(earlier); slices.Equal(got, want) {
		t.Error("forecast did not change when another series' history changed: not a shared model")
	}
}

// Results with a member fitted across the shard do not depend on the number of workers, and a
// series without the declared covariate fails only that member (the other members carry on).
func TestAcrossShardWorkersAndBadSeries(t *testing.T) {
	in := fenwickPromos(90, 8, 3)
	in[2].Covariates = nil
	cfg := promoConfig(
		models.Spec{Family: models.FamilySeasonalNaive},
		models.Spec{Family: models.FamilyRidge, Name: "RidgeShard", Regression: &models.RegressionOptions{AcrossShard: true}},
		models.Spec{Family: models.FamilyGradientBoosting, Name: "TreesShard", Regression: &models.RegressionOptions{AcrossShard: true}},
	)
	run := func(workers int) []string {
		var out []string
		err := ForecastMany(context.Background(), in, cfg, workers, func(i int, r Result, err error) {
			out = append(out, fmt.Sprintf("%v|%v", r, err))
			if i != 2 && (math.IsNaN(r.Scores["TreesShard"]) || math.IsNaN(r.Scores["RidgeShard"])) {
				t.Errorf("%s: shard members not scored: %v; notes %v", r.Key, r.Scores, r.Notes)
			}
			if i == 2 && (err != nil || r.Family != models.FamilySeasonalNaive || !math.IsNaN(r.Scores["RidgeShard"])) {
				t.Errorf("series without covariates: %v chose %s scores %v", err, r.Chosen, r.Scores)
			}
		})
		if err != nil {
			t.Fatal(err)
		}
		return out
	}
	if one, four := run(1), run(4); !slices.Equal(one, four) {
		t.Error("results differ between 1 and 4 workers")
	}
	bad := promoConfig(models.Spec{Family: models.FamilyETS, Regression: &models.RegressionOptions{AcrossShard: true}})
	if err := bad.Validate(); err == nil {
		t.Error("acrossShard on ETS accepted")
	}
}

// BenchmarkRegressionMembers is ForecastMany on 8 Fenwick promotion series (104 weeks,
// horizon 8) with the zoo SeasonalNaive + ETS, then with a per-series Lasso added, then with a
// Lasso fitted across the shard added instead: compare each to the first (same run, same data).
func BenchmarkRegressionMembers(b *testing.B) {
	in := fenwickPromos(104, 8, 1)
	base := []models.Spec{{Family: models.FamilySeasonalNaive}, {Family: models.FamilyETS}}
	for _, c := range []struct {
		name  string
		extra []models.Spec
	}{
		{"classic", nil},
		{"withLasso", []models.Spec{{Family: models.FamilyLasso}}},
		{"withLassoShard", []models.Spec{{Family: models.FamilyLasso, Regression: &models.RegressionOptions{AcrossShard: true}}}},
		{"withTrees", []models.Spec{{Family: models.FamilyGradientBoosting}}},
	} {
		cfg := promoConfig(append(slices.Clone(base), c.extra...)...)
		b.Run(c.name, func(b *testing.B) {
			for b.Loop() {
				if err := ForecastMany(context.Background(), in, cfg, 1, func(int, Result, error) {}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
