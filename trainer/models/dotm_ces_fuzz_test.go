package models

import (
	"math"
	"testing"
)

// FuzzOptThetaCES: any finite series gives OTM, DOTM and CES a fit with finite forecasts and
// bands, or an error; never a panic. Seeds: constant, zero, alternating, steep and tiny-scale
// series.
func FuzzOptThetaCES(f *testing.F) {
	f.Add(8, 5.0, 0.0, 0.0, uint8(1))
	f.Add(12, 0.0, 0.0, 0.0, uint8(4))
	f.Add(30, 100.0, 0.0, 50.0, uint8(12))
	f.Add(20, 1.0, 1e6, 0.0, uint8(1))
	f.Add(40, 1e-9, 1e-10, 1e-9, uint8(4))
	f.Add(25, 1e200, 1e199, 1e200, uint8(4))
	f.Fuzz(func(t *testing.T, n int, level, slope, swing float64, m uint8) {
		if n < 0 || n > 300 || m == 0 || m > 24 {
			t.Skip()
		}
		y := make([]float64, n)
		for i := range y {
			y[i] = level + slope*float64(i) + swing*float64(i%3-1)*math.Sin(float64(i))
		}
		if checkFinite("", y) != nil {
			t.Skip()
		}
		for _, fam := range []string{FamilyOTM, FamilyDOTM, FamilyCES} {
			mod, err := New(Spec{Family: fam})
			if err != nil {
				t.Fatal(err)
			}
			fit, err := mod.Fit(y, int(m))
			if err != nil {
				continue
			}
			fc := fit.Forecast(6, []float64{0.1, 0.9})
			for k, v := range fc.Mean {
				lo, hi := fc.Quantiles[0][k], fc.Quantiles[1][k]
				if math.IsNaN(v) || math.IsInf(v, 0) || math.IsNaN(lo) || math.IsNaN(hi) {
					t.Fatalf("%s on %v: step %d mean %v band [%v, %v]", fam, y, k+1, v, lo, hi)
				}
			}
		}
	})
}
