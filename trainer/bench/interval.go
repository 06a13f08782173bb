package bench

import (
	"fmt"
	"io"
	"math"
	"strings"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/selection"
)

// MSIS is the mean scaled interval score of a central (1 − alpha) prediction interval
// [lower, upper] on an entry's test data:
//
//	IS_t = (U_t − L_t) + (2/α)(L_t − Y_t)·1{Y_t < L_t} + (2/α)(Y_t − U_t)·1{Y_t > U_t}
//	MSIS = (1/h) Σ_t IS_t / ( (1/(n−m)) Σ_{t=m+1..n} |X_t − X_{t−m}| )
//
// (the interval score of Gneiting & Raftery 2007, "Strictly proper scoring rules, prediction,
// and estimation", JASA 102, eq. 43; scaled as MASE is, by the in-sample seasonal-naive error
// with m = the data's frequency, as the M4 competition scored its 95% intervals: M4
// Competitor's Guide 2018; Makridakis, Spiliotis & Assimakopoulos 2020, IJF 36). A narrow band
// that misses pays 2/α times the miss; a wide one pays its width. covered counts the test
// points inside [L, U]. ok is false when the scale is 0 or undefined or a bound is not finite.
func MSIS(e Entry, lower, upper []float64, alpha float64) (msis float64, covered int, ok bool) {
	scale := backtest.NaiveScale(e.Train, e.Frequency, 1)
	if !(scale > 0) || math.IsInf(scale, 0) || len(lower) != len(e.Test) || len(upper) != len(e.Test) || len(e.Test) == 0 {
		return math.NaN(), 0, false
	}
	sum := 0.0
	for t, y := range e.Test {
		l, u := lower[t], upper[t]
		if math.IsNaN(l) || math.IsNaN(u) || math.IsInf(l, 0) || math.IsInf(u, 0) {
			return math.NaN(), 0, false
		}
		s := u - l
		switch {
		case y < l:
			s += 2 / alpha * (l - y)
		case y > u:
			s += 2 / alpha * (y - u)
		default:
			covered++
		}
		sum += s
	}
	return sum / float64(len(e.Test)) / scale, covered, true
}

// IntervalTally sums MSIS and coverage over series.
type IntervalTally struct {
	// N counts the series scored; MSISSum adds their MSIS; Points and Covered count test
	// points and those inside the interval.
	N               int
	MSISSum         float64
	Points, Covered int
}

func (t *IntervalTally) add(msis float64, covered, points int) {
	t.N++
	t.MSISSum += msis
	t.Points += points
	t.Covered += covered
}

// IntervalReport scores one method's central interval per category and over all series.
type IntervalReport struct {
	Method     string
	Alpha      float64
	Categories []string // in first-seen order
	By         map[string]*IntervalTally
	All        IntervalTally
	// Skipped counts entries without a usable interval (no bounds, a zero scale).
	Skipped int
}

func newIntervalReport(method string, alpha float64) *IntervalReport {
	return &IntervalReport{Method: method, Alpha: alpha, By: map[string]*IntervalTally{}}
}

func (r *IntervalReport) add(e Entry, lower, upper []float64) {
	msis, covered, ok := MSIS(e, lower, upper, r.Alpha)
	if !ok {
		r.Skipped++
		return
	}
	byCategory(r.By, &r.Categories, e.Category).add(msis, covered, len(e.Test))
	r.All.add(msis, covered, len(e.Test))
}

// CentralPair returns the indices of the lowest and the highest of levels and α = 2·levels[lo]
// when they bound a central interval (levels[lo] + levels[hi] = 1, lowest below 0.5); ok is
// false otherwise (fewer than two levels, or an asymmetric pair).
func CentralPair(levels []float64) (lo, hi int, alpha float64, ok bool) {
	if len(levels) < 2 {
		return 0, 0, 0, false
	}
	lo, hi = 0, len(levels)-1
	if levels[lo] >= 0.5 || math.Abs(levels[lo]+levels[hi]-1) > 1e-9 {
		return 0, 0, 0, false
	}
	return lo, hi, 2 * levels[lo], true
}

