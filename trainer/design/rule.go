package design

import (
	"math"
	"slices"
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
	// RelativeSE is OneSE on relative errors: each candidate is compared with the first one
	// series by series, as the log of the ratio of their inner MASE (= the ratio of their
	// MAEs, the scale being the series'; Davydenko & Fildes 2013, "Measuring forecasting
	// accuracy: the case of judgmental adjustments to SKU-level demand forecasts", IJF 29,
	// whose AvgRelMAE is the exponential of this mean). The lowest mean log ratio wins unless
	// a simpler candidate is within one standard error of the paired log ratios; the first
	// candidate's own mean is 0. Unlike the mean of MASE, a handful of series with huge
	// scaled errors (short, erratic histories) cannot decide a segment alone. Not the default:
	// on M3 it switched yearly segments to top3-mean and scored worse than OneSE on the
	// yearly and quarterly test data (PROJECT-NOTES.md, seventh session).
	RelativeSE Rule = "relative-se"
)

// Valid reports whether r is a known rule.
func (r Rule) Valid() bool { return r == OneSE || r == Lowest || r == RelativeSE }

// Pick returns the index chosen from the per-candidate means and standard errors (NaN: the
// candidate has no score, or no standard error), or -1 if none has a score. RelativeSE needs
// the scores series by series (PickRelative); given means and standard errors, Pick treats it
// as OneSE.
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

// PickRelative is Pick for RelativeSE: scores[c][j] is candidate c's inner MASE on series j
// (a candidate with a NaN anywhere was not scored and is not eligible). Series where some
// eligible candidate scores 0 or a non-finite value are left out (no ratio); without any
// series left, the first candidate is taken.
func PickRelative(scores [][]float64) int {
	var elig []int
	for ci, sc := range scores {
		if len(sc) > 0 && !slices.ContainsFunc(sc, math.IsNaN) {
			elig = append(elig, ci)
		}
	}
	if len(elig) == 0 {
		return -1
	}
	var rows []int
	for j := range scores[elig[0]] {
		if !slices.ContainsFunc(elig, func(ci int) bool { v := scores[ci][j]; return !(v > 0) || math.IsInf(v, 1) }) {
			rows = append(rows, j)
		}
	}
	if len(rows) == 0 {
		return elig[0]
	}
	means := make([]float64, len(scores))
	ses := make([]float64, len(scores))
	for ci := range scores {
		means[ci], ses[ci] = math.NaN(), math.NaN()
	}
	for _, ci := range elig {
		d := make([]float64, len(rows))
		for k, j := range rows {
			d[k] = math.Log(scores[ci][j] / scores[elig[0]][j])
		}
		means[ci], ses[ci] = meanSE(d)
	}
	return OneSE.Pick(means, ses)
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
