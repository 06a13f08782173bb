package features

import (
	"math"
	"slices"
	"sort"

	"gonum.org/v1/gonum/mat"

	"almanac.dev/almanac/trainer/learn"
)

// Row roles in a Split.
const (
	RowTrain    int8 = 0
	RowValidate int8 = 1
	RowSkip     int8 = -1
)

// Split assigns each row of a design matrix a role for the penalty backtest: fit on the
// RowTrain rows, score on the RowValidate rows, leave RowSkip rows out of both.
type Split []int8

// PathLength and PathEps set the lasso path the embedded step searches (fewer penalties than
// learn.DefaultPathLength: the choice is by a noisy holdout, a finer grid buys nothing).
const (
	PathLength = 20
	PathEps    = 1e-3
)

// TimeSplit is the holdout for rows of one series in time order, for a step-ahead model: the
// last quarter of the rows (at least 2) validate, the step−1 rows before them are skipped so
// that no training target lies at or after a validation origin, the rest train. It returns nil
// when fewer than 4 training rows would remain.
func TimeSplit(rows, step int) Split {
	v := max(2, rows/4)
	gap := step - 1
	if rows-v-gap < 4 {
		return nil
	}
	s := make(Split, rows)
	for i := rows - v - gap; i < rows; i++ {
		s[i] = RowSkip
	}
	for i := rows - v; i < rows; i++ {
		s[i] = RowValidate
	}
	return s
}

// Choice is the outcome of feature selection on one design matrix.
type Choice struct {
	// Keep lists the kept columns of X, ascending.
	Keep []int
	// Alpha is the lasso penalty the backtest chose, on standardised columns (NaN when the
	// embedded step did not run).
	Alpha float64
}

// Choose narrows the columns of X against the target y in two steps:
//
//  1. Filter: columns are ranked by |Pearson correlation| with y, or by their mutual
//     information with y (plug-in estimate on equal-frequency bins, MutualInformation), and
//     the best FilterKeep pass (0: all). Columns constant over the rows never pass.
//  2. Embedded (sel.Embedded == "lasso", or forceLasso): on the standardised surviving
//     columns, the lasso path over PathLength penalties from alpha_max down to
//     PathEps·alpha_max (Friedman, Hastie & Tibshirani 2010) is fitted on the split's training
//     rows and scored by mean squared error on its validation rows, each fit cut to its
//     MaxFeatures largest standardised weights; the lowest error wins (ties to the larger
//     penalty). The path is then fitted on all rows down to the chosen penalty, and the columns
//     with a non-zero weight there are kept (the MaxFeatures largest when there are more).
//
// Without the embedded step MaxFeatures keeps the best-ranked columns (ranked by correlation
// when the filter is "none"). With split == nil (too few rows for a holdout) the embedded step
// is skipped. The filter sees every row, validation rows included, so the inner choice of the
// penalty is slightly optimistic; the outer rolling-origin backtest, which refits all of this
// on each origin's history only, is not.
func Choose(X *mat.Dense, y []float64, split Split, sel Selection, forceLasso bool) (Choice, error) {
	ch := Choice{Alpha: math.NaN()}
	if X == nil {
		return ch, nil
	}
	_, p := X.Dims()
	lasso := forceLasso || sel.Embedded == EmbeddedLasso
	filter := sel.Filter
	if filter == "" {
		filter = FilterNone
	}
	if filter == FilterNone && !lasso && sel.MaxFeatures == 0 {
		ch.Keep = make([]int, p)
		for j := range ch.Keep {
			ch.Keep[j] = j
		}
		return ch, nil
	}
	rank := filter
	if rank == FilterNone {
		rank = FilterCorrelation
	}
	scores := make([]float64, p)
	col := make([]float64, len(y))
	var cand []int
	for j := 0; j < p; j++ {
		mat.Col(col, j, X)
		if slices.Min(col) == slices.Max(col) {
			continue
		}
		if rank == FilterMutualInformation {
			scores[j] = MutualInformation(col, y)
		} else {
			scores[j] = math.Abs(correlation(col, y))
		}
		if !math.IsNaN(scores[j]) {
			cand = append(cand, j)
		}
	}
	sort.SliceStable(cand, func(a, b int) bool { return scores[cand[a]] > scores[cand[b]] })
	if filter != FilterNone && sel.FilterKeep > 0 && len(cand) > sel.FilterKeep {
		cand = cand[:sel.FilterKeep]
	}
	if !lasso || split == nil || len(cand) == 0 {
		if sel.MaxFeatures > 0 && len(cand) > sel.MaxFeatures {
			cand = cand[:sel.MaxFeatures]
		}
		slices.Sort(cand)
		ch.Keep = cand
		return ch, nil
	}
	slices.Sort(cand)
	keep, alpha, err := lassoChoose(X, y, cand, split, sel.MaxFeatures)
	if err != nil {
		return ch, err
	}
	ch.Keep, ch.Alpha = keep, alpha
	return ch, nil
}

