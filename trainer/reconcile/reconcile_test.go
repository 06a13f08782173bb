package reconcile

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// itemDepot returns the grouped hierarchy of items × depots (Fenwick Lane Provisions): the
// grand total, one total per item, one per depot; bottom series j = item·depots + depot.
func itemDepot(items, depots int) Hierarchy {
	h := Hierarchy{Bottom: items * depots}
	total := make([]int, h.Bottom)
	for j := range total {
		total[j] = j
	}
	h.Sums = append(h.Sums, total)
	for i := 0; i < items; i++ {
		var s []int
		for d := 0; d < depots; d++ {
			s = append(s, i*depots+d)
		}
		h.Sums = append(h.Sums, s)
	}
	for d := 0; d < depots; d++ {
		var s []int
		for i := 0; i < items; i++ {
			s = append(s, i*depots+d)
		}
		h.Sums = append(h.Sums, s)
	}
	return h
}

// incoherentBase returns base forecasts for horizon periods: bottom series around 10, each
// aggregate its children's sum times a factor in [0.9, 1.1) plus noise, so nothing adds up.
func incoherentBase(h Hierarchy, horizon int, rng *rand.Rand) [][]float64 {
	k := len(h.Sums)
	base := make([][]float64, h.Nodes())
	for j := 0; j < h.Bottom; j++ {
		base[k+j] = make([]float64, horizon)
		for t := range base[k+j] {
			base[k+j][t] = 10 + 3*rng.NormFloat64()
		}
	}
	for a, sum := range h.Sums {
		base[a] = make([]float64, horizon)
		for t := range base[a] {
			var s float64
			for _, j := range sum {
				s += base[k+j][t]
			}
			base[a][t] = s*(0.9+0.2*rng.Float64()) + rng.NormFloat64()
		}
	}
	return base
}

// correlatedResiduals returns T residuals per node with a shared component, so that the
// covariance is far from diagonal: bottom e_j = c_t + own, aggregate = Σ children + own.
func correlatedResiduals(h Hierarchy, T int, rng *rand.Rand) [][]float64 {
	k := len(h.Sums)
	e := make([][]float64, h.Nodes())
	common := make([]float64, T)
	for t := range common {
		common[t] = rng.NormFloat64()
	}
	for j := 0; j < h.Bottom; j++ {
		e[k+j] = make([]float64, T)
		for t := range common {
			e[k+j][t] = common[t] + (0.5+float64(j%3))*rng.NormFloat64()
		}
	}
	for a, sum := range h.Sums {
		e[a] = make([]float64, T)
		for t := range e[a] {
			for _, j := range sum {
				e[a][t] += e[k+j][t]
			}
			e[a][t] += 2 * rng.NormFloat64()
		}
	}
	return e
}

// referenceSG computes S G ŷ with G = (S' W⁻¹ S)⁻¹ S' W⁻¹ by explicit dense gonum inverses,
// the formula of Wickramasuriya, Athanasopoulos & Hyndman (2019, JASA 114(526)), independent of
// the package's constraint form and solvers.
func referenceSG(h Hierarchy, w mat.Matrix, base [][]float64) [][]float64 {
	n, m, k := h.Nodes(), h.Bottom, len(h.Sums)
	s := mat.NewDense(n, m, nil)
	for a, sum := range h.Sums {
		for _, j := range sum {
			s.Set(a, j, 1)
		}
	}
	for j := 0; j < m; j++ {
		s.Set(k+j, j, 1)
	}
	var winv, stw, sws, inv, g, sg mat.Dense
	if err := winv.Inverse(w); err != nil {
		panic(err)
	}
	stw.Mul(s.T(), &winv)
	sws.Mul(&stw, s)
	if err := inv.Inverse(&sws); err != nil {
		panic(err)
	}
	g.Mul(&inv, &stw)
	sg.Mul(s, &g)
	horizon := len(base[0])
	y := mat.NewDense(n, horizon, nil)
	for i, row := range base {
		y.SetRow(i, row)
	}
	var out mat.Dense
	out.Mul(&sg, y)
	f := make([][]float64, n)
	for i := range f {
		f[i] = mat.Row(nil, i, &out)
	}
	return f
}

