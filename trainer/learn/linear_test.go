package learn

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// randomProblem is y = 3 + 2·x0 − x2 + noise with 5 columns on different scales.
func randomProblem(n int) (*mat.Dense, []float64) {
	rng := rand.New(rand.NewPCG(1, 2))
	X := mat.NewDense(n, 5, nil)
	y := make([]float64, n)
	for i := 0; i < n; i++ {
		for j := 0; j < 5; j++ {
			X.Set(i, j, rng.NormFloat64()*float64(j+1)*10)
		}
		y[i] = 3 + 2*X.At(i, 0) - X.At(i, 2) + rng.NormFloat64()
	}
	return X, y
}

// At alpha >= alpha_max every lasso coefficient is 0 and the intercept is the mean of y
// (Friedman, Hastie & Tibshirani 2010, section 2.5); just below it exactly one enters.
func TestLassoAlphaMax(t *testing.T) {
	X, y := randomProblem(200)
	amax, err := AlphaMax(X, y)
	if err != nil {
		t.Fatal(err)
	}
	at, _ := Lasso(X, y, amax, LassoOptions{})
	mean := 0.0
	for _, v := range y {
		mean += v / float64(len(y))
	}
	if at.NonZero() != 0 || math.Abs(at.Intercept-mean) > 1e-9 {
		t.Errorf("at alpha_max: %d non-zero, intercept %v (mean %v)", at.NonZero(), at.Intercept, mean)
	}
	below, _ := Lasso(X, y, amax*0.99, LassoOptions{})
	if below.NonZero() != 1 {
		t.Errorf("just below alpha_max: %d non-zero coefficients, want 1", below.NonZero())
	}
}

// Ridge on standardised columns, mapped back with Unscale, predicts exactly what the
// standardised fit predicts on standardised rows (algebra of the affine map).
func TestScalerUnscale(t *testing.T) {
	X, y := randomProblem(100)
	sc := FitScaler(X)
	Xs := sc.Transform(X)
	fs, err := Ridge(Xs, y, 5)
	if err != nil {
		t.Fatal(err)
	}
	fo := sc.Unscale(fs)
	for i := 0; i < 100; i++ {
		a, b := fs.Predict(Xs.RawRowView(i)), fo.Predict(X.RawRowView(i))
		if math.Abs(a-b) > 1e-9*math.Max(1, math.Abs(a)) {
			t.Fatalf("row %d: standardised %v, unscaled %v", i, a, b)
		}
	}
	// A tiny penalty recovers the generating coefficients (2, 0, −1, 0, 0) within noise.
	small, _ := Ridge(X, y, 1e-6)
	want := []float64{2, 0, -1, 0, 0}
	for j, w := range want {
		if math.Abs(small.Coef[j]-w) > 0.01 {
			t.Errorf("coef[%d] = %v, want about %v", j, small.Coef[j], w)
		}
	}
}

// A constant column (zero variance) keeps Scale 1, standardises to 0 and gets coefficient 0.
func TestConstantColumn(t *testing.T) {
	X, y := randomProblem(50)
	for i := 0; i < 50; i++ {
		X.Set(i, 4, 7)
	}
	sc := FitScaler(X)
	if sc.Scale[4] != 1 || sc.Mean[4] != 7 {
		t.Fatalf("constant column: mean %v scale %v", sc.Mean[4], sc.Scale[4])
	}
	l, err := Lasso(sc.Transform(X), y, 0.1, LassoOptions{})
	if err != nil || l.Coef[4] != 0 {
		t.Fatalf("constant column coefficient %v, err %v", l.Coef[4], err)
	}
	X.Set(3, 1, math.NaN())
	if _, err := Ridge(X, y, 1); err != ErrBadData {
		t.Fatalf("NaN cell: err %v, want ErrBadData", err)
	}
}
