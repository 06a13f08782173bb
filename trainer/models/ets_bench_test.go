package models

import (
	"math"
	"math/rand/v2"
	"testing"
)

// airPassengers is Box & Jenkins' monthly airline passengers 1949-1960 (thousands), as in R's
// datasets::AirPassengers.
var airPassengers = []float64{
	112, 118, 132, 129, 121, 135, 148, 148, 136, 119, 104, 118, 115, 126, 141, 135, 125, 149, 170, 170, 158, 133, 114, 140,
	145, 150, 178, 163, 172, 178, 199, 199, 184, 162, 146, 166, 171, 180, 193, 181, 183, 218, 230, 242, 209, 191, 172, 194,
	196, 196, 236, 235, 229, 243, 264, 272, 237, 211, 180, 201, 204, 188, 235, 227, 234, 264, 302, 293, 259, 229, 203, 229,
	242, 233, 267, 269, 270, 315, 364, 347, 312, 274, 237, 278, 284, 277, 317, 313, 318, 374, 413, 405, 355, 306, 271, 306,
	315, 301, 356, 348, 355, 422, 465, 467, 404, 347, 305, 336, 340, 318, 362, 348, 363, 435, 491, 505, 404, 359, 310, 337,
	360, 342, 406, 396, 420, 472, 548, 559, 463, 407, 362, 405, 417, 391, 419, 461, 472, 535, 622, 606, 508, 461, 390, 432,
}

// monthlyDemand generates n months of a made-up product's demand: level 500, slow growth, a
// yearly pattern and multiplicative noise, from a fixed PCG seed.
func monthlyDemand(n int) []float64 {
	rng := rand.New(rand.NewPCG(2024, 12))
	y := make([]float64, n)
	for t := range y {
		season := 1 + 0.25*math.Sin(2*math.Pi*float64(t)/12) + 0.1*math.Cos(4*math.Pi*float64(t)/12)
		y[t] = (500 + 2*float64(t)) * season * (1 + 0.05*rng.NormFloat64())
	}
	return y
}

// BenchmarkETSAuto times the full automatic search (15 forms for positive monthly data) on a
// generated monthly series of M3's typical monthly length and on AirPassengers.
func BenchmarkETSAuto(b *testing.B) {
	for _, c := range []struct {
		name string
		y    []float64
	}{{"generated126", monthlyDemand(126)}, {"AirPassengers", airPassengers}} {
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			evals := 0
			for b.Loop() {
				fit, err := SelectETS(c.y, 12, nil)
				if err != nil {
					b.Fatal(err)
				}
				evals = fit.Evaluations()
			}
			b.ReportMetric(float64(evals), "evals/op")
		})
	}
}

// BenchmarkETSPass times one likelihood evaluation of ETS(M,Ad,M) on AirPassengers; it must
// not allocate.
func BenchmarkETSPass(b *testing.B) {
	st := etsState{alpha: 0.7, beta: 0.02, gamma: 0.01, phi: 0.98, l0: 120, b0: 1.7, seas: make([]float64, 12)}
	for j := range st.seas {
		st.seas[j] = 1
	}
	buf := make([]float64, 12)
	b.ReportAllocs()
	for b.Loop() {
		etsPass(airPassengers, 12, etsMul, etsDamped, etsMul, &st, buf, nil, nil, nil)
	}
}
