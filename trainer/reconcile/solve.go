package reconcile

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// Conjugate-gradient settings of the matrix-free path: stop when ‖C W C' μ − C ŷ‖₂ <=
// cgTol ‖C ŷ‖₂, after at most min(2r + 20, cgMaxIter) iterations for an r-row system (exact
// arithmetic needs at most r; rounding may need a few more). The reconciled bottom series then
// carry a relative error of about cgTol times the condition number of the Jacobi-scaled
// C W C', and the aggregates are summed from them, so coherence does not depend on cgTol.
const (
	cgTol     = 1e-11
	cgMaxIter = 10000
)

// maxCond is the largest condition number of C W C' accepted from a residual covariance; above
// it the multipliers would carry a relative error beyond about 1e-4 (1e-16 × maxCond), and the
// method steps down to a better-conditioned W (see Reconcile). Diagonal weights are floored
// (varianceFloor), which bounds their condition.
const maxCond = 1e12

// weight is the n × n weight matrix W of the projection.
type weight interface {
	// mulVec sets dst = W v.
	mulVec(dst, v []float64)
	// diagonal returns W[i][i].
	diagonal(i int) float64
}

// diagWeight is a diagonal W, one positive entry per node.
type diagWeight []float64

func (w diagWeight) mulVec(dst, v []float64) {
	for i, x := range v {
		dst[i] = w[i] * x
	}
}

func (w diagWeight) diagonal(i int) float64 { return w[i] }

// denseWeight is a full symmetric W (MinT).
type denseWeight struct{ w *mat.SymDense }

func (w denseWeight) mulVec(dst, v []float64) {
	mat.NewVecDense(len(dst), dst).MulVec(w.w, mat.NewVecDense(len(v), v))
}

// aggregateColumns returns W C'_a for each aggregate row a of C (n values each):
// W[:, a] − Σ_{j∈a} W[:, k+j].
func (w denseWeight) aggregateColumns(h Hierarchy) [][]float64 {
	k, n := len(h.Sums), h.Nodes()
	raw := w.w.RawSymmetric() // upper triangle: W[i][c] = Data[min*Stride+max]
	at := func(i, c int) float64 {
		if i > c {
			i, c = c, i
		}
		return raw.Data[i*raw.Stride+c]
	}
	cols := make([][]float64, k)
	for a, sum := range h.Sums {
		col := make([]float64, n)
		for i := range col {
			s := at(i, a)
			for _, j := range sum {
				s -= at(i, k+j)
			}
			col[i] = s
		}
		cols[a] = col
	}
	return cols
}

func (w denseWeight) diagonal(i int) float64 { return w.w.At(i, i) }

// olsWeight returns W = I.
func olsWeight(h Hierarchy) diagWeight {
	w := make(diagWeight, h.Nodes())
	for i := range w {
		w[i] = 1
	}
	return w
}

// structuralWeight returns W = diag(S 1): |Sums[a]| for aggregate a, 1 for a bottom series
// (Athanasopoulos et al. 2017, EJOR 262(1)).
func structuralWeight(h Hierarchy) diagWeight {
	w := olsWeight(h)
	for a, sum := range h.Sums {
		w[a] = float64(len(sum))
	}
	return w
}

// problem is the projection ỹ = ŷ − W C'(C W C')⁻¹ C ŷ for one hierarchy and weight. The rows
// of C are the k aggregate constraints y_a − Σ_{j∈a} y_{k+j} = 0, followed, for a full W, by
// one row y_{k+j} = 0 for each bottom series j held at zero (the non-negative solver's active
// set). For a diagonal W the held series are eliminated instead (the Schur complement of those
// rows): they leave the aggregates' sums, C W C' stays k × k,
//
//	(C W C')_ab = W_aa δ_ab + Σ_{j ∈ a ∩ b, j free} W_jj
//
// and the held rows' multipliers follow as μ_j = ŷ_{k+j} / W_jj + Σ_{a ∋ j} μ_a.
type problem struct {
	h        Hierarchy
	k, n     int
	w        weight
	maxDense int
	parents  [][]int // parents[j] = aggregates summing bottom series j (diagonal W only)

	held []bool // bottom series eliminated at zero (diagonal W), nil when none

	wct [][]float64 // W C'_a per aggregate a, computed once (dense W only)

	// What ran, for Result.Note.
	dense, cg bool
	cgIters   int // most conjugate-gradient iterations one period needed
	exchanges int // most active-set exchanges one period needed (NonNegative)
	cycles    int // periods where the active set stopped at a rounding cycle
}

func newProblem(h Hierarchy, w weight, maxDense int) *problem {
	p := &problem{h: h, k: len(h.Sums), n: h.Nodes(), w: w, maxDense: maxDense}
	if _, ok := w.(diagWeight); ok {
		p.parents = make([][]int, h.Bottom)
		for a, sum := range h.Sums {
			for _, j := range sum {
				p.parents[j] = append(p.parents[j], a)
			}
		}
	}
	return p
}

