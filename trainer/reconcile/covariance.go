package reconcile

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// varianceFloor is the smallest residual mean square a node gets, relative to the mean of the
// positive ones: a node whose residuals are all zero (an exact fit, a constant zero series) is
// then trusted almost exactly instead of making W singular, and C W C' keeps a condition number
// the solvers can work with (a floor of 1e-10 gave condition numbers near 1e11 and
// rounding-driven cycles in the non-negative solver, found by FuzzReconcile).
const varianceFloor = 1e-6

// moments holds what the residual-based weights need: each node's residual count and mean
// square. Residuals are base forecast errors, taken to have mean zero as the MinT derivation
// assumes unbiased base forecasts (Wickramasuriya et al. 2019, section 2), so every moment is
// about zero, not about the sample mean: a biased node's bias counts as error.
type moments struct {
	e     [][]float64 // node-major residuals, NaN where missing
	count []int       // non-NaN residuals per node
	ms    []float64   // σ̂²_i = Σ_t e_it² / count_i, floored at varianceFloor × mean
	min   int         // node with the fewest residuals
	// note says how many nodes had their variance imputed (see newMoments); empty if none.
	note string
}

// newMoments checks residuals' shape (one row per node, equal lengths, no Inf) and returns
// their moments, or a note saying why they cannot weight the reconciliation (no node with 2
// residuals, or no non-zero residual at all).
//
// A node with fewer than 2 residuals (a series too short to backtest, a fallback model) is
// weighted as the least trusted node per bottom series and uncorrelated with the rest:
//
//	σ̂²_i = s_i · max_j (σ̂²_j / s_j)   over the nodes j with 2 or more residuals
//
// s_i being the number of bottom series under node i (structural scaling's diag(S 1)): a node
// the data say nothing about is trusted no more than the worst node measured, size for size
// (this project's rule: it keeps one new series from sending the whole tree to Structural). Its
// residuals are then ignored (count 0, no covariance).
func newMoments(h Hierarchy, residuals [][]float64) (*moments, string, error) {
	n := h.Nodes()
	if len(residuals) != n {
		return nil, "", fmt.Errorf("reconcile: residuals have %d rows, the hierarchy has %d nodes", len(residuals), n)
	}
	T := len(residuals[0])
	mo := &moments{e: residuals, count: make([]int, n), ms: make([]float64, n)}
	var sum float64
	var positive int
	for i, row := range residuals {
		if len(row) != T {
			return nil, "", fmt.Errorf("reconcile: residuals of %s have %d values, node 0 has %d", h.node(i), len(row), T)
		}
		var ss float64
		for t, e := range row {
			if math.IsInf(e, 0) {
				return nil, "", fmt.Errorf("reconcile: residual %d of %s is %v", t, h.node(i), e)
			}
			if !math.IsNaN(e) {
				ss += e * e
				mo.count[i]++
			}
		}
		if mo.count[i] > 0 {
			mo.ms[i] = ss / float64(mo.count[i])
		}
	}
	size := func(i int) float64 {
		if i < len(h.Sums) {
			return float64(len(h.Sums[i]))
		}
		return 1
	}
	var worst float64 // max σ̂²_j / s_j over the measured nodes
	var few []int
	for i := range residuals {
		if mo.count[i] < 2 {
			few = append(few, i)
			continue
		}
		worst = math.Max(worst, mo.ms[i]/size(i))
	}
	if len(few) == n {
		return nil, fmt.Sprintf("%s has %d residuals, fewer than 2", h.node(few[0]), mo.count[few[0]]), nil
	}
	if len(few) > 0 {
		mo.e = append([][]float64(nil), residuals...)
		empty := make([]float64, T)
		for t := range empty {
			empty[t] = math.NaN()
		}
		for _, i := range few {
			mo.e[i], mo.count[i], mo.ms[i] = empty, 0, worst*size(i)
		}
		mo.note = fmt.Sprintf("%d nodes with fewer than 2 residuals (first %s) weighted as the least trusted node per bottom series", len(few), h.node(few[0]))
	}
	for i := range residuals {
		if mo.count[i] < mo.count[mo.min] {
			mo.min = i
		}
		if mo.ms[i] > 0 {
			sum += mo.ms[i]
			positive++
		}
	}
	if positive == 0 {
		return nil, "every residual is zero", nil
	}
	floor := varianceFloor * sum / float64(positive)
	for i, v := range mo.ms {
		mo.ms[i] = math.Max(v, floor)
	}
	return mo, "", nil
}

// diagonal returns W = diag(σ̂²_i) (VarianceScaling).
func (mo *moments) diagonal() diagWeight { return diagWeight(append([]float64(nil), mo.ms...)) }

// sampleCovariance returns W_ij = Σ_t e_it e_jt / n_ij over the n_ij periods where both are
// present (pairwise complete), W_ii = σ̂²_i.
func (mo *moments) sampleCovariance() *mat.SymDense {
	n := len(mo.e)
	w := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		w.SetSym(i, i, mo.ms[i])
		for j := i + 1; j < n; j++ {
			if s, c := cross(mo.e[i], mo.e[j]); c > 0 {
				w.SetSym(i, j, s/float64(c))
			}
		}
	}
	return w
}

