package bench

import (
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"sort"

	"almanac.dev/almanac/trainer/models"
)

// Naive2 is the M4 organisers' Naive2 benchmark forecast of y for h steps with season length
// m (M4Period; the organisers' benchmark code, the R script "Benchmarks and Evaluation",
// function Benchmarks, forecast f3; recalled from memory and written out in R in m4naive2.R):
// the naive forecast of the seasonally adjusted series, reseasonalised,
//
//	seasonal ⇔ m > 1 and n >= 3m and |r_m| > 1.645·√((1 + 2 Σ_{k<m} r_k²)/n)   (models.SeasonalityTest)
//	S        = classical multiplicative decomposition indices (models.MultiplicativeIndices,
//	           R stats::decompose)
//	ŷ_{n+k}  = (y_n / S_{n mod m}) · S_{(n+k) mod m}, k = 1..h (t counted from 1), S ≡ 1 when not seasonal
//
// computed by the zoo's SeasonalAdjustedNaive. One detail of the organisers' code is kept: its
// autocorrelations come from R's acf with the default lag.max = ⌊10·log10 n⌋, so r_m is
// missing, and the series is taken as not seasonal, when m exceeds that (an hourly series of
// fewer than 251 points). SeasonalAdjustedNaive also treats a series as not seasonal when the
// moving-average trend is not positive or an index is below 1e-4 in size; neither happens on
// positive data.
func Naive2(y []float64, m, h int) ([]float64, error) {
	if m > 1 && m > acfDefaultLagMax(len(y)) {
		m = 1
	}
	mod, err := models.New(models.Spec{Family: models.FamilySeasonalAdjustedNaive})
	if err != nil {
		return nil, err
	}
	fit, err := mod.Fit(y, max(m, 1))
	if err != nil {
		return nil, err
	}
	return fit.Forecast(h, nil).Mean, nil
}

// acfDefaultLagMax is R stats::acf's default lag.max for one series of n points,
// min(⌊10·log10 n⌋, n−1) (R 4.2 documentation of acf).
func acfDefaultLagMax(n int) int {
	if n < 1 {
		return 0
	}
	return min(int(math.Floor(10*math.Log10(float64(n)))), n-1)
}

// Naive2Report scores Naive2 on every entry with Accuracy: the denominators of OWA.
func Naive2Report(entries []Entry) (*Report, error) {
	r := newReport("Naive2 (M4 definition, computed by the bench)")
	for _, e := range entries {
		f, err := Naive2(e.Train, e.Frequency, e.Horizon)
		if err != nil {
			return nil, fmt.Errorf("Naive2 of series %s: %w", e.ID, err)
		}
		r.add(e, f)
	}
	return r, nil
}

// OWA is the M4 competition's overall weighted average of a method's mean sMAPE and mean MASE
// relative to Naive2's on the same series (Makridakis, Spiliotis & Assimakopoulos 2020, "The M4
// Competition: 100,000 time series and 61 forecasting methods", IJF 36(1)):
//
//	OWA = (sMAPE / sMAPE_Naive2 + MASE / MASE_Naive2) / 2
//
// with every term the mean over the series of the tally. NaN when the two tallies do not
// cover the same number of series (a published method with missing forecasts) or Naive2
// scores zero.
func OWA(t, naive2 Tally) float64 {
	if t.N != naive2.N || t.MASEN != naive2.MASEN || t.N == 0 {
		return math.NaN()
	}
	return (t.MeanSMAPE()/naive2.MeanSMAPE() + t.MeanMASE()/naive2.MeanMASE()) / 2
}

// owaOf is OWA of report r in category c ("" for all series) against Naive2's report n2.
func owaOf(r, n2 *Report, c string) float64 {
	if c == "" {
		return OWA(r.All, n2.All)
	}
	t, t2 := r.By[c], n2.By[c]
	if t == nil || t2 == nil {
		return math.NaN()
	}
	return OWA(*t, *t2)
}

// SummaryLine is the bench's last line of output, for scripts:
//
//	all: smape=S mase=M owa=O cpu_ms_per_series=C series=N
func SummaryLine(r, n2 *Report) string {
	return fmt.Sprintf("all: smape=%.3f mase=%.4f owa=%.3f cpu_ms_per_series=%.2f series=%d",
		r.All.MeanSMAPE(), r.All.MeanMASE(), owaOf(r, n2, ""), r.All.CPUMilliseconds, r.All.N)
}

