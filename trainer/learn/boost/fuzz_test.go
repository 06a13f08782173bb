package boost

import (
	"encoding/binary"
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// FuzzFit feeds small matrices of arbitrary values (NaN and ±Inf included) and parameters to
// Fit: it must return a model or an error, never panic, and a model must predict a finite value
// for every training row (common practice for input hardening).
func FuzzFit(f *testing.F) {
	f.Add([]byte{1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16}, uint8(2), uint8(3), uint8(1), uint8(4), false)
	f.Add([]byte{0xff, 0xf8, 0, 0, 0, 0, 0, 1, 0x7f, 0xf0, 0, 0, 0, 0, 0, 0, 1, 1}, uint8(1), uint8(2), uint8(2), uint8(2), true)
	f.Fuzz(func(t *testing.T, raw []byte, cols, depth, minLeaf, bins uint8, pinball bool) {
		c := int(cols%4) + 1
		vals := make([]float64, len(raw)/8)
		for i := range vals {
			vals[i] = math.Float64frombits(binary.BigEndian.Uint64(raw[8*i:]))
		}
		n := len(vals) / (c + 1)
		if n == 0 {
			return
		}
		X := mat.NewDense(n, c, vals[:n*c])
		y := vals[n*c : n*c+n]
		p := DefaultParams()
		p.Rounds, p.EarlyStop = 5, 0
		p.MaxDepth, p.MinLeaf, p.Bins = int(depth%5)+1, int(minLeaf%4)+1, int(bins)%254+2
		if pinball {
			p.Loss, p.Level = Pinball, 0.7
		}
		m, err := Fit(X, y, nil, nil, p)
		if err != nil {
			return
		}
		for i := range n {
			if v := m.Predict(X.RawRowView(i)); math.IsNaN(v) || math.IsInf(v, 0) {
				// Finite targets can still overflow when summed (|y| near MaxFloat64).
				if scale(y) < 1e300 {
					t.Fatalf("row %d: F = %v from finite targets %v", i, v, y)
				}
			}
		}
	})
}
