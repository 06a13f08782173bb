package reference

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"

	"almanac.dev/almanac/trainer/learn"
)

// sklearnLinear is test/reference/sklearn/linear.json, written by linear.py with scikit-learn
// 1.2.1 (Debian python3-sklearn) on its diabetes data (Efron et al. 2004, "Least angle
// regression").
type sklearnLinear struct {
	Source   string      `json:"source"`
	X        [][]float64 `json:"X"`
	Y        []float64   `json:"y"`
	Ridge    []skFit     `json:"ridge"`
	RidgeStd []skFit     `json:"ridge_std"`
	Lasso    skLasso     `json:"lasso"`
	LassoStd skLasso     `json:"lasso_std"`
	Path     struct {
		Alphas []float64   `json:"alphas"`
		Coefs  [][]float64 `json:"coefs"`
	} `json:"path"`
}

type skFit struct {
	Alpha     float64   `json:"alpha"`
	Intercept float64   `json:"intercept"`
	Coef      []float64 `json:"coef"`
}

type skLasso struct {
	AlphaMax float64 `json:"alpha_max"`
	Fits     []skFit `json:"fits"`
}

func loadSklearnLinear(t *testing.T) (sklearnLinear, *mat.Dense) {
	t.Helper()
	b, err := os.ReadFile("sklearn/linear.json")
	if err != nil {
		t.Fatal(err)
	}
	var f sklearnLinear
	if err := json.Unmarshal(b, &f); err != nil {
		t.Fatal(err)
	}
	X := mat.NewDense(len(f.X), len(f.X[0]), nil)
	for i, row := range f.X {
		X.SetRow(i, row)
	}
	return f, X
}

// checkFit compares a fit with scikit-learn's: every coefficient and the intercept within tol
// relative to the largest absolute coefficient of the reference (so near-zero coefficients are
// judged on the fit's own scale).
func checkFit(t *testing.T, what string, got learn.Linear, want skFit, tol float64) {
	t.Helper()
	scale := 1.0
	for _, c := range want.Coef {
		scale = math.Max(scale, math.Abs(c))
	}
	for j, c := range want.Coef {
		if math.Abs(got.Coef[j]-c) > tol*scale {
			t.Errorf("%s alpha=%g: coef[%d] = %.10g, scikit-learn %.10g", what, want.Alpha, j, got.Coef[j], c)
		}
	}
	if math.Abs(got.Intercept-want.Intercept) > tol*math.Max(scale, math.Abs(want.Intercept)) {
		t.Errorf("%s alpha=%g: intercept = %.10g, scikit-learn %.10g", what, want.Alpha, got.Intercept, want.Intercept)
	}
}

// TestRidgeAgainstSklearn: learn.Ridge against sklearn.linear_model.Ridge(alpha,
// solver="cholesky") 1.2.1 at five penalties, on the diabetes columns as loaded and after
// StandardScaler (our Scaler, then Ridge). Both solve the same normal equations in closed form,
// so they must agree to rounding: tolerance 1e-8 relative.
func TestRidgeAgainstSklearn(t *testing.T) {
	f, X := loadSklearnLinear(t)
	for _, w := range f.Ridge {
		got, err := learn.Ridge(X, f.Y, w.Alpha)
		if err != nil {
			t.Fatal(err)
		}
		checkFit(t, "ridge", got, w, 1e-8)
	}
	sc := learn.FitScaler(X)
	Xs := sc.Transform(X)
	for _, w := range f.RidgeStd {
		got, err := learn.Ridge(Xs, f.Y, w.Alpha)
		if err != nil {
			t.Fatal(err)
		}
		checkFit(t, "ridge on standardised X", got, w, 1e-8)
	}
}

// TestLassoAgainstSklearn: learn.Lasso against sklearn.linear_model.Lasso(alpha, tol=1e-12)
// 1.2.1 at five fractions of alpha_max (0.5 down to 0.0005), raw and standardised diabetes
// columns. Both minimise (1/(2n))||y − b0 − Xb||² + alpha||b||₁, a strictly convex problem here
// (X has full column rank), so both converge to the same point: tolerance 1e-7 relative to the
// largest coefficient. The set of zero coefficients must match exactly.
func TestLassoAgainstSklearn(t *testing.T) {
	f, X := loadSklearnLinear(t)
	sc := learn.FitScaler(X)
	Xs := sc.Transform(X)
	for _, c := range []struct {
		name string
		X    *mat.Dense
		ref  skLasso
	}{{"lasso", X, f.Lasso}, {"lasso on standardised X", Xs, f.LassoStd}} {
		amax, err := learn.AlphaMax(c.X, f.Y)
		if err != nil {
			t.Fatal(err)
		}
		if !scalar.EqualWithinRel(amax, c.ref.AlphaMax, 1e-12) {
			t.Errorf("%s: alpha_max = %.15g, scikit-learn's grid %.15g", c.name, amax, c.ref.AlphaMax)
		}
		for _, w := range c.ref.Fits {
			got, err := learn.Lasso(c.X, f.Y, w.Alpha, learn.LassoOptions{Tol: 1e-13})
			if err != nil {
				t.Fatal(err)
			}
			checkFit(t, c.name, got, w, 1e-7)
			for j := range w.Coef {
				if (w.Coef[j] == 0) != (got.Coef[j] == 0) {
					t.Errorf("%s alpha=%g: coef[%d] zero pattern differs: ours %g, scikit-learn %g", c.name, w.Alpha, j, got.Coef[j], w.Coef[j])
				}
			}
		}
	}
}

// TestLassoPathAgainstSklearn: learn.AlphaGrid and learn.LassoPath against
// sklearn.linear_model.lasso_path(eps=1e-3, n_alphas=100, tol=1e-12) 1.2.1 on the centred
// diabetes data: the penalty grid to 1e-12 relative, the coefficients at every one of the 100
// penalties to 1e-6 relative to the largest coefficient (the smallest penalties are the
// slowest to converge, for both).
func TestLassoPathAgainstSklearn(t *testing.T) {
	f, X := loadSklearnLinear(t)
	amax, err := learn.AlphaMax(X, f.Y)
	if err != nil {
		t.Fatal(err)
	}
	grid := learn.AlphaGrid(amax, learn.DefaultPathEps, learn.DefaultPathLength)
	if len(grid) != len(f.Path.Alphas) {
		t.Fatalf("grid has %d penalties, scikit-learn %d", len(grid), len(f.Path.Alphas))
	}
	for i, a := range f.Path.Alphas {
		if !scalar.EqualWithinRel(grid[i], a, 1e-12) {
			t.Errorf("grid[%d] = %.15g, scikit-learn %.15g", i, grid[i], a)
		}
	}
	path, err := learn.LassoPath(X, f.Y, grid, learn.LassoOptions{Tol: 1e-13})
	if err != nil {
		t.Fatal(err)
	}
	for i, coef := range f.Path.Coefs {
		checkFit(t, "path", learn.Linear{Intercept: 0, Coef: path[i].Coef}, skFit{Alpha: grid[i], Coef: coef}, 1e-6)
	}
}
