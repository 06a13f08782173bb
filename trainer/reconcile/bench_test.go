package reconcile

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"
)

// BenchmarkReconcile reconciles 10 000 bottom series (100 items × 100 depots of Fenwick Lane
// Provisions) with their item totals, depot totals and grand total (201 aggregates), 14
// periods, and reports the time per bottom series and its ratio to bottom-up summing of the
// same tree, run alternately with it in the same loop ("x-bottomup"; ns/op covers both). "cg" forces the matrix-free path (MaxDenseNodes 100 < 201
// aggregates); MinTShrink at this size (above DefaultMaxDenseNodes) runs with W as a diagonal
// plus low rank by conjugate gradient, and is also measured dense on a 20 × 20 tree (441 nodes),
// against bottom-up on that tree.
//
//	go test -run '^$' -bench Reconcile -benchtime 5x ./trainer/reconcile
func BenchmarkReconcile(b *testing.B) {
	rng := rand.New(rand.NewPCG(21, 6))
	large := itemDepot(100, 100)
	largeBase := incoherentBase(large, 14, rng)
	largeResid := correlatedResiduals(large, 24, rng)
	small := itemDepot(20, 20)
	smallBase := incoherentBase(small, 14, rng)
	smallResid := correlatedResiduals(small, 24, rng)
	for _, c := range []struct {
		name  string
		h     Hierarchy
		base  [][]float64
		resid [][]float64
		m     Method
		opt   Options
	}{
		{"10k/BottomUp", large, largeBase, nil, BottomUp, Options{}},
		{"10k/OLS", large, largeBase, nil, OLS, Options{}},
		{"10k/OLS-cg", large, largeBase, nil, OLS, Options{MaxDenseNodes: 100}},
		{"10k/StructuralScaling", large, largeBase, nil, Structural, Options{}},
		{"10k/StructuralScaling-cg", large, largeBase, nil, Structural, Options{MaxDenseNodes: 100}},
		{"10k/VarianceScaling", large, largeBase, largeResid, VarianceScaling, Options{}},
		{"10k/StructuralScaling-nonneg", large, shifted(large, largeBase, -9), nil, Structural, Options{NonNegative: true}},
		{"10k/MinTShrink-lowrank", large, largeBase, largeResid, MinTShrink, Options{}},
		{"10k/MinTShrink-lowrank-nonneg", large, shifted(large, largeBase, -9), largeResid, MinTShrink, Options{NonNegative: true}},
		{"400/MinTShrink", small, smallBase, smallResid, MinTShrink, Options{}},
	} {
		b.Run(c.name, func(b *testing.B) {
			// Bottom-up and the method alternate in every iteration, so that load from other
			// processes falls on both alike; only the method's time is in ns/bottom.
			var method, ref time.Duration
			var note string
			for b.Loop() {
				start := time.Now()
				if _, err := Reconcile(c.h, c.base, BottomUp, nil, Options{}); err != nil {
					b.Fatal(err)
				}
				mid := time.Now()
				res, err := Reconcile(c.h, c.base, c.m, c.resid, c.opt)
				if err != nil {
					b.Fatal(err)
				}
				method += time.Since(mid)
				ref += mid.Sub(start)
				note = res.Note
			}
			b.ReportMetric(float64(method.Nanoseconds())/float64(b.N*c.h.Bottom), "ns/bottom")
			b.ReportMetric(float64(method)/float64(ref), "x-bottomup")
			if testing.Verbose() {
				fmt.Printf("%s: %s\n", c.name, note)
			}
		})
	}
}

// shifted returns base with every bottom series moved by d (some then negative).
func shifted(h Hierarchy, base [][]float64, d float64) [][]float64 {
	out := make([][]float64, len(base))
	for i, row := range base {
		out[i] = append([]float64(nil), row...)
		if i >= len(h.Sums) {
			for p := range out[i] {
				out[i][p] += d
			}
		}
	}
	return out
}
