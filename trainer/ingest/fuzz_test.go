package ingest

import (
	"bytes"
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"
	"unicode/utf8"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
)

// checkRows asserts the invariants every scan must keep, whatever the input: it ends with nil
// or broken input; a row has a located Problem or a non-empty valid key, a date and a finite
// value; the Collector keeps only series with MinPoints on the grid and rejects with a reason.
func checkRows(t *testing.T, object string, src runconfig.Source, scan func(fn func(Row) error) error) {
	col, err := NewCollector(src, time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	keys := map[string]bool{}
	err = scan(func(r Row) error {
		keys[r.Key] = true
		if r.Problem != "" {
			if !strings.HasPrefix(r.Problem, object+" ") {
				t.Fatalf("problem %q does not name the object", r.Problem)
			}
		} else if r.Key == "" || !utf8.ValidString(r.Key) || r.Date.IsZero() || math.IsNaN(r.Value) || math.IsInf(r.Value, 0) {
			t.Fatalf("row without a problem is not usable: %+v", r)
		}
		col.Add(r)
		return nil
	})
	if err != nil {
		if !errors.Is(err, ErrBrokenInput) || !strings.Contains(err.Error(), object) {
			t.Fatalf("error %v is not broken input naming %s", err, object)
		}
		return
	}
	ok, rej := col.Finish()
	if len(ok)+len(rej) != len(keys) {
		t.Fatalf("%d keys in, %d kept + %d rejected out", len(keys), len(ok), len(rej))
	}
	cal := series.Calendar{Freq: series.Frequency(src.Frequency), Anchor: time.Monday}
	for _, s := range ok {
		if s.Missing() > s.Len()-MinPoints || !cal.OnGrid(s.Start) || math.IsNaN(s.Values[0]) || math.IsNaN(s.Values[s.Len()-1]) {
			t.Fatalf("kept series %q: start %v values %v", s.Key, s.Start, s.Values)
		}
	}
	for _, r := range rej {
		if r.Reason == "" {
			t.Fatalf("series %q rejected without a reason", r.Key)
		}
	}
}

func FuzzScanCSV(f *testing.F) {
	f.Add([]byte(fenwick))
	for _, c := range badCases() {
		if c.csv != "" && len(c.csv) < 4096 {
			f.Add([]byte(c.csv))
		}
	}
	f.Add([]byte("depot,item,week,units,promo\n\"a\nb\",x,2026-10-05,1,\"\"\"\"\n"))
	f.Add([]byte("\ufeffdepot,item,week,units,promo\r\nn,i,2026-10-05T00:00:00+00:00,1e3,-0\r\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		src := fenwickSource()
		checkRows(t, "demand.csv", src, func(fn func(Row) error) error {
			return ScanCSV(context.Background(), bytes.NewReader(data), "demand.csv", src, fn)
		})
	})
}

func FuzzScanParquet(f *testing.F) {
	good := fenwickParquet(f, 2)
	f.Add(good)
	f.Add(good[:len(good)-9])
	for _, at := range []int{4, 40, len(good) / 2, len(good) - 30} {
		b := bytes.Clone(good)
		b[at] ^= 0x5a
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		info, err := RowGroups(bytes.NewReader(data), int64(len(data)), "demand.parquet")
		if err != nil && !errors.Is(err, ErrBrokenInput) {
			t.Fatalf("RowGroups: %v is not broken input", err)
		}
		if err == nil {
			var rows int64
			for _, g := range info {
				rows += g.Rows
			}
			if rows > 100_000 {
				t.Skip("footer declares more rows than a fuzz input should scan (a benchmark's job)")
			}
		}
		src := fenwickSource()
		checkRows(t, "demand.parquet", src, func(fn func(Row) error) error {
			return ScanParquet(context.Background(), bytes.NewReader(data), int64(len(data)), "demand.parquet", src, nil, fn)
		})
	})
}

// FuzzParseDate: ParseDate never panics; an ISO date it accepts formats back (RFC 3339) to a
// string it parses to the same instant; a layout CheckLayout accepts parses its own output to
// the same calendar date.
func FuzzParseDate(f *testing.F) {
	for _, s := range []string{"2026-12-02", "2026-12-02T09:30:00Z", "2026-12-02 09:30", "2026-12-02T09:30:00.123456789+05:30",
		"2026-02-30", "02/12/2026", "", " 2026-12-02 ", "2026-12-02T24:00:00", "+2026-12-02", "0000-01-01", "2024-02-29", "2023-02-29", "2026-1-02"} {
		f.Add(s, "")
	}
	f.Add("02/12/2026", "02/01/2006")
	f.Add("Dec 2 2026", "Jan 2 2006")
	f.Add("2026-W49", "2006-W01")
	f.Fuzz(func(t *testing.T, s, layout string) {
		// The YYYY-MM-DD fast path agrees with time.Parse.
		if fast, ok := isoDay(s); ok {
			if slow, err := time.Parse("2006-01-02", s); err != nil || !slow.Equal(fast) {
				t.Fatalf("isoDay(%q) = %v, time.Parse gives %v, %v", s, fast, slow, err)
			}
		} else if slow, err := time.Parse("2006-01-02", s); err == nil && len(s) == 10 {
			t.Fatalf("isoDay(%q) refused what time.Parse reads as %v", s, slow)
		}
		tm, err := ParseDate(s, layout)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error")
			}
			return
		}
		if layout == "" {
			back, err := ParseDate(tm.Format(time.RFC3339Nano), "")
			if err != nil || !back.Equal(tm) {
				t.Fatalf("%q -> %v -> %v, %v", s, tm, back, err)
			}
		}
		if layout != "" && CheckLayout(layout) == nil {
			back, err := ParseDate(tm.Format(layout), layout)
			if err != nil {
				t.Fatalf("layout %q: %v formats to %q, which does not parse: %v", layout, tm, tm.Format(layout), err)
			}
			if y1, m1, d1 := tm.Date(); true {
				if y2, m2, d2 := back.Date(); y1 != y2 || m1 != m2 || d1 != d2 {
					t.Fatalf("layout %q: %v round-trips to %v", layout, tm, back)
				}
			}
		}
	})
}