// describe says how the systems were solved.
func (p *problem) describe(nonNeg bool) string {
	var s string
	switch {
	case p.dense && p.cg:
		s = fmt.Sprintf("C W C' solved by Cholesky and by conjugate gradient (at most %d iterations)", p.cgIters)
	case p.dense:
		s = "C W C' solved by Cholesky"
	case p.cg:
		s = fmt.Sprintf("C W C' solved by conjugate gradient (at most %d iterations, relative residual <= %g)", p.cgIters, cgTol)
	}
	if nonNeg {
		s = joinNote(s, fmt.Sprintf("non-negative by active set (at most %d exchanges)", p.exchanges))
		if p.cycles > 0 {
			s = joinNote(s, fmt.Sprintf("%d periods stopped at a rounding cycle, negative series set to 0", p.cycles))
		}
	}
	return s
}

// isHeld reports whether bottom series j is eliminated at zero.
func (p *problem) isHeld(j int) bool { return p.held != nil && p.held[j] }

// row returns the non-zero entries of row c of C given the zero rows.
func (p *problem) row(c int, zero []int) ([]int, []float64) {
	if c >= p.k {
		return []int{p.k + zero[c-p.k]}, []float64{1}
	}
	sum := p.h.Sums[c]
	idx := make([]int, 1, 1+len(sum))
	val := make([]float64, 1, 1+len(sum))
	idx[0], val[0] = c, 1
	for _, j := range sum {
		if !p.isHeld(j) {
			idx, val = append(idx, p.k+j), append(val, -1)
		}
	}
	return idx, val
}

// applyC sets dst = C y.
func (p *problem) applyC(dst, y []float64, zero []int) {
	for a, sum := range p.h.Sums {
		s := y[a]
		for _, j := range sum {
			if !p.isHeld(j) {
				s -= y[p.k+j]
			}
		}
		dst[a] = s
	}
	for g, j := range zero {
		dst[p.k+g] = y[p.k+j]
	}
}

// applyCT sets dst = C' mu.
func (p *problem) applyCT(dst, mu []float64, zero []int) {
	clear(dst)
	for a, sum := range p.h.Sums {
		dst[a] = mu[a]
		for _, j := range sum {
			if !p.isHeld(j) {
				dst[p.k+j] -= mu[a]
			}
		}
	}
	for g, j := range zero {
		dst[p.k+j] += mu[p.k+g]
	}
}

// solve projects each period's base vector ys[t] (length n) and returns the reconciled bottom
// series b̃ (length m) and the multipliers μ = (C W C')⁻¹ C ŷ (length k + len(zero), the zero
// rows last) per period. Bottom series in zero come back exactly 0. The system is solved by
// Cholesky when W is dense or it has at most maxDense rows, by Jacobi-preconditioned conjugate
// gradient otherwise (always for a low-rank W, which is never formed).
func (p *problem) solve(zero []int, ys [][]float64) (bottom, mus [][]float64, err error) {
	rows := zero // constraint rows beyond the aggregates
	if p.parents != nil && len(zero) > 0 {
		p.held = make([]bool, p.h.Bottom)
		for _, j := range zero {
			p.held[j] = true
		}
		defer func() { p.held = nil }()
		rows = nil
	}
	r := p.k + len(rows)
	bottom = make([][]float64, len(ys))
	mus = make([][]float64, len(ys))
	_, denseW := p.w.(denseWeight)
	_, lowRank := p.w.(lowRankWeight) // never formed: conjugate gradient only
	v := make([]float64, p.n)
	u := make([]float64, p.n)
	var chol *mat.Cholesky
	var inv []float64
	if r > 0 && !lowRank && (denseW || r <= p.maxDense) {
		chol, err = p.factor(rows, r)
		if err != nil {
			return nil, nil, err
		}
		p.dense = true
	} else if r > 0 {
		inv = p.jacobi(rows, r)
	}
	for t, y := range ys {
		mu := make([]float64, r, p.k+len(zero))
		if r > 0 {
			rhs := make([]float64, r)
			p.applyC(rhs, y, rows)
			if chol != nil {
				// A mat.Condition error is only a warning (the factor's condition number is
				// checked in factor); the solution is written all the same.
				if err := chol.SolveVecTo(mat.NewVecDense(r, mu), mat.NewVecDense(r, rhs)); err != nil && !errors.As(err, new(mat.Condition)) {
					return nil, nil, fmt.Errorf("reconcile: solving C W C' at period %d: %w", t, err)
				}
			} else {
				it, err := p.conjugateGradient(mu, rhs, rows, inv, v, u)
				if err != nil {
					return nil, nil, fmt.Errorf("%w at period %d", err, t)
				}
				p.cg = true
				p.cgIters = max(p.cgIters, it)
			}
		}
		p.applyCT(v, mu, rows)
		p.w.mulVec(u, v)
		b := make([]float64, p.h.Bottom)
		for j := range b {
			b[j] = y[p.k+j] - u[p.k+j]
		}
		for _, j := range zero {
			b[j] = 0 // exact, not merely to rounding
		}
		if p.held != nil { // multipliers of the eliminated rows
			for _, j := range zero {
				s := y[p.k+j] / p.w.diagonal(p.k+j)
				for _, a := range p.parents[j] {
					s += mu[a]
				}
				mu = append(mu, s)
			}
		}
		bottom[t], mus[t] = b, mu
	}
	return bottom, mus, nil
}

