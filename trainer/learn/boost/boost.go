package boost

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// Model is a fitted boosted-tree ensemble: F(x) = F_0 + Σ_m ν T_m(x).
type Model struct {
	base  float64
	cols  int
	nodes []node  // every tree's nodes; child indices are relative to the tree's first node
	roots []int32 // tree m occupies nodes[roots[m]:roots[m+1]] (the last one runs to the end)
	grown int     // rounds grown before early stopping cut the model back
}

// Fit boosts regression trees on the rows of X against y (see the package doc for the method).
// valX and valY, when valX is not nil, are validation rows for early stopping (Params.EarlyStop);
// with valX nil no rounds are stopped early.
//
// X may hold NaN (missing, routed by a learned default side); ±Inf in X, NaN or ±Inf in y, no
// rows, mismatched lengths and out-of-range Params are errors that name the row, column or
// field.
func Fit(X *mat.Dense, y []float64, valX *mat.Dense, valY []float64, p Params) (*Model, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if X == nil || X.IsEmpty() {
		return nil, errors.New("boost: no training rows")
	}
	n, cols := X.Dims()
	if err := checkTarget("training", n, y); err != nil {
		return nil, err
	}
	if valX == nil && valY != nil {
		return nil, errors.New("boost: validation targets given without validation rows")
	}
	if valX != nil {
		if valX.IsEmpty() {
			return nil, errors.New("boost: validation matrix has no rows")
		}
		vn, vc := valX.Dims()
		if vc != cols {
			return nil, fmt.Errorf("boost: validation rows have %d columns, training rows %d", vc, cols)
		}
		if err := checkTarget("validation", vn, valY); err != nil {
			return nil, err
		}
		if err := checkFinite(valX); err != nil {
			return nil, err
		}
	}
	data, err := binFeatures(X, p.Bins)
	if err != nil {
		return nil, err
	}

	buf := slices.Clone(y)
	m := &Model{base: start(p, buf), cols: cols}
	pred := make([]float64, n)
	for i := range pred {
		pred[i] = m.base
	}
	var valPred []float64
	bestLoss, bestRounds := math.Inf(1), 0
	if valX != nil {
		valPred = make([]float64, len(valY))
		for i := range valPred {
			valPred[i] = m.base
		}
		bestLoss = meanLoss(p, valY, valPred)
	}

	yScale := scale(y)
	gr := newGrower(p, data, gainFloor(p, n, yScale))
	for i := range gr.idx {
		gr.idx[i] = int32(i)
	}
	sample := n
	var rng *rand.Rand
	if p.RowFraction < 1 {
		sample = max(1, int(math.Round(p.RowFraction*float64(n))))
		rng = rand.New(rand.NewPCG(p.Seed, 0x626f6f7374)) // second word: any fixed constant
	}
	inSample := make([]bool, n)
	for round := 1; round <= p.Rounds; round++ {
		gradients(p, yScale, y, pred, gr.g, gr.h)
		if rng != nil {
			// Partial Fisher-Yates draw of sample rows without replacement, then row order for
			// locality.
			for i := 0; i < sample; i++ {
				j := i + rng.IntN(n-i)
				gr.idx[i], gr.idx[j] = gr.idx[j], gr.idx[i]
			}
			slices.Sort(gr.idx[:sample])
		}
		nodes, leaves := gr.grow(sample)
		for _, lf := range leaves {
			nd := &nodes[lf.node]
			if p.Loss != Squared {
				nd.value = refit(p, y, pred, gr.idx[lf.start:lf.end], buf)
			}
			nd.value *= p.LearningRate
		}
		// Update the training predictions: sampled rows by their leaf, the others by walking.
		for _, lf := range leaves {
			v := nodes[lf.node].value
			for _, r := range gr.idx[lf.start:lf.end] {
				pred[r] += v
			}
		}
		if sample < n {
			clear(inSample)
			for _, r := range gr.idx[:sample] {
				inSample[r] = true
			}
			for r := range n {
				if !inSample[r] {
					pred[r] += walkCodes(nodes, data.codes[r*cols:(r+1)*cols], data).value
				}
			}
		}
		m.grown = round
		m.roots = append(m.roots, int32(len(m.nodes)))
		m.nodes = append(m.nodes, nodes...)

		if valX == nil {
			continue
		}
		for i := range valPred {
			valPred[i] += walk(nodes, valX.RawRowView(i)).value
		}
		if loss := meanLoss(p, valY, valPred); loss < bestLoss-1e-12*math.Abs(bestLoss) {
			bestLoss, bestRounds = loss, round
		} else if p.EarlyStop > 0 && round-bestRounds >= p.EarlyStop {
			break
		}
	}
	if valX != nil && p.EarlyStop > 0 && bestRounds < len(m.roots) {
		if bestRounds == 0 {
			m.nodes = nil
		} else {
			m.nodes = m.nodes[:m.roots[bestRounds]]
		}
		m.roots = m.roots[:bestRounds]
	}
	m.nodes = slices.Clip(m.nodes)
	return m, nil
}

