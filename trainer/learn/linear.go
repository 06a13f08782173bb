// Package learn holds the linear learners of the regression members: ridge regression in closed
// form and the lasso by cyclic coordinate descent along a penalty path, with the
// standardisation both need. Objectives are scikit-learn's, so coefficients are comparable.
package learn

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Linear is a fitted linear predictor ŷ = Intercept + Σ_j Coef[j]·x_j.
type Linear struct {
	Intercept float64
	Coef      []float64
}

// Predict returns Intercept + Coef·row. It panics when row and Coef differ in length.
func (l Linear) Predict(row []float64) float64 {
	if len(row) != len(l.Coef) {
		panic("learn: Predict row length differs from the coefficients")
	}
	s := l.Intercept
	for j, b := range l.Coef {
		s += b * row[j]
	}
	return s
}

// NonZero counts the coefficients that are not exactly 0.
func (l Linear) NonZero() int {
	k := 0
	for _, b := range l.Coef {
		if b != 0 {
			k++
		}
	}
	return k
}

// ErrBadData is returned for non-finite training data.
var ErrBadData = errors.New("learn: non-finite value in the training data")

// Scaler holds per-column means and scales taken from training rows only, as scikit-learn's
// StandardScaler (1.2) does: Scale is the population standard deviation (divisor n), and a
// column with zero variance keeps Scale 1 so that it standardises to 0.
type Scaler struct {
	Mean, Scale []float64
}

// FitScaler computes the column means and standard deviations of X.
func FitScaler(X mat.Matrix) Scaler {
	r, c := X.Dims()
	s := Scaler{Mean: make([]float64, c), Scale: make([]float64, c)}
	for j := 0; j < c; j++ {
		m := 0.0
		for i := 0; i < r; i++ {
			m += X.At(i, j)
		}
		m /= float64(r)
		v := 0.0
		for i := 0; i < r; i++ {
			d := X.At(i, j) - m
			v += d * d
		}
		sd := math.Sqrt(v / float64(r))
		if !(sd > 1e-12*math.Max(1, math.Abs(m))) {
			sd = 1
		}
		s.Mean[j], s.Scale[j] = m, sd
	}
	return s
}

// Transform returns (X − Mean)/Scale column by column as a new matrix.
func (s Scaler) Transform(X mat.Matrix) *mat.Dense {
	r, c := X.Dims()
	out := mat.NewDense(r, c, nil)
	for i := 0; i < r; i++ {
		for j := 0; j < c; j++ {
			out.Set(i, j, (X.At(i, j)-s.Mean[j])/s.Scale[j])
		}
	}
	return out
}

// Unscale maps a predictor fitted on standardised columns back to the original units:
// b_j = b'_j/Scale_j and Intercept = Intercept' − Σ_j b_j·Mean_j.
func (s Scaler) Unscale(l Linear) Linear {
	out := Linear{Intercept: l.Intercept, Coef: make([]float64, len(l.Coef))}
	for j, b := range l.Coef {
		out.Coef[j] = b / s.Scale[j]
		out.Intercept -= out.Coef[j] * s.Mean[j]
	}
	return out
}

// moments are the centred cross products every learner here starts from: column means, the
// mean of y, G = Xcᵀ·Xc/n and c = Xcᵀ·yc/n with Xc, yc centred (the intercept is never
// penalised: scikit-learn's fit_intercept=True).
type moments struct {
	n     int
	xMean []float64
	yMean float64
	gram  *mat.SymDense
	cov   []float64
}

func centredMoments(X mat.Matrix, y []float64) (moments, error) {
	r, c := X.Dims()
	if r != len(y) {
		panic(fmt.Sprintf("learn: X has %d rows, y has %d values", r, len(y)))
	}
	if r == 0 {
		panic("learn: no training rows")
	}
	mo := moments{n: r, xMean: make([]float64, c), cov: make([]float64, c)}
	for i := 0; i < r; i++ {
		if math.IsNaN(y[i]) || math.IsInf(y[i], 0) {
			return mo, ErrBadData
		}
		mo.yMean += y[i]
		for j := 0; j < c; j++ {
			v := X.At(i, j)
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return mo, ErrBadData
			}
			mo.xMean[j] += v
		}
	}
	mo.yMean /= float64(r)
	for j := range mo.xMean {
		mo.xMean[j] /= float64(r)
	}
	xc := mat.NewDense(r, c, nil)
	yc := mat.NewVecDense(r, nil)
	for i := 0; i < r; i++ {
		yc.SetVec(i, y[i]-mo.yMean)
		for j := 0; j < c; j++ {
			xc.Set(i, j, X.At(i, j)-mo.xMean[j])
		}
	}
	mo.gram = mat.NewSymDense(c, nil)
	mo.gram.SymOuterK(1/float64(r), xc.T())
	cv := mat.NewVecDense(c, mo.cov)
	cv.MulVec(xc.T(), yc)
	cv.ScaleVec(1/float64(r), cv)
	return mo, nil
}

// intercept completes a centred fit: b0 = ȳ − Σ_j b_j·x̄_j.
func (mo moments) intercept(coef []float64) Linear {
	b0 := mo.yMean
	for j, b := range coef {
		b0 -= b * mo.xMean[j]
	}
	return Linear{Intercept: b0, Coef: coef}
}

// Ridge fits ridge regression (Hoerl & Kennard 1970, "Ridge regression: biased estimation for
// nonorthogonal problems", Technometrics 12) with an unpenalised intercept, minimising
//
//	||y − b0 − X·b||² + alpha·||b||²
//
// which is scikit-learn's Ridge objective (1.2, fit_intercept=True, no 1/n factor). With X
// and y centred the solution is the closed form
//
//	b = (Xcᵀ·Xc + alpha·I)⁻¹ · Xcᵀ·yc,   b0 = ȳ − x̄ᵀ·b
//
// solved by Cholesky. Standardise X first (Scaler) for the usual scale-free penalty. alpha
// must be > 0 (panics otherwise); non-finite data is ErrBadData.
func Ridge(X mat.Matrix, y []float64, alpha float64) (Linear, error) {
	if !(alpha > 0) {
		panic("learn: Ridge needs alpha > 0")
	}
	mo, err := centredMoments(X, y)
	if err != nil {
		return Linear{}, err
	}
	return mo.ridge(alpha)
}

func (mo moments) ridge(alpha float64) (Linear, error) {
	p := len(mo.cov)
	a := mat.NewSymDense(p, nil)
	n := float64(mo.n)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			v := n * mo.gram.At(i, j)
			if i == j {
				v += alpha
			}
			a.SetSym(i, j, v)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(a) {
		return Linear{}, errors.New("learn: ridge system is not positive definite")
	}
	rhs := mat.NewVecDense(p, nil)
	for j := range mo.cov {
		rhs.SetVec(j, n*mo.cov[j])
	}
	var b mat.VecDense
	if err := ch.SolveVecTo(&b, rhs); err != nil {
		return Linear{}, fmt.Errorf("learn: ridge solve: %w", err)
	}
	coef := make([]float64, p)
	for j := range coef {
		coef[j] = b.AtVec(j)
	}
	return mo.intercept(coef), nil
}

// SquaredError is Σ_i (y_i − Predict(X_i))², the holdout score the penalty choices use.
func (l Linear) SquaredError(X *mat.Dense, y []float64) float64 {
	e := 0.0
	for i := range y {
		d := y[i] - l.Predict(X.RawRowView(i))
		e += d * d
	}
	return e
}