// diagMatrix returns diag(d) as a dense matrix.
func diagMatrix(d []float64) *mat.Dense {
	w := mat.NewDense(len(d), len(d), nil)
	for i, v := range d {
		w.Set(i, i, v)
	}
	return w
}

// wantClose fails unless got and want agree entry by entry within tol, absolute or relative.
func wantClose(t *testing.T, what string, got, want [][]float64, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d rows, want %d", what, len(got), len(want))
	}
	for i := range want {
		for p := range want[i] {
			if !scalar.EqualWithinAbsOrRel(got[i][p], want[i][p], tol, tol) {
				t.Fatalf("%s: node %d period %d = %.15g, want %.15g", what, i, p, got[i][p], want[i][p])
			}
		}
	}
}

// wantCoherent fails unless f is coherent to 1e-9 relative (issue 21's coherence target).
func wantCoherent(t *testing.T, what string, h Hierarchy, f [][]float64) {
	t.Helper()
	if d := MaxDeviation(h, f); d > 1e-9 {
		t.Errorf("%s: MaxDeviation %g > 1e-9", what, d)
	}
}

// Every projection method equals the dense S G ŷ of Wickramasuriya et al. (2019) on a small
// item × depot tree (3 × 2: 6 bottom series, 6 aggregates), with the W each method documents.
func TestReconcileEqualsDenseSG(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 1))
	h := itemDepot(3, 2)
	base := incoherentBase(h, 5, rng)
	resid := correlatedResiduals(h, 40, rng)
	n := h.Nodes()

	ones := make([]float64, n)
	counts := make([]float64, n)
	ms := make([]float64, n)
	for i := range ones {
		ones[i], counts[i] = 1, 1
		if i < len(h.Sums) {
			counts[i] = float64(len(h.Sums[i]))
		}
		for _, e := range resid[i] {
			ms[i] += e * e / float64(len(resid[i]))
		}
	}
	mo, _, err := newMoments(h, resid)
	if err != nil {
		t.Fatal(err)
	}
	shrunk, _ := mo.shrunkCovariance()
	// Sample covariance about zero, computed here from its definition (1/T) E' E.
	e := mat.NewDense(len(resid[0]), n, nil)
	for i, row := range resid {
		e.SetCol(i, row)
	}
	var sample mat.Dense
	sample.Mul(e.T(), e)
	sample.Scale(1/float64(len(resid[0])), &sample)

	for _, c := range []struct {
		m Method
		w mat.Matrix
	}{
		{OLS, diagMatrix(ones)},           // W = I (Hyndman et al. 2011)
		{Structural, diagMatrix(counts)},  // W = diag(S 1) (Athanasopoulos et al. 2017)
		{VarianceScaling, diagMatrix(ms)}, // W = diag of mean squares (FPP3 ch. 11)
		{MinTShrink, shrunk},              // Schäfer & Strimmer W, λ checked below
		{MinTSample, &sample},             // (1/T) E'E
	} {
		for _, dense := range []int{0, 1} { // default (Cholesky), and CG for the diagonal ones
			got, err := Reconcile(h, base, c.m, resid, Options{MaxDenseNodes: []int{0, 4}[dense]})
			if err != nil {
				t.Fatalf("%s: %v", c.m, err)
			}
			if got.Method != c.m && !(dense == 1 && (c.m == MinTShrink || c.m == MinTSample)) {
				t.Fatalf("%s ran as %s (%s)", c.m, got.Method, got.Note)
			}
			if got.Method != c.m {
				continue // MinT above a 4-node limit: fallback, checked in TestFallbacks
			}
			want := referenceSG(h, c.w, base)
			wantClose(t, string(c.m)+" "+got.Note, got.Forecasts, want, 1e-9)
			wantCoherent(t, string(c.m), h, got.Forecasts)
			if (c.m == MinTShrink) != !math.IsNaN(got.Lambda) {
				t.Errorf("%s: Lambda %v", c.m, got.Lambda)
			}
		}
	}
}

