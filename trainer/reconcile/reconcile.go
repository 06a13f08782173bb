// Package reconcile makes forecasts of a hierarchy coherent: every aggregate equals the sum of
// the bottom series under it, by bottom-up summing or by the weighted least-squares projection
// of Wickramasuriya, Athanasopoulos & Hyndman (2019, JASA 114(526), "MinT") with OLS,
// structural, variance or residual-covariance weights (Hyndman & Athanasopoulos, Forecasting:
// Principles and Practice, 3rd ed., chapter 11, "Forecasting hierarchical and grouped time
// series").
//
// Notation. A hierarchy has k aggregates and m bottom series, n = k + m nodes, ordered
// aggregates first. Its summing matrix is S = [A; I_m] (n × m), where A[a][j] = 1 when aggregate
// a sums bottom series j. Given base forecasts ŷ (one vector of n per period) and a positive
// definite weight W (n × n, the covariance of the base forecast errors or a stand-in for it),
//
//	G = (S' W⁻¹ S)⁻¹ S' W⁻¹,   ỹ = S G ŷ          (Wickramasuriya et al. 2019, MinT)
//
// which is the W⁻¹-weighted least-squares projection of ŷ onto the coherent subspace. The
// package computes it in the equivalent constraint form that needs neither W⁻¹ nor an m × m
// matrix: with the k × n constraint matrix C = [I_k, −A] (coherent y ⇔ C y = 0),
//
//	ỹ = ŷ − W C' (C W C')⁻¹ C ŷ                     (the same projection; C W C' is k × k)
//
// Wickramasuriya et al. (2019) give G in this form too (G = J − J W U (U' W U)⁻¹ U', their U'
// being our C; from memory). The reconciled bottom series b̃ = last m entries of ỹ are then
// summed up the tree (ỹ = S b̃), so coherence holds to rounding whatever the solver's residual.
package reconcile

import (
	"errors"
	"fmt"
	"math"
)

// Method names a reconciliation method; the values are the API's enum values
// (spec.hierarchy.method).
type Method string

// The methods. Each but BottomUp is the projection above with its own W.
const (
	// BottomUp sums the bottom series' base forecasts; aggregates' base forecasts are unused
	// (FPP3 section 11.2). G = [0 | I_m].
	BottomUp Method = "BottomUp"
	// OLS uses W = I (Hyndman, Ahmed, Athanasopoulos & Shang 2011, CSDA 55(9)).
	OLS Method = "OLS"
	// Structural uses W = diag(S 1), each node weighted by the number of bottom series under
	// it (Athanasopoulos, Hyndman, Kourentzes & Petropoulos 2017, EJOR 262(1), "structural
	// scaling"): needs no residuals.
	Structural Method = "StructuralScaling"
	// VarianceScaling uses W = diag(σ̂²_i), the residual mean squares (FPP3 chapter 11,
	// "WLS with variance scaling"). It is what MinTSample falls back to above the dense node
	// limit, and MinTShrink when its conjugate gradient does not converge: the diagonal of the
	// shrunk covariance, which shrinkage toward the diagonal keeps.
	VarianceScaling Method = "VarianceScaling"
	// MinTShrink uses W = the residual covariance shrunk toward its diagonal (Wickramasuriya
	// et al. 2019) with the Schäfer & Strimmer (2005, SAGMB 4(1)) intensity on the residual
	// correlations r_ij: λ = clip₀¹(Σ_{i≠j} Var̂(r_ij) / Σ_{i≠j} r_ij²), W_ii = σ̂²_i,
	// W_ij = (1 − λ) r_ij σ̂_i σ̂_j (moments about zero, pairwise over missing residuals).
	MinTShrink Method = "MinTShrink"
	// MinTSample uses W = the sample residual covariance; only where it can be positive
	// definite (more residual periods than nodes) and the node count is within the limit.
	MinTSample Method = "MinTSample"
)