// factor builds C W C' densely and returns its Cholesky factor: for a diagonal W from the
// formula in the problem doc, through each bottom series' parents (Σ_j |parents_j|² updates);
// for a dense W from the columns W C'_a, so that a changed set of held rows costs no more than
// reading W.
func (p *problem) factor(zero []int, r int) (*mat.Cholesky, error) {
	m := mat.NewSymDense(r, nil)
	if w, ok := p.w.(diagWeight); ok && len(zero) == 0 {
		raw := m.RawSymmetric()
		for a := 0; a < p.k; a++ {
			raw.Data[a*raw.Stride+a] = w[a]
		}
		for j, par := range p.parents {
			if p.isHeld(j) {
				continue
			}
			wj := w[p.k+j]
			for x, a := range par { // parents are in increasing order
				for _, b := range par[x:] {
					raw.Data[a*raw.Stride+b] += wj
				}
			}
		}
	} else {
		// Dense W: the aggregate block from W C' (computed once per problem); a held bottom
		// series j adds row and column (C W)_{·,k+j} = (W C')_{k+j,·} and W[k+j][k+j'].
		dw := p.w.(denseWeight)
		if p.wct == nil {
			p.wct = dw.aggregateColumns(p.h)
		}
		for d := 0; d < r; d++ {
			for c := 0; c <= d; c++ {
				var v float64
				switch {
				case d < p.k:
					v = p.wct[d][c]
					for _, j := range p.h.Sums[c] {
						v -= p.wct[d][p.k+j]
					}
				case c < p.k:
					v = p.wct[c][p.k+zero[d-p.k]]
				default:
					v = dw.w.At(p.k+zero[c-p.k], p.k+zero[d-p.k])
				}
				m.SetSym(c, d, v)
			}
		}
	}
	var chol mat.Cholesky
	if !chol.Factorize(m) {
		return nil, errNotPositiveDefinite
	}
	if _, dense := p.w.(denseWeight); dense && chol.Cond() > maxCond {
		// Numerically singular: a residual covariance with (near-)collinear nodes, such as an
		// aggregate listed twice or one with a single child, under MinTSample.
		return nil, errNotPositiveDefinite
	}
	return &chol, nil
}

// jacobi returns the inverse diagonal of C W C', diag_c = Σ_i C_ci² W_ii (exact for a diagonal
// W), the conjugate-gradient preconditioner.
func (p *problem) jacobi(zero []int, r int) []float64 {
	inv := make([]float64, r)
	for c := range inv {
		idx, val := p.row(c, zero)
		var d float64
		for i, x := range idx {
			d += val[i] * val[i] * p.w.diagonal(x)
		}
		inv[c] = 1 / d
	}
	return inv
}

// conjugateGradient solves (C W C') mu = rhs without forming C W C' (Hestenes & Stiefel 1952;
// preconditioned form as in Golub & Van Loan, Matrix Computations, 4th ed., algorithm 11.5.1),
// with the Jacobi preconditioner inv. v and u are scratch vectors of length n. It returns the
// iterations used.
func (p *problem) conjugateGradient(mu, rhs []float64, zero []int, inv, v, u []float64) (int, error) {
	r := len(rhs)
	clear(mu)
	bnorm := floats.Norm(rhs, 2)
	if bnorm == 0 {
		return 0, nil
	}
	res := append([]float64(nil), rhs...)
	z := make([]float64, r)
	floats.MulTo(z, inv, res)
	dir := append([]float64(nil), z...)
	q := make([]float64, r)
	rz := floats.Dot(res, z)
	limit := min(2*r+20, cgMaxIter)
	for it := 1; it <= limit; it++ {
		p.applyCT(v, dir, zero)
		p.w.mulVec(u, v)
		p.applyC(q, u, zero)
		alpha := rz / floats.Dot(dir, q)
		floats.AddScaled(mu, alpha, dir)
		floats.AddScaled(res, -alpha, q)
		rn := floats.Norm(res, 2)
		if rn <= cgTol*bnorm {
			return it, nil
		}
		if math.IsNaN(rn) {
			break
		}
		floats.MulTo(z, inv, res)
		rzNew := floats.Dot(res, z)
		floats.AddScaledTo(dir, z, rzNew/rz, dir)
		rz = rzNew
	}
	return limit, fmt.Errorf("%w: the %d-row system C W C' did not reach relative residual %g in %d iterations", errNoConvergence, r, cgTol, limit)
}
