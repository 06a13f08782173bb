package neldermead

import (
	"math"
	"testing"
)

// rosenbrock is Rosenbrock's (1960, The Computer Journal 3(3)) valley
// f(x, y) = 100 (y - x^2)^2 + (1 - x)^2, minimum 0 at (1, 1); the classical start is (-1.2, 1)
// (common practice in optimisation test sets, e.g. Moré, Garbow & Hillstrom 1981, problem 1;
// from memory).
func rosenbrock(x []float64) float64 {
	a, b := x[1]-x[0]*x[0], 1-x[0]
	return 100*a*a + b*b
}

func TestRosenbrock(t *testing.T) {
	var w Work
	r := Minimize(rosenbrock, []float64{-1.2, 1}, []float64{0.1, 0.1}, 2000, 1e-14, &w)
	if r.Status != Converged {
		t.Fatalf("status %v after %d evaluations", r.Status, r.Evals)
	}
	if math.Abs(r.X[0]-1) > 1e-4 || math.Abs(r.X[1]-1) > 1e-4 || r.F > 1e-8 {
		t.Errorf("minimum at %v (f = %v), want (1, 1) (f = 0)", r.X, r.F)
	}
}

// TestBudgetAndConstraint: the search stays inside a region f marks with +Inf (here x >= 2 for
// a quadratic centred at 3, so the constrained minimum is on the boundary x = 2), and it stops
// at the evaluation budget.
func TestBudgetAndConstraint(t *testing.T) {
	var w Work
	f := func(x []float64) float64 {
		if x[0] < 2 {
			return math.Inf(1)
		}
		return (x[0] - 1) * (x[0] - 1)
	}
	r := Minimize(f, []float64{5}, []float64{1}, 500, 1e-12, &w)
	if r.X[0] < 2 || r.X[0] > 2.001 {
		t.Errorf("constrained minimum at %v, want 2", r.X[0])
	}
	r = Minimize(rosenbrock, []float64{-1.2, 1}, []float64{0.1, 0.1}, 20, 1e-14, &w)
	// One step adds at most 2 + d evaluations, so the count ends within [20, 23].
	if r.Status != EvalLimit || r.Evals < 20 || r.Evals > 23 {
		t.Errorf("budget 20: status %v, %d evaluations", r.Status, r.Evals)
	}
	r = Minimize(f, []float64{0}, []float64{1}, 50, 1e-12, &w)
	if r.Status != NoFiniteSeed || r.Evals != 1 || !math.IsInf(r.F, 1) {
		t.Errorf("infeasible start: %+v", r)
	}
}

// TestMinimizeAllocatesNothing: with a Work of the right size, repeated searches reuse it.
func TestMinimizeAllocatesNothing(t *testing.T) {
	var w Work
	x0, step := []float64{-1.2, 1}, []float64{0.1, 0.1}
	Minimize(rosenbrock, x0, step, 200, 1e-10, &w)
	if n := testing.AllocsPerRun(20, func() { Minimize(rosenbrock, x0, step, 200, 1e-10, &w) }); n != 0 {
		t.Errorf("Minimize allocates %v times", n)
	}
}