// refit returns the leaf value minimising the pinball loss over the leaf's rows: the τ-quantile
// of their residuals y - F (Friedman 2001, Algorithm 3, for τ = 1/2).
func refit(p Params, y, pred []float64, rows []int32, buf []float64) float64 {
	res := buf[:len(rows)]
	for k, r := range rows {
		res[k] = y[r] - pred[r]
	}
	return orderQuantile(res, p.level())
}

// checkTarget checks a target vector against its row count.
func checkTarget(what string, rows int, y []float64) error {
	if len(y) != rows {
		return fmt.Errorf("boost: %d %s targets for %d %s rows", len(y), what, rows, what)
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("boost: %s target at row %d is %v, want a finite value", what, i, v)
		}
	}
	return nil
}

// checkFinite refuses ±Inf in a feature matrix (NaN is a missing value).
func checkFinite(X *mat.Dense) error {
	r, _ := X.Dims()
	for i := 0; i < r; i++ {
		for j, v := range X.RawRowView(i) {
			if math.IsInf(v, 0) {
				return fmt.Errorf("boost: validation feature value at row %d, column %d is %v; only finite values and NaN (missing) are allowed", i, j, v)
			}
		}
	}
	return nil
}

// Predict returns F(row). row must hold one value per training column (NaN for missing);
// a wrong length panics.
func (m *Model) Predict(row []float64) float64 {
	if len(row) != m.cols {
		panic(fmt.Sprintf("boost: row has %d values, the model was fitted on %d columns", len(row), m.cols))
	}
	f := m.base
	for k := range m.roots {
		f += walk(m.tree(k), row).value
	}
	return f
}

// PredictInto writes F of every row of X into out, which must have one element per row;
// mismatched dimensions panic.
func (m *Model) PredictInto(X *mat.Dense, out []float64) {
	r, c := X.Dims()
	if c != m.cols || len(out) != r {
		panic(fmt.Sprintf("boost: PredictInto got %d×%d rows and %d outputs, the model was fitted on %d columns", r, c, len(out), m.cols))
	}
	// Tree by tree: one tree's nodes stay in cache while the rows stream past.
	for i := range out {
		out[i] = m.base
	}
	for k := range m.roots {
		t := m.tree(k)
		for i := range out {
			out[i] += walk(t, X.RawRowView(i)).value
		}
	}
}

// tree returns the nodes of tree k.
func (m *Model) tree(k int) []node {
	end := len(m.nodes)
	if k+1 < len(m.roots) {
		end = int(m.roots[k+1])
	}
	return m.nodes[m.roots[k]:end]
}

// Rounds returns the number of trees kept (after early stopping).
func (m *Model) Rounds() int { return len(m.roots) }

// Base returns the constant F_0 the trees are added to.
func (m *Model) Base() float64 { return m.base }

// Importance returns, per training column, the total split gain of the kept trees normalised to
// sum to 1 (Friedman 2001, section 8.1, with the gain of the second-order criterion in place of
// the squared-error improvement). With no split at all every entry is 0.
func (m *Model) Importance() []float64 {
	imp := make([]float64, m.cols)
	var total float64
	for _, nd := range m.nodes {
		if nd.feature >= 0 {
			imp[nd.feature] += nd.gain
			total += nd.gain
		}
	}
	if total > 0 {
		for j := range imp {
			imp[j] /= total
		}
	}
	return imp
}
