package boost

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// binned is a feature matrix coded once into histogram bins, row-major, one byte per cell.
// For feature f with k = len(cuts[f]) cuts, code c <= k covers (cuts[f][c-1], cuts[f][c]] and
// code k+1 is NaN; a histogram holds k+2 cells for f, starting at offset[f].
type binned struct {
	rows, cols int
	codes      []uint8     // rows*cols, row i at codes[i*cols:(i+1)*cols]
	cuts       [][]float64 // per feature, strictly increasing cut points
	offset     []int       // per feature, its first histogram cell; offset[cols] is the total
}

// missing returns the code of NaN for feature f.
func (b *binned) missing(f int) uint8 { return uint8(len(b.cuts[f]) + 1) }

// binFeatures cuts every column of X at quantiles into at most bins bins and codes X.
// It refuses ±Inf, naming the row and column.
func binFeatures(X *mat.Dense, bins int) (*binned, error) {
	r, c := X.Dims()
	b := &binned{rows: r, cols: c, codes: make([]uint8, r*c), cuts: make([][]float64, c), offset: make([]int, c+1)}
	col := make([]float64, 0, r)
	var q quantiler
	for j := 0; j < c; j++ {
		col = col[:0]
		for i := 0; i < r; i++ {
			v := X.At(i, j)
			if math.IsInf(v, 0) {
				return nil, fmt.Errorf("boost: feature value at row %d, column %d is %v; only finite values and NaN (missing) are allowed", i, j, v)
			}
			if !math.IsNaN(v) {
				col = append(col, v)
			}
		}
		b.cuts[j] = q.cuts(col, bins)
		b.offset[j+1] = b.offset[j] + len(b.cuts[j]) + 2
	}
	for i := 0; i < r; i++ {
		row := X.RawRowView(i)
		dst := b.codes[i*c : (i+1)*c]
		for j, v := range row {
			dst[j] = b.code(j, v)
		}
	}
	return b, nil
}

// code returns the bin code of value v of feature j: the number of cuts below v, or the missing
// code for NaN.
func (b *binned) code(j int, v float64) uint8 {
	if math.IsNaN(v) {
		return b.missing(j)
	}
	k, _ := slices.BinarySearch(b.cuts[j], v) // first cut >= v
	return uint8(k)
}

// quantileCuts returns at most bins-1 strictly increasing cut points for the finite values vals
// (reordered in place). With at most bins distinct values every value gets its own bin; otherwise
// distinct values are grouped so that each bin holds about len(vals)/bins values, a heavy value
// keeping a bin to itself (equal-frequency binning at quantiles, as in Ke et al. 2017). A cut lies halfway between
// the largest value of its bin and the smallest of the next, as in CART (Breiman et al. 1984).
func quantileCuts(vals []float64, bins int) []float64 {
	var q quantiler
	return q.cuts(vals, bins)
}

// quantiler keeps quantileCuts' buffers from one feature to the next.
type quantiler struct {
	distinct []float64 // distinct[k] is the k-th distinct value
	cum      []int     // cum[k] is the number of values <= distinct[k]
}

func (q *quantiler) cuts(vals []float64, bins int) []float64 {
	if len(vals) == 0 {
		return nil
	}
	slices.Sort(vals)
	distinct, cum := q.distinct[:0], q.cum[:0]
	defer func() { q.distinct, q.cum = distinct, cum }()
	for i, v := range vals {
		if i == 0 || v != vals[i-1] {
			distinct = append(distinct, v)
			cum = append(cum, 0)
		}
		cum[len(cum)-1] = i + 1
	}
	n := len(vals)
	var cuts []float64
	if len(distinct) <= bins {
		for k := 0; k+1 < len(distinct); k++ {
			cuts = append(cuts, between(distinct[k], distinct[k+1]))
		}
		return cuts
	}
	// Greedy equal-frequency fill: a bin closes once it holds its share of the values not yet
	// binned, (values left)/(bins left); a value whose count alone reaches that share closes
	// the bin before it, so it gets a bin of its own.
	done := 0 // values in closed bins
	share := func() float64 { return float64(n-done) / float64(bins-len(cuts)) }
	for k := 0; k+1 < len(distinct) && len(cuts) < bins-1; k++ {
		prev := 0
		if k > 0 {
			prev = cum[k-1]
		}
		if prev > done && float64(cum[k]-prev) >= share() {
			cuts = append(cuts, between(distinct[k-1], distinct[k]))
			done = prev
			if len(cuts) == bins-1 {
				break
			}
		}
		if float64(cum[k]-done) >= share() {
			cuts = append(cuts, between(distinct[k], distinct[k+1]))
			done = cum[k]
		}
	}
	return cuts
}

// between returns a cut c with a <= c < b for a < b, halfway where the floats allow.
func between(a, b float64) float64 {
	c := a/2 + b/2
	if c >= b || c < a {
		return a
	}
	return c
}
