package learn

import (
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// Path defaults, scikit-learn's (1.2) lasso_path: 100 penalties from alpha_max down to
// 1e-3·alpha_max.
const (
	DefaultPathLength = 100
	DefaultPathEps    = 1e-3
)

// LassoOptions tunes coordinate descent. The zero value means Tol 1e-10, MaxSweeps 100000.
type LassoOptions struct {
	// Tol stops the sweeps when no coefficient moved by more than Tol·sd(y) in standardised
	// units (|Δb_j|·sqrt(G_jj)).
	Tol float64
	// MaxSweeps bounds the full passes over the coefficients per penalty.
	MaxSweeps int
	// StopAbove > 0 ends LassoPath after the first fit with more than StopAbove non-zero
	// coefficients (that fit is the last one returned): a search capped at StopAbove features
	// need not fit the dense end of the path.
	StopAbove int
}

func (o LassoOptions) withDefaults() LassoOptions {
	if o.Tol <= 0 {
		o.Tol = 1e-10
	}
	if o.MaxSweeps <= 0 {
		o.MaxSweeps = 100000
	}
	return o
}

// AlphaMax is the smallest penalty at which every lasso coefficient is 0:
//
//	alpha_max = max_j |x_cjᵀ·y_c| / n
//
// (Friedman, Hastie & Tibshirani 2010, "Regularization paths for generalized linear models via
// coordinate descent", J. Stat. Softw. 33(1), section 2.5; scikit-learn's _alpha_grid).
func AlphaMax(X mat.Matrix, y []float64) (float64, error) {
	mo, err := centredMoments(X, y)
	if err != nil {
		return 0, err
	}
	return mo.alphaMax(), nil
}

func (mo moments) alphaMax() float64 {
	a := 0.0
	for _, c := range mo.cov {
		a = math.Max(a, math.Abs(c))
	}
	return a
}

// AlphaGrid returns k penalties log-spaced from alphaMax down to eps·alphaMax, largest first
// (np.logspace(log10(eps·alpha_max), log10(alpha_max), k)[::-1], as scikit-learn 1.2 does).
// It panics when k < 1 or eps is outside (0,1).
func AlphaGrid(alphaMax, eps float64, k int) []float64 {
	if k < 1 || !(eps > 0 && eps < 1) {
		panic("learn: AlphaGrid needs k >= 1 and eps in (0,1)")
	}
	out := make([]float64, k)
	if k == 1 {
		out[0] = alphaMax
		return out
	}
	lo, hi := math.Log10(eps*alphaMax), math.Log10(alphaMax)
	for i := range out {
		out[k-1-i] = math.Pow(10, lo+(hi-lo)*float64(i)/float64(k-1))
	}
	return out
}

// Lasso fits the lasso (Tibshirani 1996, "Regression shrinkage and selection via the lasso",
// JRSS B 58) with an unpenalised intercept, minimising scikit-learn's objective
//
//	(1/(2n))·||y − b0 − X·b||² + alpha·||b||₁
//
// by cyclic coordinate descent with covariance updates (Friedman, Hastie & Tibshirani 2010,
// sections 2.1-2.2): with G = Xcᵀ·Xc/n and c = Xcᵀ·yc/n,
//
//	b_j ← S(c_j − Σ_{k≠j} G_jk·b_k, alpha) / G_jj,   S(z, a) = sign(z)·max(|z| − a, 0)
//
// A column with G_jj = 0 keeps b_j = 0. alpha must be >= 0 (panics otherwise).
func Lasso(X mat.Matrix, y []float64, alpha float64, opt LassoOptions) (Linear, error) {
	path, err := LassoPath(X, y, []float64{alpha}, opt)
	if err != nil {
		return Linear{}, err
	}
	return path[0], nil
}

// LassoPath fits Lasso at each penalty of alphas in the given order, each fit warm-started from
// the previous one (pass them largest first, as AlphaGrid does; Friedman et al. 2010, section
// 2.5). out[i] is the fit at alphas[i].
func LassoPath(X mat.Matrix, y []float64, alphas []float64, opt LassoOptions) ([]Linear, error) {
	mo, err := centredMoments(X, y)
	if err != nil {
		return nil, err
	}
	return mo.lassoPath(alphas, opt, opt.StopAbove), nil
}

// lassoPath runs the path; with stopAt > 0 it stops after the first fit with more than stopAt
// non-zero coefficients (that fit is included). Each penalty alternates a full sweep with
// sweeps over the active set (the non-zero coefficients) until those converge, and stops when
// a full sweep moves nothing by more than the tolerance (Friedman, Hastie & Tibshirani 2010,
// section 2.6, active-set convergence).
func (mo moments) lassoPath(alphas []float64, opt LassoOptions, stopAt int) []Linear {
	opt = opt.withDefaults()
	p := len(mo.cov)
	g := make([]float64, p*p) // G row-major, for speed
	for i := 0; i < p; i++ {
		for j := 0; j < p; j++ {
			g[i*p+j] = mo.gram.At(i, j)
		}
	}
	b := make([]float64, p)
	r := slices.Clone(mo.cov) // r = c − G·b
	sy := 0.0
	for j := range mo.cov {
		if d := g[j*p+j]; d > 0 {
			// sd(y) bound from the largest correlation: keeps Tol relative without another pass.
			sy = math.Max(sy, math.Abs(mo.cov[j])/math.Sqrt(d))
		}
	}
	if sy == 0 {
		sy = 1
	}
	tol := opt.Tol * sy
	// sweep updates the coordinates j (all, or only the non-zero ones) once and returns the
	// largest move in standardised units.
	sweep := func(alpha float64, activeOnly bool) float64 {
		maxMove := 0.0
		for j := 0; j < p; j++ {
			d := g[j*p+j]
			if d <= 0 || (activeOnly && b[j] == 0) {
				continue
			}
			nb := soft(r[j]+d*b[j], alpha) / d
			delta := nb - b[j]
			if delta == 0 {
				continue
			}
			b[j] = nb
			col := g[j*p : (j+1)*p] // G is symmetric: row j is column j
			for k := range r {
				r[k] -= col[k] * delta
			}
			maxMove = math.Max(maxMove, math.Abs(delta)*math.Sqrt(d))
		}
		return maxMove
	}
	out := make([]Linear, 0, len(alphas))
	for _, alpha := range alphas {
		if alpha < 0 || math.IsNaN(alpha) {
			panic("learn: lasso penalty must be >= 0")
		}
		for n := 0; n < opt.MaxSweeps; {
			n++
			if sweep(alpha, false) <= tol {
				break
			}
			for n < opt.MaxSweeps {
				n++
				if sweep(alpha, true) <= tol {
					break
				}
			}
		}
		fit := mo.intercept(slices.Clone(b))
		out = append(out, fit)
		if stopAt > 0 && fit.NonZero() > stopAt {
			break
		}
	}
	return out
}

// soft is the soft-thresholding operator S(z, a) = sign(z)·max(|z| − a, 0).
func soft(z, a float64) float64 {
	switch {
	case z > a:
		return z - a
	case z < -a:
		return z + a
	}
	return 0
}
