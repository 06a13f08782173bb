package reconcile

import (
	"math"
	"testing"
)

// FuzzReconcile builds a small hierarchy, base forecasts and residuals from the input bytes and
// checks what holds for every method and input: no panic; a valid input reconciles; the result
// is coherent to 1e-9 (issue 21) and non-negative when asked; bottom-up keeps the bottom
// series; OLS equals the dense S G ŷ (Wickramasuriya et al. 2019).
func FuzzReconcile(f *testing.F) {
	f.Add([]byte{3, 2, 0b111, 0b011, 2, 0, 1, 10, 250, 7, 3, 9, 40, 1, 2, 3, 4, 5, 6, 7, 8, 9})
	f.Add([]byte{5, 3, 0b11111, 0b00111, 0b11000, 3, 4, 1, 128, 255, 0, 17, 99, 200, 3, 0, 0, 0})
	f.Add([]byte{1, 1, 1, 1, 2, 1})
	f.Fuzz(func(t *testing.T, data []byte) {
		next := func() int {
			if len(data) == 0 {
				return 0
			}
			b := data[0]
			data = data[1:]
			return int(b)
		}
		m := 1 + next()%6
		h := Hierarchy{Bottom: m}
		for a := next() % 5; a > 0; a-- {
			mask := next() % (1 << m)
			if mask == 0 {
				mask = 1
			}
			var sum []int
			for j := 0; j < m; j++ {
				if mask&(1<<j) != 0 {
					sum = append(sum, j)
				}
			}
			h.Sums = append(h.Sums, sum)
		}
		methods := []Method{BottomUp, OLS, Structural, VarianceScaling, MinTShrink, MinTSample}
		method := methods[next()%len(methods)]
		flags := next()
		opt := Options{NonNegative: flags&1 != 0}
		if flags&2 != 0 {
			opt.MaxDenseNodes = 1 // conjugate gradient for the diagonal weights
		}
		horizon := 1 + next()%3
		n := h.Nodes()
		base := make([][]float64, n)
		for i := range base {
			base[i] = make([]float64, horizon)
			for p := range base[i] {
				base[i][p] = float64(int8(next())) / 4
			}
		}
		T := 3 + next()%20
		resid := make([][]float64, n)
		for i := range resid {
			resid[i] = make([]float64, T)
			for p := range resid[i] {
				b := next()
				if b%11 == 10 {
					resid[i][p] = math.NaN()
				} else {
					resid[i][p] = float64(int8(b))/16 + float64(i%3)/7
				}
			}
		}
		got, err := Reconcile(h, base, method, resid, opt)
		if err != nil {
			t.Fatalf("%s on %+v: %v", method, h, err)
		}
		if d := MaxDeviation(h, got.Forecasts); d > 1e-9 {
			t.Fatalf("%s (%s): MaxDeviation %g", method, got.Method, d)
		}
		k := len(h.Sums)
		for i, row := range got.Forecasts {
			for p, v := range row {
				if math.IsNaN(v) || (opt.NonNegative && v < 0) {
					t.Fatalf("%s: node %d period %d = %g", method, i, p, v)
				}
				if method == BottomUp && i >= k && !opt.NonNegative && v != base[i][p] {
					t.Fatalf("bottom-up changed bottom series %d: %g -> %g", i-k, base[i][p], v)
				}
			}
		}
		if method == OLS && !opt.NonNegative {
			want := referenceSG(h, diagMatrix(olsWeight(h)), base)
			for i := range want {
				for p := range want[i] {
					if math.Abs(got.Forecasts[i][p]-want[i][p]) > 1e-8*math.Max(1, math.Abs(want[i][p])) {
						t.Fatalf("OLS node %d period %d = %.12g, dense S G y %.12g", i, p, got.Forecasts[i][p], want[i][p])
					}
				}
			}
		}
	})
}
