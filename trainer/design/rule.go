package design

import (
	"math"
	"syscall"
	"time"
)

// Rule turns the candidates' inner scores into one choice.
type Rule string

const (
	// OneSE is the one-standard-error rule (Breiman, Friedman, Olshen & Stone 1984,
	// "Classification and Regression Trees", section 3.4.3; Hastie, Tibshirani & Friedman,
	// "The Elements of Statistical Learning", 2nd ed. 2009, section 7.10): the simplest
	// candidate (first in the list) whose mean inner MASE is at most the lowest mean plus that
	// lowest candidate's standard error over series. A more complex design must beat the
	// simpler ones by more than the noise of the holdout itself.
	OneSE Rule = "one-se"
	// Lowest takes the candidate with the lowest mean inner MASE (ties to the first).
	Lowest Rule = "lowest"
)

// Valid reports whether r is a known rule.
func (r Rule) Valid() bool { return r == OneSE || r == Lowest }

// Pick returns the index chosen from the per-candidate means and standard errors (NaN: the
// candidate has no score, or no standard error), or -1 if none has a score.
func (r Rule) Pick(means, ses []float64) int {
	best := -1
	for i, m := range means {
		if !math.IsNaN(m) && (best < 0 || m < means[best]) {
			best = i
		}
	}
	if best < 0 || r == Lowest {
		return best
	}
	limit := means[best]
	if se := ses[best]; !math.IsNaN(se) {
		limit += se
	}
	for i, m := range means {
		if !math.IsNaN(m) && m <= limit {
			return i
		}
	}
	return best
}

// meanSE returns the mean of xs and its standard error s/sqrt(n), with the sample standard
// deviation s (n-1 denominator); NaN mean for no values, NaN standard error below two.
func meanSE(xs []float64) (mean, se float64) {
	n := float64(len(xs))
	if len(xs) == 0 {
		return math.NaN(), math.NaN()
	}
	for _, x := range xs {
		mean += x
	}
	mean /= n
	if len(xs) < 2 {
		return mean, math.NaN()
	}
	v := 0.0
	for _, x := range xs {
		v += (x - mean) * (x - mean)
	}
	return mean, math.Sqrt(v / (n - 1) / n)
}

// ProcessCPU is this process's user plus system CPU time (getrusage RUSAGE_SELF), the clock
// the cost budget is measured with: the candidates run one after another, each on every
// worker, so the process's CPU time over one candidate's run is that candidate's cost.
func ProcessCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