// writeTable prints a report per category (for the long layout: its frequency) and overall,
// with OWA against n2.
func writeTable(w io.Writer, r, n2 *Report) {
	fmt.Fprintf(w, "%s\n", r.Method)
	fmt.Fprintf(w, "  %-10s %6s %8s %8s %7s\n", "category", "series", "sMAPE", "MASE", "OWA")
	for _, c := range r.Categories {
		t := r.By[c]
		fmt.Fprintf(w, "  %-10s %6d %8.3f %8.4f %7.3f\n", c, t.N, t.MeanSMAPE(), t.MeanMASE(), owaOf(r, n2, c))
	}
	fmt.Fprintf(w, "  %-10s %6d %8.3f %8.4f %7.3f\n", "ALL", r.All.N, r.All.MeanSMAPE(), r.All.MeanMASE(), owaOf(r, n2, ""))
}

// writeSideBySide prints sMAPE, MASE and OWA per category for ours and each reference, then
// the ratios ours/reference for sMAPE, MASE and CPU milliseconds per series.
func writeSideBySide(w io.Writer, ours *Report, refs []*Report, n2 *Report) {
	all := append([]*Report{ours}, refs...)
	fmt.Fprintf(w, "side by side (sMAPE / MASE / OWA)\n  %-10s", "category")
	for _, r := range all {
		fmt.Fprintf(w, " %26s", shortName(r.Method))
	}
	fmt.Fprintln(w)
	row := func(c, label string) {
		fmt.Fprintf(w, "  %-10s", label)
		for _, r := range all {
			t := r.All
			if c != "" {
				t = Tally{}
				if p := r.By[c]; p != nil {
					t = *p
				}
			}
			fmt.Fprintf(w, " %26s", fmt.Sprintf("%.3f / %.4f / %.3f", t.MeanSMAPE(), t.MeanMASE(), owaOf(r, n2, c)))
		}
		fmt.Fprintln(w)
	}
	for _, c := range ours.Categories {
		row(c, c)
	}
	row("", "ALL")
	fmt.Fprintf(w, "  %-10s", "cpu ms/s")
	for _, r := range all {
		fmt.Fprintf(w, " %26.2f", r.All.CPUMilliseconds)
	}
	fmt.Fprintln(w)
	for _, r := range refs {
		cpu := "cpu n/a (R's CPU is within its start-up's)"
		if r.All.CPUMilliseconds > 0 {
			cpu = fmt.Sprintf("cpu %.4f (R %.3gx ours)", ours.All.CPUMilliseconds/r.All.CPUMilliseconds, r.All.CPUMilliseconds/ours.All.CPUMilliseconds)
		}
		fmt.Fprintf(w, "  ratio ours/%s: sMAPE %.4f MASE %.4f %s\n", r.Method,
			ours.All.MeanSMAPE()/r.All.MeanSMAPE(), ours.All.MeanMASE()/r.All.MeanMASE(), cpu)
	}
}

// OWAInterval returns the central interval of the given level (0.9: from the 5th to the 95th
// percentile) of report r's all-series OWA against Naive2's report n2 over resamples bootstrap
// resamples of the series (Efron & Tibshirani 1993, "An Introduction to the Bootstrap", ch. 13,
// the percentile interval): each resample draws N of the N series with replacement and
// computes OWA on that draw, with ours and Naive2 on the same series. It says how far the OWA
// of another sample of the same size from the same kind of data may lie: a fresh sample's OWA
// differs from this one's by about sqrt(2) times the interval's half-width (both vary). The
// draws come from a PCG generator with the given seed, so the interval repeats. A draw whose
// Naive2 sMAPE or MASE sums to zero (every MASE undefined, say) has no OWA and is left out. ok is
// false when the two reports do not score the same series or no draw has an OWA.
func OWAInterval(r, n2 *Report, level float64, resamples int, seed uint64) (lo, hi float64, ok bool) {
	rows, ok := owaRows(n2, r)
	if !ok || resamples < 1 || !(level > 0 && level < 1) {
		return 0, 0, false
	}
	owas := bootstrapOWA(rows, resamples, seed, func(t []float64) float64 { return owaOfSums(t, 0) })
	if len(owas) == 0 {
		return 0, 0, false
	}
	lo, hi = percentileInterval(owas, level)
	return lo, hi, true
}