// lassoChoose runs the embedded step on the columns cand.
func lassoChoose(X *mat.Dense, y []float64, cand []int, split Split, maxFeatures int) ([]int, float64, error) {
	sub := Columns(X, cand)
	trRows, vaRows := RowsWith(split, RowTrain), RowsWith(split, RowValidate)
	trX, trY := Rows(sub, y, trRows)
	sc := learn.FitScaler(trX)
	trS := sc.Transform(trX)
	amax, err := learn.AlphaMax(trS, trY)
	if err != nil {
		return nil, 0, err
	}
	if amax == 0 { // no column correlates with the target on the training rows
		return nil, math.NaN(), nil
	}
	grid := learn.AlphaGrid(amax, PathEps, PathLength)
	opt := pathOptions
	if maxFeatures > 0 {
		opt.StopAbove = 2 * maxFeatures // past that, truncated fits only get worse
	}
	path, err := learn.LassoPath(trS, trY, grid, opt)
	if err != nil {
		return nil, 0, err
	}
	vaX, vaY := Rows(sub, y, vaRows)
	vaS := sc.Transform(vaX)
	best, bestErr := 0, math.Inf(1)
	for i, fit := range path {
		if e := strongest(fit, maxFeatures).SquaredError(vaS, vaY); e < bestErr {
			best, bestErr = i, e
		}
	}
	// Refit on all rows down to the chosen penalty (relative to this data's own alpha_max).
	all := learn.FitScaler(sub)
	allS := all.Transform(sub)
	amaxAll, err := learn.AlphaMax(allS, y)
	if err != nil {
		return nil, 0, err
	}
	if amaxAll == 0 {
		return nil, math.NaN(), nil
	}
	gridAll := learn.AlphaGrid(amaxAll, PathEps, PathLength)[:best+1]
	pathAll, err := learn.LassoPath(allS, y, gridAll, opt)
	if err != nil {
		return nil, 0, err
	}
	final := strongest(pathAll[len(pathAll)-1], maxFeatures)
	var keep []int
	for k, b := range final.Coef {
		if b != 0 {
			keep = append(keep, cand[k])
		}
	}
	return keep, gridAll[len(gridAll)-1], nil
}

// strongest keeps the k largest weights of a fit on standardised columns and zeroes the rest
// (k <= 0: all). The intercept stays: on columns standardised with the training rows' means it
// is the training mean of y whatever the weights.
func strongest(l learn.Linear, k int) learn.Linear {
	if k <= 0 || l.NonZero() <= k {
		return l
	}
	idx := make([]int, len(l.Coef))
	for j := range idx {
		idx[j] = j
	}
	sort.SliceStable(idx, func(a, b int) bool { return math.Abs(l.Coef[idx[a]]) > math.Abs(l.Coef[idx[b]]) })
	out := learn.Linear{Intercept: l.Intercept, Coef: make([]float64, len(l.Coef))}
	for _, j := range idx[:k] {
		out.Coef[j] = l.Coef[j]
	}
	return out
}

