package bench

import (
	"fmt"
	"math"
	"path/filepath"
	"sort"
	"strconv"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
)

// Tally accumulates per-series accuracy: Mean returns the averages over series, the way the
// M3 results are reported (Makridakis & Hibon 2000, tables: mean sMAPE over series).
type Tally struct {
	N               int
	SMAPE, MASE     float64 // sums over series
	MASEN           int     // series with a defined MASE
	MASESq          float64 // sum of squared MASE over the same series (for MASEStdErr)
	Expected        float64 // sum of backtest expectations (in the selection metric)
	ExpectedN       int
	Failed          int
	CPUMilliseconds float64
}

func (t *Tally) add(smape, mase float64) {
	t.N++
	t.SMAPE += smape
	if !math.IsNaN(mase) {
		t.MASE += mase
		t.MASESq += mase * mase
		t.MASEN++
	}
}

// MeanSMAPE is the mean sMAPE over series.
func (t Tally) MeanSMAPE() float64 { return t.SMAPE / float64(t.N) }

// MeanMASE is the mean MASE over series with a defined scale.
func (t Tally) MeanMASE() float64 { return t.MASE / float64(t.MASEN) }

// MASEStdErr is the standard error of MeanMASE over series, s/sqrt(n) with the sample standard
// deviation s = sqrt((sum x^2 - n mean^2)/(n-1)); NaN below two series.
func (t Tally) MASEStdErr() float64 {
	n := float64(t.MASEN)
	if t.MASEN < 2 {
		return math.NaN()
	}
	m := t.MASE / n
	v := (t.MASESq - n*m*m) / (n - 1)
	return math.Sqrt(math.Max(v, 0) / n)
}

// Report is the accuracy of one method by category and overall.
type Report struct {
	Method     string
	Categories []string // in first-seen order
	By         map[string]*Tally
	All        Tally
	// Forecasts holds each entry's forecast, in entry order, for the reports of R references
	// (ReferenceR); nil otherwise.
	Forecasts [][]float64
	// Lower and Upper hold each entry's central prediction interval for the reports of R
	// references asked for one (ReferenceRIntervals); nil otherwise.
	Lower, Upper [][]float64
	// Scores holds every scored series' sMAPE and MASE, in the order they were added (for
	// OWAInterval).
	Scores []SeriesScore
	// Verdicts is each group's cost verdict (Run under Auto, by GroupKey; nil otherwise), for
	// a later run's Options.Hold.
	Verdicts map[string]*design.Before
}

// SeriesScore is one series' accuracy in a Report; MASE is NaN where its scale is undefined.
type SeriesScore struct {
	ID          string
	SMAPE, MASE float64
}

func newReport(method string) *Report { return &Report{Method: method, By: map[string]*Tally{}} }

func (r *Report) tally(cat string) *Tally { return byCategory(r.By, &r.Categories, cat) }

// byCategory returns by[cat], made when the category is first seen and then noted in order
// (the reports' first-seen category order).
func byCategory[T any](by map[string]*T, order *[]string, cat string) *T {
	t, ok := by[cat]
	if !ok {
		t = new(T)
		by[cat] = t
		*order = append(*order, cat)
	}
	return t
}

// Accuracy scores forecast f of one entry: sMAPE as in M3 (backtest.SymmetricMAPE) and MASE
// with the in-sample seasonal-naive scale, m = the data's frequency (1 for OTHER; Hyndman &
// Koehler 2006).
func Accuracy(e Entry, f []float64) (smape, mase float64) {
	return backtest.Score(backtest.SMAPE, e.Test, f, e.Train, e.Frequency),
		backtest.Score(backtest.MASE, e.Test, f, e.Train, e.Frequency)
}

func (r *Report) add(e Entry, f []float64) {
	s, m := Accuracy(e, f)
	r.tally(e.Category).add(s, m)
	r.All.add(s, m)
	r.Scores = append(r.Scores, SeriesScore{ID: e.ID, SMAPE: s, MASE: m})
}

// ScorePublished scores every method in dir/published_forecasts.csv on the given entries with
// Accuracy. A method missing forecasts for some entries is scored on the ones it has (its
// report's N says how many). Methods come back sorted by name.
func ScorePublished(dir string, entries []Entry) ([]*Report, error) {
	byID := map[string]int{}
	for i, e := range entries {
		byID[e.ID] = i
	}
	fc := map[string][][]float64{} // method -> entry -> forecast
	path := filepath.Join(dir, "published_forecasts.csv")
	err := readCSV(path, []string{"method", "series", "step", "value"}, func(line int, rec map[string]string) error {
		i, ok := byID[rec["series"]]
		if !ok {
			return nil
		}
		step, err := atoiField(rec, "step")
		if err != nil {
			return err
		}
		v, err := strconv.ParseFloat(rec["value"], 64)
		if err != nil {
			return fmt.Errorf("field value: %w", err)
		}
		mf := fc[rec["method"]]
		if mf == nil {
			mf = make([][]float64, len(entries))
			fc[rec["method"]] = mf
		}
		if step != len(mf[i])+1 || step > entries[i].Horizon {
			return fmt.Errorf("field step: %d out of order or past horizon %d", step, entries[i].Horizon)
		}
		mf[i] = append(mf[i], v)
		return nil
	})
	if err != nil {
		return nil, err
	}
	var out []*Report
	for method, mf := range fc {
		r := newReport(method)
		for i, e := range entries {
			if len(mf[i]) == e.Horizon {
				r.add(e, mf[i])
			}
		}
		out = append(out, r)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Method < out[j].Method })
	return out, nil
}

// zeroActualsNote warns, when some series have zero actuals in their test data, that sMAPE
// (and so OWA) judges those points by whether a forecast is exactly zero: a term
// 2|y − f| / (|y| + |f|) with y = 0 is 2 (200%) for any f ≠ 0, however small, and 0 for
// f = 0 (backtest.SymmetricMAPE's convention), so a method that repeats a last value of 0 wins
// them outright over one forecasting 1e-100 (sMAPE's trouble near zero: Hyndman & Koehler
// 2006, "Another look at measures of forecast accuracy", IJF 22, section 3.2; the remedy they
// give is a scaled error, MASE). Empty when no test actual is zero (the M3 and M4 data).
func zeroActualsNote(entries []Entry) string {
	series, points, total := 0, 0, 0
	for _, e := range entries {
		zeros := 0
		for _, y := range e.Test {
			if y == 0 {
				zeros++
			}
		}
		total += len(e.Test)
		if zeros > 0 {
			series++
			points += zeros
		}
	}
	if series == 0 {
		return ""
	}
	return fmt.Sprintf("note: %d of %d series have zero actuals in their test data (%d of %d points): sMAPE counts each such point as 200%% unless the forecast is exactly 0, so sMAPE and OWA rank those series by exact zeros; compare MASE there (Hyndman & Koehler 2006)",
		series, len(entries), points, total)
}