// Bottom-up: every bottom series is its base forecast, every aggregate the plain sum of them
// (FPP3 section 11.2); the aggregates' base forecasts are unused.
func TestBottomUp(t *testing.T) {
	h := Hierarchy{Bottom: 3, Sums: [][]int{{0, 1, 2}, {0, 2}}}
	base := [][]float64{{999, -5}, {999, 0}, {1, 2}, {10, 20}, {100, -200}}
	got, err := Reconcile(h, base, BottomUp, nil, Options{})
	if err != nil {
		t.Fatal(err)
	}
	want := [][]float64{{111, -178}, {101, -198}, {1, 2}, {10, 20}, {100, -200}}
	wantClose(t, "bottom-up", got.Forecasts, want, 0)
	got, _ = Reconcile(h, base, BottomUp, nil, Options{NonNegative: true})
	want = [][]float64{{111, 22}, {101, 2}, {1, 2}, {10, 20}, {100, 0}}
	wantClose(t, "bottom-up, non-negative", got.Forecasts, want, 0)
}

// OLS on one level, worked by hand from G = (S'S)⁻¹ S' (Hyndman et al. 2011; FPP3 chapter 11):
// for Total = A + B, S'S = [[2,1],[1,2]], G = (1/3)[[1,2,−1],[1,−1,2]], so with ŷ = (10, 3, 5)
// the incoherence d = 10 − 8 = 2 is shared equally: A = 3 + 2/3, B = 5 + 2/3, Total = 10 − 2/3.
func TestOLSWorkedOneLevel(t *testing.T) {
	h := Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}}}
	got, err := Reconcile(h, [][]float64{{10}, {3}, {5}}, OLS, nil, Options{})
	if err != nil {
		t.Fatal(err)
	}
	wantClose(t, "OLS one level", got.Forecasts, [][]float64{{10 - 2.0/3}, {3 + 2.0/3}, {5 + 2.0/3}}, 1e-14)
}

// OLS on a two-level tree (Total; A = AA + AB; B = BA + BB), values from R 4 base:
//
//	S <- rbind(c(1,1,1,1), c(1,1,0,0), c(0,0,1,1), diag(4))
//	yhat <- c(100, 48, 46, 20, 25, 24, 19)
//	S %*% solve(t(S) %*% S) %*% t(S) %*% yhat
func TestOLSWorkedTwoLevel(t *testing.T) {
	h := Hierarchy{Bottom: 4, Sums: [][]int{{0, 1, 2, 3}, {0, 1}, {2, 3}}}
	base := [][]float64{{100}, {48}, {46}, {20}, {25}, {24}, {19}}
	want := [][]float64{{96.5714285714286}, {49.2857142857143}, {47.2857142857143},
		{22.1428571428571}, {27.1428571428572}, {26.1428571428571}, {21.1428571428571}}
	for _, dense := range []int{0, 1} {
		got, err := Reconcile(h, base, OLS, nil, Options{MaxDenseNodes: dense})
		if err != nil {
			t.Fatal(err)
		}
		wantClose(t, "OLS two levels "+got.Note, got.Forecasts, want, 1e-13)
	}
}

