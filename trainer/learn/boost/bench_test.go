package boost

import (
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
)

// benchData draws n rows of Friedman #1 with c inputs (the first five matter).
func benchData(n, c int) (*mat.Dense, []float64) {
	return friedman1(rand.New(rand.NewPCG(10000, 30)), n, c)
}

// leastSquaresTime is the reference: the fastest of 21 QR least-squares solves of the same rows
// with an intercept (gonum mat.Dense.Solve); the minimum is the figure least moved by other
// processes sharing the cores.
func leastSquaresTime(b *testing.B, X *mat.Dense, y []float64) time.Duration {
	n, c := X.Dims()
	A := mat.NewDense(n, c+1, nil)
	for i := range n {
		A.Set(i, 0, 1)
		copy(A.RawRowView(i)[1:], X.RawRowView(i))
	}
	Y := mat.NewDense(n, 1, slices.Clone(y))
	var times []time.Duration
	for range 21 {
		start := time.Now()
		var beta mat.Dense
		if err := beta.Solve(A, Y); err != nil {
			b.Fatal(err)
		}
		times = append(times, time.Since(start))
	}
	return slices.Min(times)
}

// BenchmarkFit fits boosted trees (255 bins, no early stopping) and reports the time per fit
// as a multiple of one least-squares solve of the same rows measured in the same run (x-lstsq),
// and per round (x-lstsq/round):
//   - 10k-x30: 10,000 rows × 30 features, 100 rounds of depth-6 trees, 20 rows per leaf, with
//     every row and with half the rows per round;
//   - series-156x20: one weekly series' design (three years, 20 features), 200 rounds of
//     depth-3 trees, 5 rows per leaf, the size the zoo fits per series and backtest origin,
//     with 255 bins (every distinct value its own bin) and with 19 (rows/8, as the zoo's
//     regression members choose).
func BenchmarkFit(b *testing.B) {
	big := DefaultParams()
	big.Rounds, big.MaxDepth, big.MinLeaf, big.EarlyStop = 100, 6, 20, 0
	half := big
	half.RowFraction = 0.5
	small := DefaultParams()
	small.Rounds, small.MaxDepth, small.MinLeaf, small.EarlyStop = 200, 3, 5, 0
	coarse := small
	coarse.Bins = 19
	for _, c := range []struct {
		name       string
		rows, cols int
		p          Params
	}{
		{"10k-x30/all-rows", 10000, 30, big},
		{"10k-x30/half-rows", 10000, 30, half},
		{"series-156x20/bins-255", 156, 20, small},
		{"series-156x20/bins-19", 156, 20, coarse},
	} {
		b.Run(c.name, func(b *testing.B) {
			X, y := benchData(c.rows, c.cols)
			ref := leastSquaresTime(b, X, y)
			b.ReportAllocs()
			fits := 0
			for b.Loop() {
				if _, err := Fit(X, y, nil, nil, c.p); err != nil {
					b.Fatal(err)
				}
				fits++
			}
			per := float64(b.Elapsed()) / float64(fits)
			b.ReportMetric(per/float64(ref), "x-lstsq")
			b.ReportMetric(per/float64(ref)/float64(c.p.Rounds), "x-lstsq/round")
		})
	}
}

// BenchmarkPredict times PredictInto for the 10,000 rows of a 100-round depth-6 model, against
// the same least-squares reference.
func BenchmarkPredict(b *testing.B) {
	X, y := benchData(10000, 30)
	ref := leastSquaresTime(b, X, y)
	p := DefaultParams()
	p.Rounds, p.MaxDepth, p.MinLeaf, p.EarlyStop = 100, 6, 20, 0
	m, err := Fit(X, y, nil, nil, p)
	if err != nil {
		b.Fatal(err)
	}
	out := make([]float64, 10000)
	b.ReportAllocs()
	calls := 0
	for b.Loop() {
		m.PredictInto(X, out)
		calls++
	}
	b.ReportMetric(float64(b.Elapsed())/float64(calls)/float64(ref), "x-lstsq")
}