// RowsWith lists the rows of s with the given role, ascending.
func RowsWith(s Split, role int8) []int {
	var out []int
	for i, r := range s {
		if r == role {
			out = append(out, i)
		}
	}
	return out
}

// Columns returns the columns cols of X as a new matrix.
func Columns(X *mat.Dense, cols []int) *mat.Dense {
	r, _ := X.Dims()
	out := mat.NewDense(r, len(cols), nil)
	for i := 0; i < r; i++ {
		src, dst := X.RawRowView(i), out.RawRowView(i)
		for k, j := range cols {
			dst[k] = src[j]
		}
	}
	return out
}

// Rows returns the rows rows of X and y as a new matrix and slice.
func Rows(X *mat.Dense, y []float64, rows []int) (*mat.Dense, []float64) {
	_, c := X.Dims()
	out := mat.NewDense(len(rows), c, nil)
	ys := make([]float64, len(rows))
	for k, i := range rows {
		copy(out.RawRowView(k), X.RawRowView(i))
		ys[k] = y[i]
	}
	return out, ys
}

func correlation(x, y []float64) float64 {
	n := float64(len(x))
	mx, my := 0.0, 0.0
	for i := range x {
		mx += x[i]
		my += y[i]
	}
	mx /= n
	my /= n
	sxy, sxx, syy := 0.0, 0.0, 0.0
	for i := range x {
		dx, dy := x[i]-mx, y[i]-my
		sxy += dx * dy
		sxx += dx * dx
		syy += dy * dy
	}
	if sxx == 0 || syy == 0 {
		return math.NaN()
	}
	return sxy / math.Sqrt(sxx*syy)
}

// MutualInformation estimates I(X;Y) in nats by the plug-in formula
//
//	I = Σ_a Σ_b p(a,b)·log(p(a,b) / (p(a)·p(b)))
//
// (Cover & Thomas 2006, Elements of Information Theory, eq. 2.28, from memory) on a
// contingency table: each variable with at most B distinct values is binned by value, others
// into B equal-frequency bins by rank, B = max(2, min(10, floor(sqrt(n/5)))) (common practice;
// the plug-in estimate is biased upward with many bins, so few are used).
func MutualInformation(x, y []float64) float64 {
	n := len(x)
	if n != len(y) {
		panic("features: MutualInformation needs equal lengths")
	}
	b := max(2, min(10, int(math.Sqrt(float64(n)/5))))
	bx, nx := bins(x, b)
	by, ny := bins(y, b)
	joint := make([]float64, nx*ny)
	px := make([]float64, nx)
	py := make([]float64, ny)
	for i := range x {
		joint[bx[i]*ny+by[i]]++
		px[bx[i]]++
		py[by[i]]++
	}
	mi := 0.0
	for a := 0; a < nx; a++ {
		for c := 0; c < ny; c++ {
			pj := joint[a*ny+c] / float64(n)
			if pj > 0 {
				mi += pj * math.Log(pj/((px[a]/float64(n))*(py[c]/float64(n))))
			}
		}
	}
	return mi
}

// bins returns each value's bin and the number of bins.
func bins(x []float64, b int) ([]int, int) {
	distinct := slices.Clone(x)
	slices.Sort(distinct)
	distinct = slices.Compact(distinct)
	out := make([]int, len(x))
	if len(distinct) <= b {
		for i, v := range x {
			out[i], _ = slices.BinarySearch(distinct, v)
		}
		return out, len(distinct)
	}
	order := make([]int, len(x))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, c int) bool { return x[order[a]] < x[order[c]] })
	for r, i := range order {
		out[i] = r * b / len(x)
	}
	// Ties must share a bin: give every copy of a value the bin of its first copy.
	for k := 1; k < len(order); k++ {
		if x[order[k]] == x[order[k-1]] {
			out[order[k]] = out[order[k-1]]
		}
	}
	return out, b
}

// pathOptions stop the selection path's coordinate descent early: the path only has to tell
// which columns enter at which penalty, not the last digits of their weights (the learner
// refits the kept columns).
var pathOptions = learn.LassoOptions{Tol: 1e-3, MaxSweeps: 1000}