// shrunkCovariance returns the residual covariance shrunk toward its diagonal and the
// intensity λ, Schäfer & Strimmer (2005, Statistical Applications in Genetics and Molecular
// Biology 4(1), article 32), target "D" (diagonal, unequal variances), which shrinks the
// correlations toward zero and keeps the variances:
//
//	z_it  = e_it / σ̂_i                        standardised residuals
//	w_ijt = z_it z_jt,   r_ij = mean_t w_ijt   correlation (moments about zero, see moments)
//	Var̂(r_ij) = Σ_t (w_ijt − r_ij)² / (n_ij (n_ij − 1))
//	λ* = Σ_{i≠j} Var̂(r_ij) / Σ_{i≠j} r_ij²,   λ = min(1, max(0, λ*))
//	W_ii = σ̂²_i,   W_ij = (1 − λ) r_ij σ̂_i σ̂_j
//
// Their paper writes r and Var̂(r) with factors n/(n−1) and n/(n−1)³ (unbiased moments); both
// scale as the same (n/(n−1))² and cancel in λ*. Means are over the n_ij periods where both
// nodes have a residual; a pair with fewer than 2 such periods gets r_ij = 0 and adds nothing.
// λ = 1 when every r_ij is 0. This is the W of MinT-shrink (Wickramasuriya et al. 2019).
func (mo *moments) shrunkCovariance() (*mat.SymDense, float64) {
	n := len(mo.e)
	sd := make([]float64, n)
	for i, v := range mo.ms {
		sd[i] = math.Sqrt(v)
	}
	r := mat.NewSymDense(n, nil)
	var num, den float64
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			s, c := cross(mo.e[i], mo.e[j])
			if c < 2 {
				continue
			}
			s /= sd[i] * sd[j]
			mean := s / float64(c)
			var dev float64
			for t, x := range mo.e[i] {
				y := mo.e[j][t]
				if !math.IsNaN(x) && !math.IsNaN(y) {
					d := x*y/(sd[i]*sd[j]) - mean
					dev += d * d
				}
			}
			num += dev / float64(c*(c-1))
			den += mean * mean
			r.SetSym(i, j, mean)
		}
	}
	lambda := 1.0
	if den > 0 {
		lambda = math.Min(1, math.Max(0, num/den))
	}
	for i := 0; i < n; i++ {
		r.SetSym(i, i, mo.ms[i])
		for j := i + 1; j < n; j++ {
			r.SetSym(i, j, (1-lambda)*r.At(i, j)*sd[i]*sd[j])
		}
	}
	return r, lambda
}

// cross returns Σ_t x_t y_t over the periods where neither is NaN, and their count.
func cross(x, y []float64) (float64, int) {
	var s float64
	var c int
	for t, a := range x {
		if b := y[t]; !math.IsNaN(a) && !math.IsNaN(b) {
			s += a * b
			c++
		}
	}
	return s, c
}

// residualWeight returns the weight of a residual-based method, the method that will run, its
// λ (NaN unless MinTShrink) and a note on any fallback taken before solving: to Structural when
// the residuals cannot weight it (and on nodes whose variance was imputed); MinTSample to
// MinTShrink when a node has no more residuals than there are nodes (the sample covariance would
// be singular); MinTSample to VarianceScaling when the node count is above maxDense, where
// MinTShrink's W is the diagonal plus low rank form (shrunkLowRank). The moments come back for a later fallback (nil with
// Structural).
func residualWeight(h Hierarchy, m Method, residuals [][]float64, maxDense int) (weight, Method, float64, string, *moments, error) {
	mo, why, err := newMoments(h, residuals)
	if err != nil {
		return nil, "", 0, "", nil, err
	}
	if mo == nil {
		return structuralWeight(h), Structural, math.NaN(), fmt.Sprintf("%s: %s instead of %s", why, Structural, m), nil, nil
	}
	note := mo.note
	n := h.Nodes()
	if m == MinTShrink && n > maxDense {
		w, lambda := mo.shrunkLowRank()
		note = joinNote(note, fmt.Sprintf("%d nodes, more than MaxDenseNodes %d: W as a diagonal plus rank %d (missing residuals as zero), by conjugate gradient", n, maxDense, len(residuals[0])))
		return w, m, lambda, note, mo, nil
	}
	if m == MinTSample && n > maxDense {
		note = joinNote(note, fmt.Sprintf("%d nodes, more than MaxDenseNodes %d: %s (the diagonal of the shrunk covariance) instead of %s", n, maxDense, VarianceScaling, m))
		m = VarianceScaling
	}
	if m == MinTSample && mo.count[mo.min] <= n {
		note = joinNote(note, fmt.Sprintf("%s has %d residuals, not more than the %d nodes, so the sample covariance is singular: %s instead of %s",
			h.node(mo.min), mo.count[mo.min], n, MinTShrink, MinTSample))
		m = MinTShrink
	}
	w, lambda := mo.weight(m)
	return w, m, lambda, note, mo, nil
}

