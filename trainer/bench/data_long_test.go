package bench

import (
	"bytes"
	"fmt"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/series"
)

// A long-layout directory of made-up daily Fenwick Lane Provisions sales: rows of a series may
// come in any order and interleaved with other series; dates are RFC 3339 date-times or dates.
func TestLoadLong(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "train.csv", "series,date,value\n"+
		"oats/north,2026-11-02T00:00:00Z,5\n"+
		"oats/north,2026-11-01T00:00:00Z,4\n"+
		"tea/south,2026-11-01,7.5\n"+
		"oats/north,2026-11-03T00:00:00Z,6\n"+
		"tea/south,2026-11-02,8\n")
	writeFile(t, dir, "test.csv", "series,date,value\n"+
		"tea/south,2026-11-03,9\n"+
		"oats/north,2026-11-05T00:00:00Z,8\n"+
		"oats/north,2026-11-04T00:00:00Z,7\n")
	es, err := LoadDir(dir, series.Daily)
	if err != nil {
		t.Fatal(err)
	}
	if len(es) != 2 {
		t.Fatalf("%d entries, want 2", len(es))
	}
	o, s := es[0], es[1]
	if o.ID != "oats/north" || o.Category != "Daily" || o.Frequency != 1 || o.Freq != series.Daily || o.Horizon != 2 ||
		!o.Start.Equal(time.Date(2026, 11, 1, 0, 0, 0, 0, time.UTC)) ||
		!equal(o.Train, []float64{4, 5, 6}) || !equal(o.Test, []float64{7, 8}) {
		t.Errorf("first entry %+v", o)
	}
	if s.ID != "tea/south" || s.Horizon != 1 || !equal(s.Train, []float64{7.5, 8}) || !equal(s.Test, []float64{9}) {
		t.Errorf("second entry %+v", s)
	}
	if got := o.Series(); got.Freq != series.Daily || got.Freq.SeasonLength() != 7 {
		t.Errorf("engine series frequency %q", got.Freq)
	}
}

func equal(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// Bad rows name the file and line (and the field or series); the M3 layout refuses
// --frequency and the long layout needs it.
func TestLoadLongErrors(t *testing.T) {
	const h = "series,date,value\n"
	okTrain := h + "a,2026-11-30T22:00:00Z,1\na,2026-11-30T23:00:00Z,2\n"
	okTest := h + "a,2026-12-01T00:00:00Z,3\n"
	for _, c := range []struct {
		name, train, test, want string
	}{
		{"value", h + "a,2026-11-30T22:00:00Z,1\na,2026-11-30T23:00:00Z,x\n", okTest, "train.csv:3: field value: \"x\" is not a finite number"},
		{"nan", okTrain, h + "a,2026-12-01T00:00:00Z,NaN\n", "test.csv:2: field value"},
		{"date", h + "a,30/11/2026 22:00,1\n", okTest, "train.csv:2: field date"},
		{"fields", h + "a,2026-11-30T22:00:00Z\n", okTest, "train.csv:2: 2 fields, header has 3"},
		{"column", "series,day,value\n", okTest, "train.csv:1: missing column \"date\""},
		{"gap", h + "a,2026-11-30T21:00:00Z,1\na,2026-11-30T23:00:00Z,2\n", okTest, "train.csv:3: series \"a\": date 2026-11-30T23:00:00Z, expected 2026-11-30T22:00:00Z"},
		{"duplicate", okTrain + "a,2026-11-30T23:00:00Z,2\n", okTest, "train.csv:4: series \"a\": date 2026-11-30T23:00:00Z, expected 2026-12-01T00:00:00Z"},
		{"test gap", okTrain, h + "a,2026-12-01T01:00:00Z,3\n", "test.csv:2: series \"a\": date 2026-12-01T01:00:00Z, expected 2026-12-01T00:00:00Z"},
		{"test only", okTrain, okTest + "b,2026-12-01T00:00:00Z,3\n", "test.csv:3: series \"b\" has no rows in train.csv"},
		{"train only", okTrain + "c,2026-11-30T23:00:00Z,2\n", okTest, "train.csv:4: series \"c\" has no rows in test.csv"},
		{"empty id", okTrain + ",2026-11-30T23:00:00Z,2\n", okTest, "train.csv:4: field series: empty"},
	} {
		dir := t.TempDir()
		writeFile(t, dir, "train.csv", c.train)
		writeFile(t, dir, "test.csv", c.test)
		_, err := LoadDir(dir, series.Hourly)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: err %v, want %q", c.name, err, c.want)
		}
	}

	dir := t.TempDir()
	writeFile(t, dir, "train.csv", okTrain)
	writeFile(t, dir, "test.csv", okTest+"a,2026-12-01T01:00:00Z,x\n")
	var out, errb bytes.Buffer
	if code := Main([]string{"--data", dir, "--frequency", "hourly"}, &out, &errb); code != 1 || !strings.Contains(errb.String(), "test.csv:3: field value") {
		t.Errorf("Main exit %d stderr %q, want 1 and test.csv:3: field value", code, errb.String())
	}
	if _, err := LoadDir(dir, ""); err == nil || !strings.Contains(err.Error(), "give --frequency") {
		t.Errorf("long layout without a frequency: %v", err)
	}
	if _, err := LoadDir(dir, "fortnightly"); err == nil || !strings.Contains(err.Error(), "want one of Hourly") {
		t.Errorf("a frequency the engine does not know: %v", err)
	}
	if code := Main([]string{"--data", dir, "--frequency", "fortnightly"}, &out, &errb); code != 2 {
		t.Errorf("--frequency fortnightly: exit %d, want 2", code)
	}
	errb.Reset()
	if code := Main([]string{"--data", dir, "--frequency", "hourly", "--choice", "median"}, &out, &errb); code != 2 || !strings.Contains(errb.String(), "want one-se, lowest or relative-se") {
		t.Errorf("--choice median: exit %d stderr %q, want 2 naming the rules", code, errb.String())
	}
	m3 := t.TempDir()
	writeFile(t, m3, "series.csv", "series,category,frequency,horizon,n_train,start\n")
	if _, err := LoadDir(m3, series.Hourly); err == nil || !strings.Contains(err.Error(), "--frequency is for the long layout only") {
		t.Errorf("M3 layout with a frequency: %v", err)
	}
	if _, err := LoadDir(t.TempDir(), ""); err == nil || !strings.Contains(err.Error(), "neither layout") {
		t.Errorf("empty directory: %v", err)
	}
}