// DefaultMaxDenseNodes is the largest side of a dense matrix the package builds when
// Options.MaxDenseNodes is 0: the n × n residual covariance of MinT, and the k × k system
// C W C' of the diagonal-weight methods (larger ones are solved by conjugate gradient). At 2000
// a dense n × n float64 matrix takes 2000² × 8 B = 32 MB, its estimate from T residual periods
// costs about 2 n² T multiply-adds (measured: 1 s for 1886 nodes and T = 60 on one core of the
// development machine) and a Cholesky factor k³/3 (2.7·10⁹ at k = 2000, about a second): a
// shard's worth of memory and time next to training, not a multiple of it.
const DefaultMaxDenseNodes = 2000

// Hierarchy describes the nodes: the aggregates, in order, followed by the bottom series
// (S = [A; I]). Sums[a] lists the indices (0..Bottom-1) of the bottom series that aggregate
// a sums, without duplicates; nested levels are expressed by listing the bottom series
// directly (a depot total and the grand total both list their bottom series).
type Hierarchy struct {
	Bottom int     // number of bottom series, m
	Sums   [][]int // Sums[a] = bottom series summed by aggregate a
}

// Nodes returns the number of nodes, len(Sums) + Bottom.
func (h Hierarchy) Nodes() int { return len(h.Sums) + h.Bottom }

// node names node i for error messages.
func (h Hierarchy) node(i int) string {
	if i < len(h.Sums) {
		return fmt.Sprintf("node %d (aggregate %d)", i, i)
	}
	return fmt.Sprintf("node %d (bottom series %d)", i, i-len(h.Sums))
}

// Validate reports the first problem of h: no bottom series, an aggregate that sums nothing,
// an index out of range or listed twice. Errors name the aggregate.
func (h Hierarchy) Validate() error {
	if h.Bottom < 1 {
		return fmt.Errorf("reconcile: hierarchy has %d bottom series, needs at least 1", h.Bottom)
	}
	seen := make([]int, h.Bottom) // seen[j] = a+1 when aggregate a listed j
	for a, sum := range h.Sums {
		if len(sum) == 0 {
			return fmt.Errorf("reconcile: %s sums no bottom series", h.node(a))
		}
		for _, j := range sum {
			if j < 0 || j >= h.Bottom {
				return fmt.Errorf("reconcile: %s lists bottom series %d, out of range 0..%d", h.node(a), j, h.Bottom-1)
			}
			if seen[j] == a+1 {
				return fmt.Errorf("reconcile: %s lists bottom series %d twice", h.node(a), j)
			}
			seen[j] = a + 1
		}
	}
	return nil
}

// Options tunes Reconcile.
type Options struct {
	// NonNegative makes every reconciled forecast >= 0: the bottom series solve
	// min (ŷ − S b)' W⁻¹ (ŷ − S b) subject to b >= 0 (Wickramasuriya, Turlach & Hyndman 2020)
	// by an active-set method, and aggregates are their sums; BottomUp clips at zero.
	NonNegative bool
	// MaxDenseNodes bounds the side of any dense matrix (0 = DefaultMaxDenseNodes): MinT's W is
	// dense only when n <= MaxDenseNodes (above, MinTShrink keeps W as a diagonal plus low rank
	// and MinTSample runs as VarianceScaling), and the diagonal-weight methods solve their k × k
	// C W C' densely when k <= MaxDenseNodes, by conjugate gradient above.
	MaxDenseNodes int
}

// Result is what Reconcile returns.
type Result struct {
	// Forecasts holds the coherent forecasts, node-major like the base forecasts.
	Forecasts [][]float64
	// Lambda is the shrinkage intensity MinTShrink used, NaN for every other method.
	Lambda float64
	// Method is the method that ran: the one asked for, or its stated fallback.
	Method Method
	// Note says why a fallback ran and how the system was solved; empty for BottomUp unless
	// NonNegative clipped.
	Note string
}