// OursIntervals scores our results' central interval: the quantiles at CentralPair(levels).
// nil when levels hold no central pair.
func OursIntervals(method string, entries []Entry, results []selection.Result, levels []float64) *IntervalReport {
	lo, hi, alpha, ok := CentralPair(levels)
	if !ok {
		return nil
	}
	r := newIntervalReport(method, alpha)
	for i, e := range entries {
		q := results[i].Quantiles
		if len(q) != len(levels) {
			r.Skipped++
			continue
		}
		r.add(e, q[lo], q[hi])
	}
	return r
}

// refIntervals scores the intervals R wrote beside its forecasts (Report.Lower, Upper); nil
// when the method gave none (naive2).
func refIntervals(ref *Report, entries []Entry, alpha float64) *IntervalReport {
	if ref.Lower == nil {
		return nil
	}
	r := newIntervalReport(ref.Method, alpha)
	for i, e := range entries {
		r.add(e, ref.Lower[i], ref.Upper[i])
	}
	return r
}

// writeIntervals prints one row per report: MSIS per category and over all series, and the
// coverage over all test points, against the nominal 1 − α.
func writeIntervals(w io.Writer, reps []*IntervalReport) {
	if len(reps) == 0 {
		return
	}
	alpha := reps[0].Alpha
	cats := reps[0].Categories
	fmt.Fprintf(w, "central %g%% interval on the test data: MSIS (Gneiting & Raftery 2007, scaled as in M4) per category and over all series, and the share of test points inside (nominal %.3f)\n",
		100*(1-alpha), 1-alpha)
	head := fmt.Sprintf("  %-34s", "method")
	for _, c := range cats {
		head += fmt.Sprintf(" %10s", c)
	}
	fmt.Fprintf(w, "%s %10s %9s %7s\n", head, "ALL", "coverage", "series")
	for _, r := range reps {
		line := fmt.Sprintf("  %-34s", shortMethod(r.Method))
		for _, c := range cats {
			if t, ok := r.By[c]; ok && t.N > 0 {
				line += fmt.Sprintf(" %10.3f", t.MSISSum/float64(t.N))
			} else {
				line += fmt.Sprintf(" %10s", "-")
			}
		}
		all := "-"
		cov := "-"
		if r.All.N > 0 {
			all = fmt.Sprintf("%.3f", r.All.MSISSum/float64(r.All.N))
			cov = fmt.Sprintf("%.3f", float64(r.All.Covered)/float64(r.All.Points))
		}
		fmt.Fprintf(w, "%s %10s %9s %7d\n", line, all, cov, r.All.N)
		if r.Skipped > 0 {
			fmt.Fprintf(w, "    (%s: %d series without a usable interval left out)\n", shortMethod(r.Method), r.Skipped)
		}
	}
}

// shortMethod is shortName trimmed to 34 characters for the table.
func shortMethod(m string) string {
	m = strings.TrimSpace(shortName(m))
	if len(m) > 34 {
		return m[:33] + "…"
	}
	return m
}

// jsonIntervals is the --json form of interval reports: per method the level, the MSIS per
// category and over all series, and the coverage.
func jsonIntervals(reps []*IntervalReport) []map[string]any {
	var out []map[string]any
	for _, r := range reps {
		by := map[string]float64{}
		for c, t := range r.By {
			if t.N > 0 {
				by[c] = t.MSISSum / float64(t.N)
			}
		}
		m := map[string]any{"method": r.Method, "level": 1 - r.Alpha, "msisByCategory": by, "series": r.All.N, "skipped": r.Skipped}
		if r.All.N > 0 {
			m["msis"] = r.All.MSISSum / float64(r.All.N)
			m["coverage"] = float64(r.All.Covered) / float64(r.All.Points)
		}
		out = append(out, m)
	}
	return out
}
