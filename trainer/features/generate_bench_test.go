package features

import (
	"math/rand/v2"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/series"
)

// BenchmarkMatrix builds the step-1 design matrix of 730 daily rows with the daily defaults
// plus a covariate and its lags; allocations per op show that rows are not allocated one by one
// (the matrix, the targets, and the period-label cache on the first call).
func BenchmarkMatrix(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	y, cov := randomSeries(rng, 760, 10)
	cfg := Defaults(series.Daily)
	cfg.Covariates, cfg.CovariateLags = []string{"promo"}, []int{1, 7}
	set, err := NewSet(cfg, Source{Key: "bench", Start: time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Daily, Covariates: cov})
	if err != nil {
		b.Fatal(err)
	}
	cols := set.Columns(1)
	o0 := set.FirstOrigin(cols, 1)
	b.ReportAllocs()
	for b.Loop() {
		if _, _, err := set.Matrix(y, cols, 1, o0, len(y)-1); err != nil {
			b.Fatal(err)
		}
	}
}