// weight returns W for VarianceScaling, MinTShrink or MinTSample, and λ (NaN unless
// MinTShrink).
func (mo *moments) weight(m Method) (weight, float64) {
	switch m {
	case MinTShrink:
		w, lambda := mo.shrunkCovariance()
		return denseWeight{w}, lambda
	case MinTSample:
		return denseWeight{mo.sampleCovariance()}, math.NaN()
	}
	return mo.diagonal(), math.NaN()
}

// lowRankWeight is W = diag(d) + U U' with U n × T: MinTShrink's shrunk covariance above the
// dense node limit, applied in O(n T) per product and never formed (see shrunkLowRank).
type lowRankWeight struct {
	d    []float64   // diagonal part, > 0
	u    [][]float64 // u[t] = column t of U (length n)
	diag []float64   // W_ii = d_i + Σ_t U_it²
	coef []float64   // scratch, length T
}

func (w lowRankWeight) mulVec(dst, v []float64) {
	for t, col := range w.u {
		w.coef[t] = floats.Dot(col, v)
	}
	floats.MulTo(dst, w.d, v)
	for t, col := range w.u {
		floats.AddScaled(dst, w.coef[t], col)
	}
}

func (w lowRankWeight) diagonal(i int) float64 { return w.diag[i] }

// shrunkLowRank is shrunkCovariance for trees above the dense node limit, written as a diagonal
// plus a matrix of rank T (the number of residual periods) so that W v costs O(n T) and the
// conjugate gradient never needs W itself. With every residual present it is the same W and λ
// as shrunkCovariance; a missing residual counts as zero here (mean over all T periods, not over
// the pair's common periods: pairwise means would break the low rank), which pulls the pair's
// correlation towards zero. With z_it = e_it / σ̂_i (0 where missing), w_ijt = z_it z_jt,
// r_ij = Σ_t w_ijt / T:
//
//	Σ_{i≠j} r_ij²               = (Σ_{t,s} G_ts² − Σ_i (Σ_t z_it²)²) / T²,   G = Z Z' (T × T)
//	Σ_{i≠j} Σ_t w_ijt²          = Σ_t ((Σ_i z_it²)² − Σ_i z_it⁴)
//	Σ_{i≠j} Var̂(r_ij)           = (Σ_{i≠j} Σ_t w_ijt² − T Σ_{i≠j} r_ij²) / (T (T − 1))
//
// (Schäfer & Strimmer 2005, as in shrunkCovariance, summed over ordered pairs: the factor 2
// cancels in λ), all in O(n T²). Then W_ij = (1 − λ) r_ij σ̂_i σ̂_j = Σ_t U_it U_jt with
// U = sqrt((1 − λ) / T) E (E zero-filled), and W_ii = σ̂_i² gives d_i = σ̂_i² − Σ_t U_it²,
// floored at varianceFloor times the mean σ̂² (d_i >= λ σ̂_i² otherwise) so that W stays
// positive definite with λ = 0.
func (mo *moments) shrunkLowRank() (lowRankWeight, float64) {
	n := len(mo.e)
	T := len(mo.e[0])
	z := make([][]float64, T) // z[t][i]
	for t := range z {
		z[t] = make([]float64, n)
	}
	var meanMS float64
	for i, row := range mo.e {
		sd := math.Sqrt(mo.ms[i])
		meanMS += mo.ms[i] / float64(n)
		for t, e := range row {
			if !math.IsNaN(e) {
				z[t][i] = e / sd
			}
		}
	}
	var sumW2 float64 // Σ_{i≠j} Σ_t w_ijt²
	for t := range z {
		var sq, q4 float64
		for _, v := range z[t] {
			sq += v * v
			q4 += v * v * v * v
		}
		sumW2 += sq*sq - q4
	}
	var gg float64 // Σ_{t,s} G_ts²
	for t := range z {
		for s := t; s < T; s++ {
			g := floats.Dot(z[t], z[s])
			if s == t {
				gg += g * g
			} else {
				gg += 2 * g * g
			}
		}
	}
	var rows4 float64 // Σ_i (Σ_t z_it²)²
	for i := 0; i < n; i++ {
		var s float64
		for t := range z {
			s += z[t][i] * z[t][i]
		}
		rows4 += s * s
	}
	tt := float64(T)
	den := (gg - rows4) / (tt * tt)
	num := (sumW2 - tt*den) / (tt * (tt - 1))
	lambda := 1.0
	if den > 0 {
		lambda = math.Min(1, math.Max(0, num/den))
	}
	scale := math.Sqrt((1 - lambda) / tt)
	w := lowRankWeight{d: make([]float64, n), u: make([][]float64, T), diag: make([]float64, n), coef: make([]float64, T)}
	for t := range w.u {
		w.u[t] = make([]float64, n)
	}
	for i, row := range mo.e {
		var uu float64
		for t, e := range row {
			if !math.IsNaN(e) {
				w.u[t][i] = scale * e
				uu += w.u[t][i] * w.u[t][i]
			}
		}
		w.d[i] = math.Max(mo.ms[i]-uu, varianceFloor*meanMS)
		w.diag[i] = w.d[i] + uu
	}
	return w, lambda
}