// The Schäfer & Strimmer (2005) intensity λ* = Σ_{i≠j} Var̂(r_ij) / Σ_{i≠j} r_ij², moments about
// zero (see moments).
func TestShrinkageIntensity(t *testing.T) {
	// By hand: two nodes with identical residuals (1, 2, 3, 4). σ̂² = 30/4 = 7.5, w_t = e_t²/7.5,
	// r = mean w = 1, Σ (w_t − 1)² = (6.5² + 3.5² + 1.5² + 8.5²)/7.5² = 129/56.25, so
	// Var̂(r) = 129/56.25/(4·3) = 43/225 and λ* = (43/225)/1² = 43/225.
	h := Hierarchy{Bottom: 1, Sums: [][]int{{0}}}
	mo, _, err := newMoments(h, [][]float64{{1, 2, 3, 4}, {1, 2, 3, 4}})
	if err != nil {
		t.Fatal(err)
	}
	w, lambda := mo.shrunkCovariance()
	if !scalar.EqualWithinAbsOrRel(lambda, 43.0/225, 1e-15, 1e-15) {
		t.Errorf("hand example: λ = %.17g, want 43/225", lambda)
	}
	if want := (1 - 43.0/225) * 7.5; !scalar.EqualWithinAbsOrRel(w.At(0, 1), want, 1e-14, 1e-14) {
		t.Errorf("hand example: W01 = %g, want (1−λ)·7.5 = %g", w.At(0, 1), want)
	}

	// Three nodes, eight periods; λ and W from R 4 base, the formula written out in R:
	//   Z <- sweep(E, 2, sqrt(colMeans(E^2)), "/")
	//   for i != j: w <- Z[,i]*Z[,j]; r <- mean(w)
	//     num <- num + sum((w - r)^2)/(n*(n-1)); den <- den + r^2
	//   lambda <- max(0, min(1, num/den)); W <- diag(s) ((1-lambda) R + lambda I) diag(s)
	e := [][]float64{
		{1.2, -0.8, 0.3, 2.1, -1.5, 0.4, -0.2, 1.1},
		{0.9, -0.5, 0.6, 1.7, -1.1, 0.1, 0.3, 0.8},
		{-0.4, 0.2, 1.0, -0.3, 0.5, -0.9, 0.7, -0.6},
	}
	h = Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}}}
	mo, _, err = newMoments(h, e)
	if err != nil {
		t.Fatal(err)
	}
	w, lambda = mo.shrunkCovariance()
	if !scalar.EqualWithinAbsOrRel(lambda, 0.216767848453079, 1e-13, 1e-13) {
		t.Errorf("R example: λ = %.15g, want 0.216767848453079", lambda)
	}
	wantW := [][]float64{
		{1.28, 0.757777106621646, -0.281963574556892},
		{0.757777106621646, 0.7825, -0.125317144247507},
		{-0.281963574556892, -0.125317144247507, 0.4},
	}
	for i := range wantW {
		for j := range wantW[i] {
			if !scalar.EqualWithinAbsOrRel(w.At(i, j), wantW[i][j], 1e-13, 1e-13) {
				t.Errorf("R example: W[%d][%d] = %.15g, want %.15g", i, j, w.At(i, j), wantW[i][j])
			}
		}
	}
	// Reconcile reports the same λ.
	got, err := Reconcile(h, [][]float64{{3}, {1}, {1}}, MinTShrink, e, Options{})
	if err != nil || got.Method != MinTShrink || !scalar.EqualWithinAbsOrRel(got.Lambda, 0.216767848453079, 1e-13, 1e-13) {
		t.Errorf("Reconcile MinTShrink: λ %v, method %s, err %v", got.Lambda, got.Method, err)
	}
}

// The conjugate-gradient path equals the Cholesky path on a medium tree (20 items × 15 depots:
// 300 bottom series, 36 aggregates), for each diagonal weight, with and without non-negativity.
func TestConjugateGradientEqualsDense(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 2))
	h := itemDepot(20, 15)
	base := incoherentBase(h, 4, rng)
	for i := range base[len(h.Sums):] { // some bottom series near zero, for non-negativity
		if i%7 == 0 {
			for p := range base[len(h.Sums)+i] {
				base[len(h.Sums)+i][p] = -1 + rng.Float64()
			}
		}
	}
	resid := correlatedResiduals(h, 30, rng)
	for _, m := range []Method{OLS, Structural, VarianceScaling} {
		for _, nonNeg := range []bool{false, true} {
			dense, cg := denseAndForced(t, h, base, m, resid, nonNeg)
			if !strings.Contains(dense.Note, "Cholesky") || strings.Contains(dense.Note, "conjugate") ||
				!strings.Contains(cg.Note, "conjugate gradient") || strings.Contains(cg.Note, "Cholesky") {
				t.Fatalf("%s: solvers not as forced: dense %q, cg %q", m, dense.Note, cg.Note)
			}
			wantClose(t, string(m)+" CG vs Cholesky", cg.Forecasts, dense.Forecasts, 1e-8)
			wantCoherent(t, string(m)+" CG", h, cg.Forecasts)
			if nonNeg {
				for i, row := range cg.Forecasts {
					for p, v := range row {
						if v < 0 {
							t.Fatalf("%s non-negative: node %d period %d = %g", m, i, p, v)
						}
					}
				}
			}
		}
	}
}