// --frequency takes the API's spelling (Hourly) and, for convenience, any case of it.
func TestParseFrequency(t *testing.T) {
	for in, want := range map[string]series.Frequency{"Hourly": series.Hourly, "hourly": series.Hourly, "WEEKLY": series.Weekly, "Yearly": series.Yearly} {
		if got, err := ParseFrequency(in); err != nil || got != want {
			t.Errorf("%q: %q %v, want %q", in, got, err, want)
		}
	}
	if _, err := ParseFrequency("fortnightly"); err == nil || !strings.Contains(err.Error(), "Hourly, Daily, Weekly, Monthly, Quarterly, Yearly") {
		t.Errorf("fortnightly: %v", err)
	}
	// M4's seasonal periods (M4 Competitor's Guide; from memory).
	for f, m := range map[series.Frequency]int{series.Hourly: 24, series.Daily: 1, series.Weekly: 1, series.Monthly: 12, series.Quarterly: 4, series.Yearly: 1} {
		if M4Period(f) != m {
			t.Errorf("M4Period(%s) = %d, want %d", f, M4Period(f), m)
		}
	}
}

// R's snaive on weekly and daily data runs at ts frequency 1 (M4Period), where it is the naive
// forecast: its report says so; hourly (24), the M3 layout's yearly (1, a season of one) and
// the long layout's yearly keep the plain name.
func TestRReportNameAtFrequencyOne(t *testing.T) {
	long := func(f series.Frequency) Entry { return Entry{Frequency: M4Period(f), Freq: f} }
	m3Yearly := Entry{Frequency: 1}
	for _, c := range []struct {
		entries []Entry
		want    string
		seasons string
	}{
		{[]Entry{long(series.Weekly)}, "R snaive at m = 1 (naive)", "[Weekly]"},
		{[]Entry{long(series.Daily), long(series.Daily), long(series.Weekly)}, "R snaive at m = 1 (naive)", "[Daily Weekly]"},
		{[]Entry{long(series.Hourly)}, "R forecast::snaive", "[]"},
		{[]Entry{long(series.Yearly), m3Yearly}, "R forecast::snaive", "[]"},
	} {
		if got := rReportName("snaive", c.entries); got != c.want {
			t.Errorf("snaive on %+v: %q, want %q", c.entries, got, c.want)
		}
		if got := fmt.Sprint(seasonsAtOne(c.entries)); got != c.seasons {
			t.Errorf("seasonsAtOne(%+v) = %s, want %s", c.entries, got, c.seasons)
		}
	}
	if got := rReportName("ets", []Entry{long(series.Weekly)}); got != "R forecast::ets" {
		t.Errorf("ets on weekly data: %q", got)
	}
}
