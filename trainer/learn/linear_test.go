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

// On an orthogonal design with XᵀX = n·I the solutions have closed forms: the lasso
// soft-thresholds the least-squares weights, b_j = S(x_jᵀy/n, alpha) (Tibshirani 1996, section
// 2.2, orthonormal case), and ridge shrinks them, b_j = x_jᵀy/(n + alpha) (Hoerl & Kennard 1970,
// canonical form). The columns here are centred ±1 contrasts, so the intercept is the mean.
func TestOrthogonalClosedForms(t *testing.T) {
	X := mat.NewDense(4, 3, []float64{
		1, 1, 1,
		1, -1, -1,
		-1, 1, -1,
		-1, -1, 1,
	})
	y := []float64{10, 4, 1, 3}
	// x_jᵀy/n: (10+4−1−3)/4 = 2.5, (10−4+1−3)/4 = 1, (10−4−1+3)/4 = 2; mean 4.5.
	ols := []float64{2.5, 1, 2}
	for _, alpha := range []float64{0.1, 0.5, 1.2, 3} {
		l, err := Lasso(X, y, alpha, LassoOptions{Tol: 1e-14})
		if err != nil {
			t.Fatal(err)
		}
		r, err := Ridge(X, y, alpha)
		if err != nil {
			t.Fatal(err)
		}
		for j, b := range ols {
			if want := math.Copysign(math.Max(math.Abs(b)-alpha, 0), b); math.Abs(l.Coef[j]-want) > 1e-12 {
				t.Errorf("lasso alpha %v coef[%d] = %v, want %v", alpha, j, l.Coef[j], want)
			}
			if want := 4 * b / (4 + alpha); math.Abs(r.Coef[j]-want) > 1e-12 {
				t.Errorf("ridge alpha %v coef[%d] = %v, want %v", alpha, j, r.Coef[j], want)
			}
		}
		if math.Abs(l.Intercept-4.5) > 1e-12 || math.Abs(r.Intercept-4.5) > 1e-12 {
			t.Errorf("alpha %v: intercepts %v %v, want 4.5", alpha, l.Intercept, r.Intercept)
		}
	}
}