// denseAndForced reconciles base with the default dense limit and with MaxDenseNodes 10 (the
// matrix-free path on these trees).
func denseAndForced(t *testing.T, h Hierarchy, base [][]float64, m Method, resid [][]float64, nonNeg bool) (dense, forced Result) {
	t.Helper()
	var err error
	if dense, err = Reconcile(h, base, m, resid, Options{NonNegative: nonNeg}); err != nil {
		t.Fatal(err)
	}
	if forced, err = Reconcile(h, base, m, resid, Options{NonNegative: nonNeg, MaxDenseNodes: 10}); err != nil {
		t.Fatal(err)
	}
	return dense, forced
}

// Bad input gets an error naming the node (issue 21; the brief's rule on bad input).
func TestBadInput(t *testing.T) {
	good := Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}}}
	base := [][]float64{{3}, {1}, {1}}
	for name, c := range map[string]struct {
		h     Hierarchy
		base  [][]float64
		m     Method
		resid [][]float64
		want  string
	}{
		"duplicate index":  {Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}, {1, 0, 1}}}, nil, OLS, nil, "node 1 (aggregate 1) lists bottom series 1 twice"},
		"out of range":     {Hierarchy{Bottom: 2, Sums: [][]int{{0, 2}}}, nil, OLS, nil, "node 0 (aggregate 0) lists bottom series 2, out of range 0..1"},
		"negative index":   {Hierarchy{Bottom: 2, Sums: [][]int{{-1}}}, nil, OLS, nil, "lists bottom series -1"},
		"empty aggregate":  {Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}, {}}}, nil, OLS, nil, "node 1 (aggregate 1) sums no bottom series"},
		"no bottom":        {Hierarchy{}, nil, OLS, nil, "0 bottom series"},
		"short base":       {good, base[:2], OLS, nil, "base has 2 rows, the hierarchy has 3 nodes"},
		"ragged base":      {good, [][]float64{{3}, {1}, {1, 2}}, OLS, nil, "base node 2 (bottom series 1) has 2 periods, node 0 has 1"},
		"NaN base":         {good, [][]float64{{3}, {math.NaN()}, {1}}, BottomUp, nil, "base node 1 (bottom series 0) period 0 is NaN"},
		"Inf base":         {good, [][]float64{{math.Inf(1)}, {1}, {1}}, OLS, nil, "base node 0 (aggregate 0) period 0 is +Inf"},
		"unknown method":   {good, base, "Topdown", nil, `unknown method "Topdown"`},
		"no residuals":     {good, base, MinTShrink, nil, "residuals have 0 rows, the hierarchy has 3 nodes"},
		"ragged residuals": {good, base, MinTShrink, [][]float64{{1, 2}, {1, 2}, {1}}, "residuals of node 2 (bottom series 1) have 1 values, node 0 has 2"},
		"Inf residual":     {good, base, VarianceScaling, [][]float64{{1, 2}, {1, math.Inf(-1)}, {1, 2}}, "residual 1 of node 1 (bottom series 0) is -Inf"},
	} {
		b := c.base
		if b == nil {
			b = base
		}
		_, err := Reconcile(c.h, b, c.m, c.resid, Options{})
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want it to contain %q", name, err, c.want)
		}
	}
	if _, err := Reconcile(good, base, OLS, nil, Options{MaxDenseNodes: -1}); err == nil {
		t.Error("negative MaxDenseNodes: no error")
	}
}

// Fallbacks are taken and stated in Result.Method and Result.Note.
func TestFallbacks(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 3))
	h := itemDepot(3, 2) // 12 nodes
	base := incoherentBase(h, 2, rng)
	short := correlatedResiduals(h, 10, rng) // 10 <= 12 nodes
	for _, c := range []struct {
		name  string
		m     Method
		resid [][]float64
		opt   Options
		want  Method
		note  string
	}{
		{"sample with too few periods", MinTSample, short, Options{}, MinTShrink, "not more than the 12 nodes"},
		{"MinT above the dense limit", MinTShrink, short, Options{MaxDenseNodes: 11}, MinTShrink, "12 nodes, more than MaxDenseNodes 11: W as a diagonal plus rank 10"},
		{"sample above the dense limit", MinTSample, short, Options{MaxDenseNodes: 11}, VarianceScaling, "more than MaxDenseNodes 11"},
		{"a node with one residual", MinTShrink, withOne(short, 7), Options{}, MinTShrink, "1 nodes with fewer than 2 residuals (first node 7 (bottom series 1)) weighted as the least trusted"},
		{"every node with one residual", MinTShrink, allOne(short), Options{}, Structural, "node 0 (aggregate 0) has 1 residuals, fewer than 2"},
		{"all residuals zero", VarianceScaling, zeros(h.Nodes(), 5), Options{}, Structural, "every residual is zero"},
	} {
		got, err := Reconcile(h, base, c.m, c.resid, c.opt)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if got.Method != c.want || !strings.Contains(got.Note, c.note) {
			t.Errorf("%s: ran %s with note %q, want %s and %q", c.name, got.Method, got.Note, c.want, c.note)
		}
		if (got.Method == MinTShrink) == math.IsNaN(got.Lambda) {
			t.Errorf("%s: Lambda %v with %s", c.name, got.Lambda, got.Method)
		}
		wantCoherent(t, c.name, h, got.Forecasts)
	}
}

