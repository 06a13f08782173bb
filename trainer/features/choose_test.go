package features

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// sparseProblem: y = 4·x0 − 3·x3 + noise, 12 columns, the rest noise.
func sparseProblem(n int) (*mat.Dense, []float64) {
	rng := rand.New(rand.NewPCG(3, 4))
	X := mat.NewDense(n, 12, nil)
	y := make([]float64, n)
	for i := 0; i < n; i++ {
		for j := 0; j < 12; j++ {
			X.Set(i, j, rng.NormFloat64())
		}
		y[i] = 4*X.At(i, 0) - 3*X.At(i, 3) + 0.5*rng.NormFloat64()
	}
	return X, y
}

// The lasso step on a sparse problem with a known answer keeps the two true columns; the cap
// keeps the stronger one; the correlation filter with FilterKeep 2 keeps the same two.
func TestChooseSparse(t *testing.T) {
	X, y := sparseProblem(200)
	split := TimeSplit(200, 1)
	ch, err := Choose(X, y, split, Selection{Embedded: EmbeddedLasso}, false)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Contains(ch.Keep, 0) || !slices.Contains(ch.Keep, 3) || len(ch.Keep) > 6 || math.IsNaN(ch.Alpha) {
		t.Errorf("lasso kept %v (alpha %v), want 0 and 3 among few", ch.Keep, ch.Alpha)
	}
	ch, _ = Choose(X, y, split, Selection{Embedded: EmbeddedLasso, MaxFeatures: 1}, false)
	if !slices.Equal(ch.Keep, []int{0}) {
		t.Errorf("lasso capped at 1 kept %v, want [0]", ch.Keep)
	}
	ch, _ = Choose(X, y, nil, Selection{Filter: FilterCorrelation, FilterKeep: 2}, false)
	if !slices.Equal(ch.Keep, []int{0, 3}) {
		t.Errorf("filter kept %v, want [0 3]", ch.Keep)
	}
}

// Mutual information: two identical fair coins share log 2 nats (Cover & Thomas 2006, the
// entropy of a fair coin, from memory); y = x² has zero correlation with a symmetric x but
// high mutual information, so the MI filter ranks x first where correlation would not.
func TestMutualInformation(t *testing.T) {
	coin := make([]float64, 400)
	for i := range coin {
		coin[i] = float64(i % 2)
	}
	if got := MutualInformation(coin, coin); math.Abs(got-math.Ln2) > 1e-12 {
		t.Errorf("I(coin; coin) = %v, want ln 2", got)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	n := 500
	X := mat.NewDense(n, 3, nil)
	y := make([]float64, n)
	for i := 0; i < n; i++ {
		x := rng.Float64()*2 - 1
		X.Set(i, 0, rng.NormFloat64())
		X.Set(i, 1, x)
		X.Set(i, 2, rng.NormFloat64())
		y[i] = x * x
	}
	ch, _ := Choose(X, y, nil, Selection{Filter: FilterMutualInformation, FilterKeep: 1}, false)
	if !slices.Equal(ch.Keep, []int{1}) {
		t.Errorf("MI filter kept %v, want [1]", ch.Keep)
	}
	if r := math.Abs(correlation(mat.Col(nil, 1, X), y)); r > 0.15 {
		t.Errorf("|corr(x, x²)| = %v; the case no longer separates the filters", r)
	}
}

// TimeSplit leaves step−1 rows out between training and validation rows.
func TestTimeSplit(t *testing.T) {
	s := TimeSplit(20, 3)
	want := Split{0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, -1, -1, 1, 1, 1, 1, 1}
	if !slices.Equal(s, want) {
		t.Errorf("TimeSplit(20, 3) = %v", s)
	}
	if TimeSplit(6, 2) != nil {
		t.Error("TimeSplit(6, 2) should be nil (too few training rows)")
	}
}
