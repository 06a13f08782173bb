package bench

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/series"
)

// The two directory layouts the bench reads.
const (
	// LayoutM3 is series.csv (series,category,frequency,horizon,n_train,start) with train.csv and
	// test.csv as series,index,value (see Load).
	LayoutM3 = "m3"
	// LayoutLong is train.csv and test.csv, both series,date,value, one frequency for all
	// series (see LoadLong).
	LayoutLong = "long"
)

// DetectLayout names the layout of dir from the files present: LayoutM3 when series.csv is
// there, LayoutLong when train.csv and test.csv are there without it. The error names the
// directory and the missing files.
func DetectLayout(dir string) (string, error) {
	has := func(name string) bool {
		st, err := os.Stat(filepath.Join(dir, name))
		return err == nil && !st.IsDir()
	}
	switch {
	case has("series.csv"):
		return LayoutM3, nil
	case has("train.csv") && has("test.csv"):
		return LayoutLong, nil
	}
	return "", fmt.Errorf("%s: neither layout: want series.csv, train.csv and test.csv (M3 layout) or train.csv and test.csv with series,date,value (long layout)", dir)
}

// LoadDir reads dir in the layout DetectLayout finds. freq is the frequency of every series
// of the long layout; the M3 layout carries its own and refuses one.
func LoadDir(dir string, freq series.Frequency) ([]Entry, error) {
	layout, err := DetectLayout(dir)
	if err != nil {
		return nil, err
	}
	if layout == LayoutM3 {
		if freq != "" {
			return nil, fmt.Errorf("%s: M3 layout (series.csv present): the frequencies come from series.csv, --frequency is for the long layout only", dir)
		}
		return Load(dir, 0)
	}
	if freq == "" {
		return nil, fmt.Errorf("%s: long layout (train.csv, test.csv): give --frequency (one of %s)", dir, strings.Join(FrequencyNames(), ", "))
	}
	f, err := ParseFrequency(string(freq))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", dir, err)
	}
	return LoadLong(dir, f)
}

// M4Period is the season length m the M4 competition scored MASE with and gave its
// benchmarks (Naive2, and R's ts frequency): 1 for yearly, weekly and daily, 4 for quarterly,
// 12 for monthly, 24 for hourly (the M4 Competitor's Guide, 2018, and the organisers'
// benchmark code, which sets these as the ts frequency; from memory, and as the dataset README
// of the hourly dev half states for hourly).
func M4Period(f series.Frequency) int {
	switch f {
	case series.Hourly:
		return 24
	case series.Monthly:
		return 12
	case series.Quarterly:
		return 4
	}
	return 1
}

// FrequencyNames lists every frequency as the API spells it (series.Frequency values, the
// ForecastPortfolio's spec.frequency), finest first.
func FrequencyNames() []string {
	out := make([]string, len(series.Frequencies))
	for i, f := range series.Frequencies {
		out[i] = string(f)
	}
	return out
}

// ParseFrequency reads a --frequency value: the API's spelling (Hourly, Daily, Weekly,
// Monthly, Quarterly, Yearly, as series.ParseFrequency takes it) or any other case of it
// (hourly, as issue 16 wrote it).
func ParseFrequency(s string) (series.Frequency, error) {
	for _, f := range series.Frequencies {
		if strings.EqualFold(s, string(f)) {
			return f, nil
		}
	}
	return "", fmt.Errorf("frequency %q: want one of %s", s, strings.Join(FrequencyNames(), ", "))
}

// longPoint is one row of the long layout.
type longPoint struct {
	t    time.Time
	v    float64
	line int
}

// readLong reads a series,date,value file (dates as ingest.ParseDate reads them with no
// layout: RFC 3339 date-times and dates, UTC when no zone is given) into points per series,
// series in first-seen order. Values must be finite numbers. Errors are "file:line: field ...".
func readLong(path string) ([]string, map[string][]longPoint, error) {
	var order []string
	by := map[string][]longPoint{}
	err := readCSV(path, []string{"series", "date", "value"}, func(line int, rec map[string]string) error {
		id := rec["series"]
		if id == "" {
			return errors.New("field series: empty")
		}
		t, err := ingest.ParseDate(rec["date"], "")
		if err != nil {
			return fmt.Errorf("field date: %w", err)
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(rec["value"]), 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("field value: %q is not a finite number", rec["value"])
		}
		if _, ok := by[id]; !ok {
			order = append(order, id)
		}
		by[id] = append(by[id], longPoint{t: t.UTC(), v: v, line: line})
		return nil
	})
	return order, by, err
}

// LoadLong reads a directory in the long layout: train.csv and test.csv, both with the
// columns series,date,value (more columns are ignored; no quoting), every series of frequency
// freq. Rows may come in any order; per series the dates of train.csv must be consecutive
// periods of freq (no gaps, no duplicates) and test.csv must continue them. Each series'
// horizon is its number of test rows. Entries come in the order series first appear in
// train.csv, with Category the frequency's name (Hourly), Frequency M4Period(freq) and Freq freq. Errors
// name the file and line ("test.csv:12: ...").
func LoadLong(dir string, freq series.Frequency) ([]Entry, error) {
	trainPath, testPath := filepath.Join(dir, "train.csv"), filepath.Join(dir, "test.csv")
	order, train, err := readLong(trainPath)
	if err != nil {
		return nil, err
	}
	testOrder, test, err := readLong(testPath)
	if err != nil {
		return nil, err
	}
	for _, id := range testOrder {
		if _, ok := train[id]; !ok {
			return nil, fmt.Errorf("%s:%d: series %q has no rows in train.csv", testPath, test[id][0].line, id)
		}
	}
	out := make([]Entry, 0, len(order))
	for _, id := range order {
		tr, te := train[id], test[id]
		if len(te) == 0 {
			return nil, fmt.Errorf("%s:%d: series %q has no rows in test.csv (the horizon is its number of test rows)", trainPath, tr[0].line, id)
		}
		byTime := func(p []longPoint) {
			sort.SliceStable(p, func(i, j int) bool { return p[i].t.Before(p[j].t) })
		}
		byTime(tr)
		byTime(te)
		start := tr[0].t
		e := Entry{ID: id, Category: string(freq), Frequency: M4Period(freq), Freq: freq,
			Horizon: len(te), Start: start, Train: make([]float64, len(tr)), Test: make([]float64, len(te))}
		for k, p := range append(tr[:len(tr):len(tr)], te...) {
			path := trainPath
			if k >= len(tr) {
				path = testPath
			}
			if want := freq.Step(start, k); !p.t.Equal(want) {
				return nil, fmt.Errorf("%s:%d: series %q: date %s, expected %s (%s rows must be consecutive periods, without gaps or duplicates, and test.csv must continue train.csv)",
					path, p.line, id, p.t.Format(time.RFC3339), want.Format(time.RFC3339), freq)
			}
			if k < len(tr) {
				e.Train[k] = p.v
			} else {
				e.Test[k-len(tr)] = p.v
			}
		}
		out = append(out, e)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%s: no rows", trainPath)
	}
	return out, nil
}