// withOne returns a copy of e where node i has a single residual (the rest NaN).
func withOne(e [][]float64, i int) [][]float64 {
	out := make([][]float64, len(e))
	for r, row := range e {
		out[r] = append([]float64(nil), row...)
	}
	for t := 1; t < len(out[i]); t++ {
		out[i][t] = math.NaN()
	}
	return out
}

// allOne returns a copy of e where every node has a single residual.
func allOne(e [][]float64) [][]float64 {
	out := e
	for i := range e {
		out = withOne(out, i)
	}
	return out
}

// A node without 2 residuals is weighted σ̂²_i = s_i max_j σ̂²_j / s_j (the package's own rule,
// see newMoments), uncorrelated: VarianceScaling then equals the dense S G ŷ with that diagonal.
func TestImputedVariance(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 5))
	h := itemDepot(3, 2)
	base := incoherentBase(h, 3, rng)
	resid := withOne(correlatedResiduals(h, 20, rng), 2) // aggregate 2
	n := h.Nodes()
	size := func(i int) float64 {
		if i < len(h.Sums) {
			return float64(len(h.Sums[i]))
		}
		return 1
	}
	ms := make([]float64, n)
	var worst float64
	for i := range resid {
		if i == 2 {
			continue
		}
		for _, e := range resid[i] {
			ms[i] += e * e / float64(len(resid[i]))
		}
		worst = math.Max(worst, ms[i]/size(i))
	}
	ms[2] = worst * size(2)
	got, err := Reconcile(h, base, VarianceScaling, resid, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if got.Method != VarianceScaling || !strings.Contains(got.Note, "weighted as the least trusted node per bottom series") {
		t.Fatalf("ran %s: %s", got.Method, got.Note)
	}
	wantClose(t, "imputed variance", got.Forecasts, referenceSG(h, diagMatrix(ms), base), 1e-9)
	// MinTShrink: the node's row and column of W are its variance alone.
	mo, _, err := newMoments(h, resid)
	if err != nil {
		t.Fatal(err)
	}
	w, _ := mo.shrunkCovariance()
	for j := 0; j < n; j++ {
		if j != 2 && w.At(2, j) != 0 {
			t.Errorf("W[2][%d] = %v, want 0", j, w.At(2, j))
		}
	}
	if math.Abs(w.At(2, 2)-ms[2]) > 1e-12*ms[2] {
		t.Errorf("W[2][2] = %v, want %v", w.At(2, 2), ms[2])
	}
}

// zeros returns n rows of T zeros.
func zeros(n, T int) [][]float64 {
	out := make([][]float64, n)
	for i := range out {
		out[i] = make([]float64, T)
	}
	return out
}

// Missing residuals (NaN) are skipped pair by pair; MinTShrink still reconciles coherently.
func TestMissingResiduals(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 4))
	h := itemDepot(4, 3)
	base := incoherentBase(h, 3, rng)
	resid := correlatedResiduals(h, 30, rng)
	for i := range resid {
		for p := 0; p < i%5; p++ { // a new item has fewer backtest origins
			resid[i][p] = math.NaN()
		}
	}
	for _, m := range []Method{VarianceScaling, MinTShrink, MinTSample} {
		got, err := Reconcile(h, base, m, resid, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if got.Method != m && !(m == MinTSample && got.Method == MinTShrink) {
			t.Errorf("%s ran as %s: %s", m, got.Method, got.Note)
		}
		wantCoherent(t, string(m), h, got.Forecasts)
	}
}