// Reconcile returns coherent forecasts for base, node-major (len(base) == h.Nodes(), each row
// the same horizon, no NaN or Inf). residuals (node-major, the same length per node, NaN where a
// node has no error for that origin and period) feed VarianceScaling and the MinT methods;
// the others ignore them and accept nil.
//
// Fallbacks, stated in Result.Method and Result.Note: MinTSample runs as MinTShrink when a node
// has no more residuals than there are nodes or C W C' is not positive definite (or has a
// condition number above 1e12); MinTShrink runs as VarianceScaling when the shrunk C W C' is not
// positive definite or, above the dense node limit (where W is a diagonal plus low rank, solved
// by conjugate gradient), when the conjugate gradient does not converge; MinTSample runs as
// VarianceScaling above the dense node limit; every residual-based method runs as
// Structural when no node has 2 residuals or all residuals are zero. A node with fewer than 2
// residuals among nodes that have them is weighted as the least trusted node per bottom series
// (see newMoments), stated in Result.Note.
//
// The projection is linear and the same for every column, so sample paths (or any other
// vectors to be made coherent with the same W) may be passed as further columns of base: one
// call shares W and the factorisation. Quantiles are not: the quantile of a sum is not the sum
// of quantiles, so coherent quantiles come from reconciled paths or errors, not from
// reconciling quantile columns (common practice).
//
// Errors name the node and period at fault: a base forecast shape or value, a residual shape or
// Inf, an unknown method, a solver that did not converge.
func Reconcile(h Hierarchy, base [][]float64, m Method, residuals [][]float64, opt Options) (Result, error) {
	if err := h.Validate(); err != nil {
		return Result{}, err
	}
	if opt.MaxDenseNodes < 0 {
		return Result{}, fmt.Errorf("reconcile: MaxDenseNodes %d is negative", opt.MaxDenseNodes)
	}
	if opt.MaxDenseNodes == 0 {
		opt.MaxDenseNodes = DefaultMaxDenseNodes
	}
	horizon, err := checkBase(h, base)
	if err != nil {
		return Result{}, err
	}
	res := Result{Lambda: math.NaN(), Method: m}
	var w weight
	var mo *moments
	switch m {
	case BottomUp:
		res.Forecasts, res.Note = bottomUp(h, base, horizon, opt.NonNegative)
		return res, nil
	case OLS:
		w = olsWeight(h)
	case Structural:
		w = structuralWeight(h)
	case VarianceScaling, MinTShrink, MinTSample:
		w, res.Method, res.Lambda, res.Note, mo, err = residualWeight(h, m, residuals, opt.MaxDenseNodes)
		if err != nil {
			return Result{}, err
		}
	default:
		return Result{}, fmt.Errorf("reconcile: unknown method %q (want %s, %s, %s, %s, %s or %s)",
			m, BottomUp, OLS, Structural, VarianceScaling, MinTShrink, MinTSample)
	}
	ys := periods(base, horizon)
	for {
		p := newProblem(h, w, opt.MaxDenseNodes)
		var bottom [][]float64
		if opt.NonNegative {
			bottom, err = p.nonNegative(ys)
		} else {
			bottom, _, err = p.solve(nil, ys)
		}
		_, lowRank := w.(lowRankWeight)
		if (errors.Is(err, errNotPositiveDefinite) || (lowRank && errors.Is(err, errNoConvergence))) && (res.Method == MinTSample || res.Method == MinTShrink) {
			// A pairwise-complete covariance need not be positive semi-definite: step down
			// MinTSample -> MinTShrink -> VarianceScaling, which is positive definite.
			next := VarianceScaling
			if res.Method == MinTSample {
				next = MinTShrink
			}
			why := "is not positive definite"
			if errors.Is(err, errNoConvergence) {
				why = "did not converge"
			}
			res.Note = joinNote(res.Note, fmt.Sprintf("C W C' %s with %s: %s instead", why, res.Method, next))
			res.Method = next
			w, res.Lambda = mo.weight(next)
			continue
		}
		if err != nil {
			return Result{}, err
		}
		res.Note = joinNote(res.Note, p.describe(opt.NonNegative))
		res.Forecasts = aggregate(h, bottom)
		return res, nil
	}
}

