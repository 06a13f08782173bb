// Package bench measures the engine's accuracy and cost on competition data: the M3 layout
// (Load) and the long layout of one frequency (LoadLong).
package bench

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/series"
)

// Entry is one benchmark series: the training history, the holdout and its attributes.
type Entry struct {
	ID        string
	Category  string
	Frequency int // season length of the scoring (MASE, Naive2) and of R's ts: M3's 1, 4, 12; M4Period for the long layout
	// Freq is the engine frequency the series is forecast with (its models take
	// Freq.SeasonLength()); empty: the M3 frequency that Frequency names.
	Freq    series.Frequency
	Horizon int
	Start   time.Time
	Train   []float64
	Test    []float64
}

// Series returns the training data as an engine series.
func (e Entry) Series() series.Series {
	f := e.Freq
	if f == "" {
		f = freqOf(e.Frequency)
	}
	return series.Series{Key: e.ID, Start: e.Start, Freq: f, Values: append([]float64(nil), e.Train...)}
}

func freqOf(f int) series.Frequency {
	switch f {
	case 4:
		return series.Quarterly
	case 12:
		return series.Monthly
	}
	return series.Yearly
}

// Load reads a directory in the M3 CSV layout (series.csv, train.csv, test.csv; see the
// dataset README) and returns the series in series.csv order, keeping the first limit
// (limit <= 0: all). Errors name the file, line and field.
func Load(dir string, limit int) ([]Entry, error) {
	var out []Entry
	idx := map[string]int{}
	err := readCSV(filepath.Join(dir, "series.csv"), []string{"series", "category", "frequency", "horizon", "n_train", "start"},
		func(line int, rec map[string]string) error {
			if limit > 0 && len(out) >= limit {
				return nil
			}
			e := Entry{ID: rec["series"], Category: rec["category"]}
			var err error
			if e.Frequency, err = atoiField(rec, "frequency"); err != nil {
				return err
			}
			if e.Horizon, err = atoiField(rec, "horizon"); err != nil {
				return err
			}
			if e.Horizon < 1 {
				return fmt.Errorf("field horizon: %d is not positive", e.Horizon)
			}
			if _, err = atoiField(rec, "n_train"); err != nil {
				return err
			}
			if e.Start, err = parseStart(rec["start"], e.Frequency); err != nil {
				return fmt.Errorf("field start: %w", err)
			}
			if _, dup := idx[e.ID]; dup {
				return fmt.Errorf("field series: duplicate id %q", e.ID)
			}
			idx[e.ID] = len(out)
			out = append(out, e)
			return nil
		})
	if err != nil {
		return nil, err
	}
	for _, part := range []struct {
		file  string
		train bool
	}{{"train.csv", true}, {"test.csv", false}} {
		err := readCSV(filepath.Join(dir, part.file), []string{"series", "index", "value"}, func(line int, rec map[string]string) error {
			i, ok := idx[rec["series"]]
			if !ok {
				if limit > 0 {
					return nil
				}
				return fmt.Errorf("field series: %q is not in series.csv", rec["series"])
			}
			v, err := strconv.ParseFloat(rec["value"], 64)
			if err != nil {
				return fmt.Errorf("field value: %w", err)
			}
			pos, err := atoiField(rec, "index")
			if err != nil {
				return err
			}
			e := &out[i]
			dst := &e.Test
			want := len(e.Train) + len(e.Test) + 1
			if part.train {
				dst = &e.Train
				want = len(e.Train) + 1
			}
			if pos != want {
				return fmt.Errorf("field index: %d, expected %d (rows must be in order)", pos, want)
			}
			*dst = append(*dst, v)
			return nil
		})
		if err != nil {
			return nil, err
		}
	}
	for _, e := range out {
		if len(e.Train) == 0 || len(e.Test) != e.Horizon {
			return nil, fmt.Errorf("%s: series %s has %d training and %d test rows, horizon %d",
				dir, e.ID, len(e.Train), len(e.Test), e.Horizon)
		}
	}
	return out, nil
}

// parseStart reads "year-period" (period 1-based in the frequency's units).
func parseStart(s string, freq int) (time.Time, error) {
	y, p, ok := strings.Cut(s, "-")
	if !ok {
		return time.Time{}, fmt.Errorf("%q is not year-period", s)
	}
	yy, err1 := strconv.Atoi(y)
	pp, err2 := strconv.Atoi(p)
	if err1 != nil || err2 != nil || pp < 1 {
		return time.Time{}, fmt.Errorf("%q is not year-period", s)
	}
	months := 0
	if freq == 4 || freq == 12 {
		months = (pp - 1) * 12 / freq
	}
	return time.Date(yy, time.Month(1+months), 1, 0, 0, 0, 0, time.UTC), nil
}

func atoiField(rec map[string]string, f string) (int, error) {
	v, err := strconv.Atoi(rec[f])
	if err != nil {
		return 0, fmt.Errorf("field %s: %w", f, err)
	}
	return v, nil
}

// readCSV streams a comma-separated file without quoting (the dataset's format), checking the
// header holds the wanted columns, and calls row for each record. Errors are prefixed with
// "file:line:".
func readCSV(path string, want []string, row func(line int, rec map[string]string) error) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	return scanCSV(path, f, want, row)
}

func scanCSV(path string, r io.Reader, want []string, row func(line int, rec map[string]string) error) error {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	if !sc.Scan() {
		if err := sc.Err(); err != nil {
			return fmt.Errorf("%s: %w", path, err)
		}
		return fmt.Errorf("%s: empty file, expected a header", path)
	}
	header := strings.Split(strings.TrimRight(sc.Text(), "\r"), ",")
	col := map[string]int{}
	for i, h := range header {
		col[h] = i
	}
	for _, w := range want {
		if _, ok := col[w]; !ok {
			return fmt.Errorf("%s:1: missing column %q", path, w)
		}
	}
	rec := map[string]string{}
	for line := 2; sc.Scan(); line++ {
		t := strings.TrimRight(sc.Text(), "\r")
		if t == "" {
			continue
		}
		fields := strings.Split(t, ",")
		if len(fields) != len(header) {
			return fmt.Errorf("%s:%d: %d fields, header has %d", path, line, len(fields), len(header))
		}
		for name, i := range col {
			rec[name] = fields[i]
		}
		if err := row(line, rec); err != nil {
			return fmt.Errorf("%s:%d: %w", path, line, err)
		}
	}
	if err := sc.Err(); err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	return nil
}
