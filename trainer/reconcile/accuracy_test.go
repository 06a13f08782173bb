package reconcile

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// With the true error covariance W, the MinT reconciled errors S G e have covariance
// S (S'W⁻¹S)⁻¹ S' <= W (Wickramasuriya, Athanasopoulos & Hyndman 2019: MinT is the
// minimum-variance unbiased reconciliation, and W − S(S'W⁻¹S)⁻¹S' = W^½ (I − H) W^½ with H an
// orthogonal projection, so no node gets worse). Simulated: base errors e with a known W
// (bottom series sharing a common factor, aggregates forecast independently and noisily),
// residuals drawn separately to estimate W as in practice; since reconciliation is linear and
// exact for coherent truth (S G S = S), the reconciled error is the reconciliation of e.
// Checks per node: MinT's mean squared error is at most the base's (2% sampling margin) and
// within 10% of the theory's; the aggregates gain.
func TestMinTDoesNotWorsenAnyNode(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 7))
	h := itemDepot(3, 2)
	n, k := h.Nodes(), len(h.Sums)
	idio := make([]float64, n) // idiosyncratic variance per node
	for j := 0; j < h.Bottom; j++ {
		idio[k+j] = 1 + float64(j%3)
	}
	for a, sum := range h.Sums {
		idio[a] = 2 * float64(len(sum))
	}
	const factor = 0.8 // standard deviation of the bottom series' common error
	w := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		w.SetSym(i, i, idio[i])
		for j := i; j < n; j++ {
			if i >= k && j >= k {
				w.SetSym(i, j, w.At(i, j)+factor*factor)
			}
		}
	}
	draw := func(T int) [][]float64 {
		e := make([][]float64, n)
		for i := range e {
			e[i] = make([]float64, T)
		}
		for t := 0; t < T; t++ {
			c := factor * rng.NormFloat64()
			for i := range e {
				e[i][t] = math.Sqrt(idio[i]) * rng.NormFloat64()
				if i >= k {
					e[i][t] += c
				}
			}
		}
		return e
	}
	resid := draw(400)
	errs := draw(4000)
	// Theory: diag of S (S'W⁻¹S)⁻¹ S' = the reconciliation of W's columns, S G W, read on the diagonal.
	cols := make([][]float64, n)
	for i := range cols {
		cols[i] = mat.Col(nil, i, w)
	}
	theory := referenceSG(h, w, cols)
	for _, m := range []Method{MinTSample, MinTShrink} {
		got, err := Reconcile(h, errs, m, resid, Options{})
		if err != nil || got.Method != m {
			t.Fatalf("%s: ran %s, %v", m, got.Method, err)
		}
		var baseAgg, recAgg float64
		for i := 0; i < n; i++ {
			var b, r float64
			for p := range errs[i] {
				b += errs[i][p] * errs[i][p]
				r += got.Forecasts[i][p] * got.Forecasts[i][p]
			}
			b /= float64(len(errs[i]))
			r /= float64(len(errs[i]))
			if r > 1.02*b {
				t.Errorf("%s: %s MSE %.4g after reconciliation, %.4g before", m, h.node(i), r, b)
			}
			if th := theory[i][i]; math.Abs(r-th) > 0.1*th {
				t.Errorf("%s: %s MSE %.4g, theory %.4g", m, h.node(i), r, th)
			}
			if i < k {
				baseAgg, recAgg = baseAgg+b, recAgg+r
			}
		}
		t.Logf("%s: aggregates %.4g -> %.4g", m, baseAgg, recAgg)
		if recAgg > 0.5*baseAgg {
			t.Errorf("%s: aggregates' MSE %.4g after, %.4g before: less gain than the theory's", m, recAgg, baseAgg)
		}
	}
}
