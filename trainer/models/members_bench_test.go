package models

import (
	"math"
	"math/rand/v2"
	"testing"
)

// yearlyDemand generates n years of a made-up product's demand: level 1000, growth of 4% a
// year and multiplicative noise, from a fixed PCG seed.
func yearlyDemand(n int) []float64 {
	rng := rand.New(rand.NewPCG(2024, 1))
	y := make([]float64, n)
	for t := range y {
		y[t] = 1000 * math.Pow(1.04, float64(t)) * (1 + 0.06*rng.NormFloat64())
	}
	return y
}

// BenchmarkMemberCost is the cost of one fit and an h-step forecast with quantiles of the
// Theta-type, CES and combination members next to ETS's automatic selection, on a generated
// monthly series of M3's typical monthly length (h = 18) and a 20-year yearly one (h = 6).
// xETS is each member's time per op divided by ETS's on the same series, measured first in the
// same run (run the ETS cases too, or xETS is left out): compare the ratios, not the absolute
// figures.
func BenchmarkMemberCost(b *testing.B) {
	levels := []float64{0.1, 0.9}
	for _, c := range []struct {
		name string
		y    []float64
		m, h int
	}{{"monthly126", monthlyDemand(126), 12, 18}, {"yearly20", yearlyDemand(20), 1, 6}} {
		run := func(fam string) func(*testing.B) {
			return func(b *testing.B) {
				mod, err := New(Spec{Family: fam})
				if err != nil {
					b.Fatal(err)
				}
				b.ReportAllocs()
				for b.Loop() {
					fit, err := mod.Fit(c.y, c.m)
					if err != nil {
						b.Fatal(err)
					}
					_ = fit.Forecast(c.h, levels)
				}
			}
		}
		var etsNs float64 // set by the ETS case, which runs first
		for _, fam := range []string{FamilyETS, FamilyTheta, FamilyOTM, FamilyDOTM, FamilyCES, FamilyARIMA,
			FamilyETSARIMATheta, FamilyETSARIMADOTMCESMedian} {
			b.Run(c.name+"/"+fam, func(b *testing.B) {
				run(fam)(b)
				ns := float64(b.Elapsed().Nanoseconds()) / float64(b.N)
				if fam == FamilyETS {
					etsNs = ns
				}
				if etsNs > 0 {
					b.ReportMetric(ns/etsNs, "xETS")
				}
			})
		}
	}
}