// PairedOWADifference compares report r with report other on the same series and the same
// Naive2 (n2): diff is OWA(r) - OWA(other) on all series, and lo, hi the central interval of the
// given level of that difference over resamples bootstrap resamples of the series, each drawing
// N of the N series with replacement and scoring both reports on the same draw (a paired
// bootstrap; Efron & Tibshirani 1993, ch. 13, percentile interval, as OWAInterval). gain is the
// share of draws in which r's OWA is the lower. The pairing removes what the series themselves
// contribute to both runs' errors, so the interval of a difference is far narrower than the
// two OWA intervals side by side. ok is false when the reports do not score the same series
// (other may list them in another order), a series' MASE is defined in one and not the other,
// or no draw has an OWA.
func PairedOWADifference(r, other, n2 *Report, level float64, resamples int, seed uint64) (diff, lo, hi, gain float64, ok bool) {
	rows, ok := owaRows(n2, r, other)
	if !ok || resamples < 1 || !(level > 0 && level < 1) {
		return 0, 0, 0, 0, false
	}
	d := func(t []float64) float64 { return owaOfSums(t, 0) - owaOfSums(t, 1) }
	all := make([]float64, len(rows[0]))
	for _, row := range rows {
		for k, v := range row {
			all[k] += v
		}
	}
	diff = d(all)
	diffs := bootstrapOWA(rows, resamples, seed, d)
	if len(diffs) == 0 || math.IsNaN(diff) {
		return 0, 0, 0, 0, false
	}
	for _, v := range diffs {
		if v < 0 {
			gain++
		}
	}
	gain /= float64(len(diffs))
	lo, hi = percentileInterval(diffs, level)
	return diff, lo, hi, gain, true
}

// owaRows lines up the reports' series by ID, in the first report's order (so OWAInterval's
// draws repeat whatever order Naive2 scored them in): row i holds Naive2's sMAPE and MASE, then
// each report's (a MASE that is undefined counts as 0: it must be undefined in Naive2 and every
// report alike, or the rows are refused). ok is false when a report does not score exactly
// Naive2's series.
func owaRows(n2 *Report, rs ...*Report) ([][]float64, bool) {
	base := make(map[string]SeriesScore, len(n2.Scores))
	for _, s := range n2.Scores {
		base[s.ID] = s
	}
	first := rs[0].Scores
	if len(first) == 0 || len(first) != len(n2.Scores) || len(base) != len(n2.Scores) {
		return nil, false
	}
	index := make(map[string]int, len(first))
	rows := make([][]float64, len(first))
	for i, s := range first {
		b, found := base[s.ID]
		if _, dup := index[s.ID]; !found || dup {
			return nil, false
		}
		index[s.ID] = i
		rows[i] = make([]float64, 2+2*len(rs))
		rows[i][0], rows[i][1] = b.SMAPE, zeroNaN(b.MASE)
	}
	for k, r := range rs {
		if len(r.Scores) != len(rows) {
			return nil, false
		}
		seen := make([]bool, len(rows))
		for _, s := range r.Scores {
			i, found := index[s.ID]
			if !found || seen[i] || math.IsNaN(s.MASE) != math.IsNaN(base[s.ID].MASE) {
				return nil, false
			}
			seen[i] = true
			rows[i][2+2*k], rows[i][3+2*k] = s.SMAPE, zeroNaN(s.MASE)
		}
	}
	return rows, true
}

func zeroNaN(v float64) float64 {
	if math.IsNaN(v) {
		return 0
	}
	return v
}

// owaOfSums is report k's OWA from the column sums t of owaRows' rows: the mean of its sMAPE and
// MASE sums relative to Naive2's; NaN when Naive2's sums are not positive.
func owaOfSums(t []float64, k int) float64 {
	if !(t[0] > 0 && t[1] > 0) {
		return math.NaN()
	}
	return (t[2+2*k]/t[0] + t[3+2*k]/t[1]) / 2
}

// bootstrapOWA draws resamples resamples of the rows with replacement (a PCG generator with the
// given seed, so the draws repeat) and returns stat of each draw's column sums, sorted, leaving
// out draws where stat is NaN.
func bootstrapOWA(rows [][]float64, resamples int, seed uint64, stat func([]float64) float64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 0))
	out := make([]float64, 0, resamples)
	t := make([]float64, len(rows[0]))
	for range resamples {
		clear(t)
		for range rows {
			for k, v := range rows[rng.IntN(len(rows))] {
				t[k] += v
			}
		}
		if v := stat(t); !math.IsNaN(v) {
			out = append(out, v)
		}
	}
	sort.Float64s(out)
	return out
}

// percentileInterval is the central interval of the given level of sorted draws (0.9: from the
// 5th to the 95th percentile).
func percentileInterval(sorted []float64, level float64) (lo, hi float64) {
	n := float64(len(sorted))
	tail := (1 - level) / 2
	return sorted[int(math.Floor(tail*n))], sorted[max(int(math.Ceil((1-tail)*n))-1, 0)]
}