// bottomUp returns S b with b the bottom series' base forecasts, clipped at zero when nonNeg
// (the closest non-negative bottom-up forecast), and a note saying so.
func bottomUp(h Hierarchy, base [][]float64, horizon int, nonNeg bool) ([][]float64, string) {
	k := len(h.Sums)
	bottom := make([][]float64, horizon)
	for t := range bottom {
		bottom[t] = make([]float64, h.Bottom)
		for j := range bottom[t] {
			bottom[t][j] = base[k+j][t]
			if nonNeg {
				bottom[t][j] = math.Max(0, bottom[t][j])
			}
		}
	}
	var note string
	if nonNeg {
		note = "negative bottom forecasts set to zero"
	}
	return aggregate(h, bottom), note
}

// checkBase returns the horizon of base or an error naming the node at fault.
func checkBase(h Hierarchy, base [][]float64) (int, error) {
	if len(base) != h.Nodes() {
		return 0, fmt.Errorf("reconcile: base has %d rows, the hierarchy has %d nodes (%d aggregates, %d bottom series)",
			len(base), h.Nodes(), len(h.Sums), h.Bottom)
	}
	horizon := len(base[0])
	for i, row := range base {
		if len(row) != horizon {
			return 0, fmt.Errorf("reconcile: base %s has %d periods, node 0 has %d", h.node(i), len(row), horizon)
		}
		for t, v := range row {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return 0, fmt.Errorf("reconcile: base %s period %d is %v", h.node(i), t, v)
			}
		}
	}
	return horizon, nil
}

// periods turns node-major base forecasts into one vector of n per period.
func periods(base [][]float64, horizon int) [][]float64 {
	ys := make([][]float64, horizon)
	for t := range ys {
		ys[t] = make([]float64, len(base))
		for i, row := range base {
			ys[t][i] = row[t]
		}
	}
	return ys
}

// aggregate returns S b for each period's bottom vector b, node-major.
func aggregate(h Hierarchy, bottom [][]float64) [][]float64 {
	k := len(h.Sums)
	out := make([][]float64, h.Nodes())
	for i := range out {
		out[i] = make([]float64, len(bottom))
	}
	for t, b := range bottom {
		for a, sum := range h.Sums {
			var s float64
			for _, j := range sum {
				s += b[j]
			}
			out[a][t] = s
		}
		for j, v := range b {
			out[k+j][t] = v
		}
	}
	return out
}

// MaxDeviation returns the largest relative incoherence of f (node-major):
//
//	max over aggregates a and periods t of |f_a,t − Σ_{j ∈ Sums[a]} f_j,t| / max(1, |f_a,t|)
//
// It returns +Inf when f does not have h.Nodes() rows of equal length or holds a NaN, so that
// a coherence check fails rather than passes on malformed forecasts; 0 for a hierarchy with no
// aggregates.
func MaxDeviation(h Hierarchy, f [][]float64) float64 {
	k := len(h.Sums)
	if len(f) != h.Nodes() || len(f) == 0 {
		return math.Inf(1)
	}
	horizon := len(f[0])
	for _, row := range f {
		if len(row) != horizon {
			return math.Inf(1)
		}
	}
	var worst float64
	for a, sum := range h.Sums {
		for t := 0; t < horizon; t++ {
			var s float64
			for _, j := range sum {
				if j < 0 || j >= h.Bottom {
					return math.Inf(1)
				}
				s += f[k+j][t]
			}
			d := math.Abs(f[a][t]-s) / math.Max(1, math.Abs(f[a][t]))
			if math.IsNaN(d) {
				return math.Inf(1)
			}
			worst = math.Max(worst, d)
		}
	}
	return worst
}

// joinNote joins two notes with "; ".
func joinNote(a, b string) string {
	switch {
	case a == "":
		return b
	case b == "":
		return a
	}
	return a + "; " + b
}

// errNoConvergence reports a conjugate gradient that did not reach its tolerance.
var errNoConvergence = errors.New("reconcile: conjugate gradient did not converge")

// errNotPositiveDefinite reports a failed Cholesky factorisation of C W C'.
var errNotPositiveDefinite = errors.New("reconcile: C W C' is not positive definite")
