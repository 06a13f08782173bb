package reconcile

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// bruteNonNegative solves min (ŷ − S b)' W⁻¹ (ŷ − S b) s.t. b >= 0 (Wickramasuriya, Turlach &
// Hyndman 2020) by enumeration: for every set F of free bottom series, the unconstrained least
// squares on S's columns F (normal equations, dense gonum); the best feasible one is the
// optimum, since the optimum is the unconstrained optimum on its own support. Independent of
// the package's constraint form and active-set rules; only for a handful of bottom series.
func bruteNonNegative(h Hierarchy, w mat.Matrix, y []float64) []float64 {
	n, m, k := h.Nodes(), h.Bottom, len(h.Sums)
	var winv mat.Dense
	if err := winv.Inverse(w); err != nil {
		panic(err)
	}
	yv := mat.NewVecDense(n, y)
	best, bestObj := make([]float64, m), math.Inf(1)
	for mask := 0; mask < 1<<m; mask++ {
		var free []int
		for j := 0; j < m; j++ {
			if mask&(1<<j) != 0 {
				free = append(free, j)
			}
		}
		b := make([]float64, m)
		if len(free) > 0 {
			s := mat.NewDense(n, len(free), nil)
			for c, j := range free {
				s.Set(k+j, c, 1)
				for a, sum := range h.Sums {
					for _, x := range sum {
						if x == j {
							s.Set(a, c, 1)
						}
					}
				}
			}
			var stw, sws mat.Dense
			stw.Mul(s.T(), &winv)
			sws.Mul(&stw, s)
			var rhs, sol mat.VecDense
			rhs.MulVec(&stw, yv)
			if err := sol.SolveVec(&sws, &rhs); err != nil {
				panic(err)
			}
			feasible := true
			for c, j := range free {
				b[j] = sol.AtVec(c)
				feasible = feasible && b[j] >= -1e-12
			}
			if !feasible {
				continue
			}
		}
		f := aggregate(h, [][]float64{b})
		d := mat.NewVecDense(n, nil)
		for i := range f {
			d.SetVec(i, y[i]-f[i][0])
		}
		var wd mat.VecDense
		wd.MulVec(&winv, d)
		if obj := mat.Dot(d, &wd); obj < bestObj {
			bestObj = obj
			copy(best, b)
		}
	}
	return best
}

// The active-set solution equals the enumerated optimum of the non-negative problem, for
// diagonal and full weights, on a small tree whose base forecasts force several zeros.
func TestNonNegativeEqualsEnumeration(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 5))
	h := itemDepot(3, 3)
	k := len(h.Sums)
	resid := correlatedResiduals(h, 40, rng)
	mo, _, err := newMoments(h, resid)
	if err != nil {
		t.Fatal(err)
	}
	shrunk, _ := mo.shrunkCovariance()
	ones := make([]float64, h.Nodes())
	counts := make([]float64, h.Nodes())
	for i := range ones {
		ones[i], counts[i] = 1, 1
		if i < k {
			counts[i] = float64(len(h.Sums[i]))
		}
	}
	var held, exchanged bool // some unconstrained bottom < 0; some period needed an exchange
	for trial := 0; trial < 20; trial++ {
		base := incoherentBase(h, 3, rng)
		for j := 0; j < h.Bottom; j++ { // low demand: bottom series around 0..2, some negative
			for p := range base[k+j] {
				base[k+j][p] = base[k+j][p]/2 - 4
			}
		}
		for a := range h.Sums { // aggregates far off their children's sums
			for p := range base[a] {
				base[a][p] *= 0.2 + 1.6*rng.Float64()
			}
		}
		for _, c := range []struct {
			m Method
			w mat.Matrix
		}{{OLS, diagMatrix(ones)}, {Structural, diagMatrix(counts)}, {MinTShrink, shrunk}} {
			got, err := Reconcile(h, base, c.m, resid, Options{NonNegative: true})
			if err != nil {
				t.Fatal(err)
			}
			wantCoherent(t, string(c.m)+" non-negative", h, got.Forecasts)
			free, err := Reconcile(h, base, c.m, resid, Options{})
			if err != nil {
				t.Fatal(err)
			}
			for _, row := range free.Forecasts[k:] {
				for _, v := range row {
					held = held || v < 0
				}
			}
			exchanged = exchanged || !strings.Contains(got.Note, "at most 0 exchanges")
			for p := range base[0] {
				y := make([]float64, h.Nodes())
				for i := range y {
					y[i] = base[i][p]
				}
				want := bruteNonNegative(h, c.w, y)
				for j, v := range want {
					g := got.Forecasts[k+j][p]
					if g < 0 || math.Abs(g-v) > 1e-8*math.Max(1, math.Abs(v)) {
						t.Fatalf("trial %d %s period %d: bottom %d = %.12g, enumeration %.12g", trial, c.m, p, j, g, v)
					}
				}
			}
		}
	}
	if !held || !exchanged {
		t.Errorf("negative unconstrained bottoms %v, exchanges beyond the start %v: the test does not exercise the active set", held, exchanged)
	}
}

// An ill-conditioned diagonal W (weights 1e-10 beside weights near 1, below the package's
// variance floor, so built directly) makes rounding flip a series whose optimum is 0 under
// Murty's rule; the solver stops at the repeated held set, and its answer still equals the
// enumerated optimum and is stated in the note. Found by a search over random small trees.
func TestNonNegativeRoundingCycle(t *testing.T) {
	h := Hierarchy{Bottom: 4, Sums: [][]int{{0, 2}, {0}, {0, 1, 2}, {1, 2}}}
	w := diagWeight{1e-10, 1e-10, 1e-10, 1.3449239106012971, 1.554680544255942, 1.840633487881362, 1e-10, 1e-10}
	y := []float64{2, -0.5, 5.75, 0.5, 5.25, 3.5, 1, 2.75}
	p := newProblem(h, w, DefaultMaxDenseNodes)
	got, err := p.nonNegative([][]float64{y})
	if err != nil {
		t.Fatal(err)
	}
	if p.cycles != 1 || !strings.Contains(p.describe(true), "1 periods stopped at a rounding cycle") {
		t.Fatalf("cycles %d, note %q: the case no longer reaches the cycle stop", p.cycles, p.describe(true))
	}
	want := bruteNonNegative(h, diagMatrix(w), y)
	for j, v := range want {
		if g := got[0][j]; g < 0 || math.Abs(g-v) > 1e-9*math.Max(1, math.Abs(v)) {
			t.Errorf("bottom %d = %.12g, enumeration %.12g", j, g, v)
		}
	}
}
