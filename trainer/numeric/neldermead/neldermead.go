// Package neldermead minimises a function of several variables without derivatives by the
// simplex method of Nelder & Mead (1965, "A simplex method for function minimization", The
// Computer Journal 7(4), 308-313), in the form analysed by Lagarias, Reeds, Wright & Wright
// (1998, SIAM J. Optim. 9(1), 112-147). Constraints are expressed by the function returning +Inf
// outside the feasible region, as R's optim is used by forecast's ets().
package neldermead

import "math"

// Status says why the search stopped.
type Status int

const (
	Converged    Status = iota // the simplex values agree within the tolerance
	EvalLimit                  // the evaluation budget ran out
	NoFiniteSeed               // the starting point has no finite value
)

// Result is the outcome of one minimisation, in the manner of gonum/optimize.Result:
// the best point, its value, the number of function evaluations and the stop reason.
type Result struct {
	X      []float64
	F      float64
	Evals  int
	Status Status
}

// Work holds the simplex and trial points so that repeated minimisations of problems of
// the same or smaller dimension allocate nothing.
type Work struct {
	simplex [][]float64
	vals    []float64
	cen     []float64
	xr, xe  []float64
	xc      []float64
	best    []float64
}

func (w *Work) reset(d int) {
	if len(w.vals) < d+1 || (len(w.simplex) > 0 && cap(w.simplex[0]) < d) {
		w.simplex = make([][]float64, d+1)
		for i := range w.simplex {
			w.simplex[i] = make([]float64, d)
		}
		w.vals = make([]float64, d+1)
		w.cen = make([]float64, d)
		w.xr = make([]float64, d)
		w.xe = make([]float64, d)
		w.xc = make([]float64, d)
		w.best = make([]float64, d)
	}
	for i := 0; i <= d; i++ {
		w.simplex[i] = w.simplex[i][:d]
	}
	w.cen, w.xr, w.xe, w.xc, w.best = w.cen[:d], w.xr[:d], w.xe[:d], w.xc[:d], w.best[:d]
}

// Minimize minimises f from x0 with the Nelder & Mead (1965) simplex method, using the
// standard coefficients reflection 1, expansion 2, contraction 1/2, shrink 1/2 (Lagarias,
// Reeds, Wright & Wright 1998, SIAM J. Optim. 9(1), section 2). The initial simplex is x0 and
// x0 + step[i] e_i. Constraints are expressed by f returning +Inf outside the feasible region,
// as R's optim does for ets(); the method then contracts back inside.
//
// It stops when max f - min f over the simplex is at most ftol (|min f| + ftol), or after
// maxEval evaluations. The returned X aliases w and is valid until the next call.
func Minimize(f func([]float64) float64, x0, step []float64, maxEval int, ftol float64, w *Work) Result {
	d := len(x0)
	w.reset(d)
	s, v := w.simplex, w.vals
	copy(s[0], x0)
	v[0] = f(s[0])
	evals := 1
	if math.IsInf(v[0], 1) || math.IsNaN(v[0]) {
		copy(w.best, x0)
		return Result{X: w.best, F: math.Inf(1), Evals: evals, Status: NoFiniteSeed}
	}
	for i := 1; i <= d; i++ {
		copy(s[i], x0)
		s[i][i-1] += step[i-1]
		v[i] = nanInf(f(s[i]))
		evals++
	}
	status := EvalLimit
	for evals < maxEval {
		// Locate best, worst and second worst.
		lo, hi := 0, 0
		for i := 1; i <= d; i++ {
			if v[i] < v[lo] {
				lo = i
			}
			if v[i] > v[hi] {
				hi = i
			}
		}
		nh := lo
		for i := 0; i <= d; i++ {
			if i != hi && v[i] > v[nh] {
				nh = i
			}
		}
		if v[hi]-v[lo] <= ftol*(math.Abs(v[lo])+ftol) {
			status = Converged
			break
		}
		// Centroid of all but the worst.
		for k := 0; k < d; k++ {
			c := 0.0
			for i := 0; i <= d; i++ {
				if i != hi {
					c += s[i][k]
				}
			}
			w.cen[k] = c / float64(d)
		}
		for k := 0; k < d; k++ {
			w.xr[k] = w.cen[k] + (w.cen[k] - s[hi][k])
		}
		fr := nanInf(f(w.xr))
		evals++
		switch {
		case fr < v[lo]:
			for k := 0; k < d; k++ {
				w.xe[k] = w.cen[k] + 2*(w.cen[k]-s[hi][k])
			}
			fe := nanInf(f(w.xe))
			evals++
			if fe < fr {
				copy(s[hi], w.xe)
				v[hi] = fe
			} else {
				copy(s[hi], w.xr)
				v[hi] = fr
			}
		case fr < v[nh]:
			copy(s[hi], w.xr)
			v[hi] = fr
		default:
			// Contract outside when the reflected point improves on the worst, else inside.
			var fc float64
			if fr < v[hi] {
				for k := 0; k < d; k++ {
					w.xc[k] = w.cen[k] + 0.5*(w.xr[k]-w.cen[k])
				}
				fc = nanInf(f(w.xc))
				evals++
				if fc <= fr {
					copy(s[hi], w.xc)
					v[hi] = fc
					continue
				}
			} else {
				for k := 0; k < d; k++ {
					w.xc[k] = w.cen[k] + 0.5*(s[hi][k]-w.cen[k])
				}
				fc = nanInf(f(w.xc))
				evals++
				if fc < v[hi] {
					copy(s[hi], w.xc)
					v[hi] = fc
					continue
				}
			}
			// Shrink towards the best vertex.
			for i := 0; i <= d; i++ {
				if i == lo {
					continue
				}
				for k := 0; k < d; k++ {
					s[i][k] = s[lo][k] + 0.5*(s[i][k]-s[lo][k])
				}
				v[i] = nanInf(f(s[i]))
				evals++
			}
		}
	}
	lo := 0
	for i := 1; i <= d; i++ {
		if v[i] < v[lo] {
			lo = i
		}
	}
	copy(w.best, s[lo])
	return Result{X: w.best, F: v[lo], Evals: evals, Status: status}
}

func nanInf(x float64) float64 {
	if math.IsNaN(x) {
		return math.Inf(1)
	}
	return x
}
