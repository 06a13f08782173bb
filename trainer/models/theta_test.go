package models

import (
	"errors"
	"math"
	"testing"

	"almanac.dev/almanac/trainer/numeric/classical"
)

// Hyndman & Billah (2003) show the Theta forecast is SES plus a drift of half the OLS slope:
// so the forecast increments are exactly b = β̂/2. On y_t = 10 + 2t the slope is 2, b = 1.
func TestThetaDriftIsHalfTheSlope(t *testing.T) {
	y := make([]float64, 30)
	for i := range y {
		y[i] = 10 + 2*float64(i) + 0.5*math.Sin(float64(i))
	}
	f := fitFamily(t, FamilyTheta, y, 1)
	p := f.Params()
	wantNear(t, "drift", p["drift"], olsSlope(y)/2, 1e-15)
	fc := f.Forecast(5, nil)
	for k := 1; k < 5; k++ {
		wantNear(t, "increment", fc.Mean[k]-fc.Mean[k-1], p["drift"], 1e-12)
	}
}

// The closed-form ℓ0 of sesProfile is the least-squares initial level: moving it either way
// raises the SSE (direct evaluation of Σ (x_t − ℓ_{t−1})²).
func TestSESProfileIsOptimalInL0(t *testing.T) {
	x := []float64{5, 7, 6, 9, 8, 11, 10, 12, 14, 13}
	direct := func(a, l float64) float64 {
		var s float64
		for _, v := range x {
			e := v - l
			s += e * e
			l += a * e
		}
		return s
	}
	for _, a := range []float64{0.05, 0.3, 0.9} {
		l0, sse := sesProfile(x, a, 100) // a poor start must not matter
		wantNear(t, "sse", sse, direct(a, l0), 1e-9)
		for _, d := range []float64{-1e-3, 1e-3} {
			if direct(a, l0+d) <= sse {
				t.Errorf("alpha %v: SSE at l0%+g = %v <= %v", a, d, direct(a, l0+d), sse)
			}
		}
	}
	alpha, l0 := sesLeastSquares(x)
	best := direct(alpha, l0)
	for a := 0.0001; a < 1; a += 0.001 {
		l, _ := sesProfile(x, a, x[0])
		if s := direct(a, l); s < best*(1-1e-12) {
			t.Fatalf("alpha %v l0 %v has SSE %v < optimum %v at alpha %v", a, l, s, best, alpha)
		}
	}
}

func TestThetaConstantAndSeasonal(t *testing.T) {
	f := fitFamily(t, FamilyTheta, []float64{4, 4, 4, 4, 4, 4}, 1)
	fc := f.Forecast(3, []float64{0.1, 0.9})
	for k := range fc.Mean {
		wantNear(t, "constant mean", fc.Mean[k], 4, 1e-12)
		wantNear(t, "constant q10", fc.Quantiles[0][k], 4, 1e-12)
	}
	// A multiplicative seasonal pattern on a flat level: seasonal, forecasts follow the indices.
	pat := []float64{0.8, 1.0, 1.2, 1.0}
	y := make([]float64, 24)
	for i := range y {
		y[i] = 50 * pat[i%4] * (1 + 0.01*math.Sin(float64(7*i)))
	}
	f = fitFamily(t, FamilyTheta, y, 4)
	if f.Params()["seasonal"] != 1 || f.Name() != "Theta(seasonal m=4)" {
		t.Fatalf("want seasonal fit, got %s %v", f.Name(), f.Params())
	}
	// The doc-comment formula: ŷ_{n+h} = (ℓ + b((h−1) + (1−(1−α)^n)/α)) · S_{(n+h−1) mod m}.
	fc = f.Forecast(4, nil)
	idx, _ := classical.SeasonalIndices(y, 4)
	p := f.Params()
	a := p["alpha"]
	for k := range fc.Mean {
		want := (p["level"] + p["drift"]*(float64(k)+(1-math.Pow(1-a, 24))/a)) * idx[(24+k)%4]
		wantNear(t, "seasonal mean", fc.Mean[k], want, 1e-12)
	}
	if math.Abs(fc.Mean[2]/fc.Mean[0]-1.2/0.8) > 0.02 {
		t.Errorf("forecast pattern %v does not follow the 0.8/1.0/1.2/1.0 indices", fc.Mean)
	}
	if _, err := fitFamilyErr(FamilyTheta, []float64{1, 2}, 1); !errors.Is(err, ErrTooShort) {
		t.Errorf("n = 2: %v", err)
	}
}

func fitFamilyErr(family string, y []float64, m int) (Fitted, error) {
	mod, err := New(Spec{Family: family})
	if err != nil {
		return nil, err
	}
	return mod.Fit(y, m)
}

// A monthly series of 12 years (n = 144, m = 12), seasonal: the M-competition-sized case.
func BenchmarkThetaFit(b *testing.B) {
	y := make([]float64, 144)
	for i := range y {
		y[i] = (100 + float64(i)) * (1 + 0.2*math.Sin(2*math.Pi*float64(i)/12)) * (1 + 0.05*math.Cos(float64(13*i)))
	}
	mod, _ := New(Spec{Family: FamilyTheta})
	b.ReportAllocs()
	for b.Loop() {
		if _, err := mod.Fit(y, 12); err != nil {
			b.Fatal(err)
		}
	}
}
