package boost_test

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"

	"almanac.dev/almanac/trainer/learn/boost"
)

// Fenwick Lane Provisions sells sourdough loaves at its Quayside shop. Weekly demand rises by
// about 35 loaves in promotion weeks and falls by 2 loaves per degree above 15 °C. Two years of
// weeks train the model, the third year stops it early; the model then prices a promotion.
func Example() {
	rng := rand.New(rand.NewPCG(2026, 12))
	weeks := 156
	X := mat.NewDense(weeks, 2, nil) // columns: promotion (0/1), mean temperature °C
	y := make([]float64, weeks)
	for w := range weeks {
		promo := 0.0
		if rng.Float64() < 0.25 {
			promo = 1
		}
		temp := 12 + 8*math.Sin(2*math.Pi*float64(w)/52) + rng.NormFloat64()
		X.Set(w, 0, promo)
		X.Set(w, 1, temp)
		y[w] = 120 + 35*promo - 2*(temp-15) + 4*rng.NormFloat64()
	}
	train, val := X.Slice(0, 104, 0, 2).(*mat.Dense), X.Slice(104, weeks, 0, 2).(*mat.Dense)

	p := boost.DefaultParams()
	p.MaxDepth = 2
	m, err := boost.Fit(train, y[:104], val, y[104:], p)
	if err != nil {
		fmt.Println(err)
		return
	}
	lift := m.Predict([]float64{1, 15}) - m.Predict([]float64{0, 15})
	imp := m.Importance()
	fmt.Printf("promotion lift at 15 °C within 25..45 loaves: %v\n", lift > 25 && lift < 45)
	fmt.Printf("promotion explains more than temperature: %v\n", imp[0] > imp[1])
	fmt.Printf("stopped early: %v\n", m.Rounds() < p.Rounds)
	// Output:
	// promotion lift at 15 °C within 25..45 loaves: true
	// promotion explains more than temperature: true
	// stopped early: true
}