func TestMaxDeviation(t *testing.T) {
	h := Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}}}
	// |10 − 9| / 10 = 0.1 in period 0; |0.5 − 0| / max(1, 0.5) = 0.5 in period 1.
	if got := MaxDeviation(h, [][]float64{{10, 0.5}, {4, 0}, {5, 0}}); got != 0.5 {
		t.Errorf("MaxDeviation = %g, want 0.5", got)
	}
	if got := MaxDeviation(h, [][]float64{{10, 0}, {4, 0}, {6, 0}}); got != 0 {
		t.Errorf("coherent: MaxDeviation = %g, want 0", got)
	}
	for name, f := range map[string][][]float64{
		"short":  {{1}, {1}},
		"ragged": {{1}, {1}, {0, 1}},
		"NaN":    {{1}, {math.NaN()}, {0}},
	} {
		if got := MaxDeviation(h, f); !math.IsInf(got, 1) {
			t.Errorf("%s: MaxDeviation = %g, want +Inf", name, got)
		}
	}
}

// Above the dense limit MinTShrink runs with W as a diagonal plus low rank (shrunkLowRank),
// solved by conjugate gradient: with every residual present it is the same W and λ as
// shrunkCovariance (Schäfer & Strimmer 2005), so the forecasts equal the dense S G ŷ of the
// shrunk covariance, with and without non-negativity (the latter against the dense solver).
func TestLowRankShrinkEqualsDense(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 8))
	h := itemDepot(6, 5) // 42 nodes
	base := incoherentBase(h, 3, rng)
	for i := range base[len(h.Sums):] {
		if i%5 == 0 {
			for p := range base[len(h.Sums)+i] {
				base[len(h.Sums)+i][p] = -1 + rng.Float64()
			}
		}
	}
	resid := correlatedResiduals(h, 12, rng) // fewer periods than nodes, as in the trainer
	mo, _, err := newMoments(h, resid)
	if err != nil {
		t.Fatal(err)
	}
	shrunk, lambda := mo.shrunkCovariance()
	lr, lrLambda := mo.shrunkLowRank()
	if math.Abs(lambda-lrLambda) > 1e-12 {
		t.Fatalf("λ low rank %v, dense %v", lrLambda, lambda)
	}
	n := h.Nodes()
	v, got := make([]float64, n), make([]float64, n)
	for c := 0; c < n; c++ { // W column by column
		clear(v)
		v[c] = 1
		lr.mulVec(got, v)
		for i := range got {
			if want := shrunk.At(i, c); math.Abs(got[i]-want) > 1e-12*math.Max(1, math.Abs(want)) {
				t.Fatalf("W[%d][%d] low rank %v, dense %v", i, c, got[i], want)
			}
		}
		if math.Abs(lr.diagonal(c)-shrunk.At(c, c)) > 1e-12*shrunk.At(c, c) {
			t.Fatalf("diagonal %d: %v, want %v", c, lr.diagonal(c), shrunk.At(c, c))
		}
	}
	got2, err := Reconcile(h, base, MinTShrink, resid, Options{MaxDenseNodes: 10})
	if err != nil {
		t.Fatal(err)
	}
	if got2.Method != MinTShrink || !strings.Contains(got2.Note, "diagonal plus rank 12") || !strings.Contains(got2.Note, "conjugate gradient") {
		t.Fatalf("ran %s: %s", got2.Method, got2.Note)
	}
	wantClose(t, "low-rank MinTShrink", got2.Forecasts, referenceSG(h, shrunk, base), 1e-7)
	if math.Abs(got2.Lambda-lambda) > 1e-12 {
		t.Errorf("Result.Lambda %v, want %v", got2.Lambda, lambda)
	}
	dense, cg := denseAndForced(t, h, base, MinTShrink, resid, true)
	wantClose(t, "low-rank MinTShrink, non-negative", cg.Forecasts, dense.Forecasts, 1e-7)
	wantCoherent(t, "low-rank non-negative", h, cg.Forecasts)
}
