package ingest

import (
	"fmt"
	"math"
	"strings"
	"time"
)

var nan = math.NaN()

// isoLayouts are the ISO 8601 forms accepted when no layout is configured: a calendar date, or
// a date and time (separated by "T" or a space) with optional seconds, fraction and zone ("Z"
// or ±hh:mm). A time without a zone is UTC.
var isoLayouts = []string{
	"2006-01-02",
	"2006-01-02T15:04:05.999999999Z07:00",
	"2006-01-02T15:04:05.999999999",
	"2006-01-02T15:04Z07:00",
	"2006-01-02T15:04",
	"2006-01-02 15:04:05.999999999Z07:00",
	"2006-01-02 15:04:05.999999999",
	"2006-01-02 15:04Z07:00",
	"2006-01-02 15:04",
}

// ParseDate parses a date cell with layout (a Go time layout), or with the ISO 8601 forms when
// layout is empty. Surrounding spaces are ignored; a time without a zone is UTC.
func ParseDate(s, layout string) (time.Time, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return time.Time{}, fmt.Errorf("empty date")
	}
	if layout != "" {
		t, err := time.Parse(layout, s)
		if err != nil {
			return time.Time{}, fmt.Errorf("date %q does not match layout %q", clip(s), layout)
		}
		return t, nil
	}
	if t, ok := isoDay(s); ok {
		return t, nil
	}
	if len(s) >= 10 {
		for _, l := range isoLayouts {
			if t, err := time.Parse(l, s); err == nil {
				return t, nil
			}
		}
	}
	return time.Time{}, fmt.Errorf("date %q is not ISO 8601 (YYYY-MM-DD or YYYY-MM-DDThh:mm[:ss][Z|±hh:mm])", clip(s))
}

// CheckLayout reports whether a configured date layout carries at least a year, a month and a
// day, by formatting a reference time and parsing it back.
func CheckLayout(layout string) error {
	if layout == "" {
		return nil
	}
	ref := time.Date(2031, 11, 23, 19, 47, 0, 0, time.UTC)
	back, err := time.Parse(layout, ref.Format(layout))
	if err != nil {
		return fmt.Errorf("layout %q does not parse its own output: %v", layout, err)
	}
	if y, m, d := back.Date(); y != 2031 || m != 11 || d != 23 {
		return fmt.Errorf("layout %q does not carry year, month and day (Go layout, e.g. 02/01/2006)", layout)
	}
	return nil
}

// isoDay parses exactly YYYY-MM-DD without time.Parse (the common case, about a fifth of a CSV
// scan's time otherwise); ok is false for anything else, which then takes the general path.
func isoDay(s string) (time.Time, bool) {
	if len(s) != 10 || s[4] != '-' || s[7] != '-' {
		return time.Time{}, false
	}
	num := func(a, b int) (int, bool) {
		n := 0
		for i := a; i < b; i++ {
			c := s[i]
			if c < '0' || c > '9' {
				return 0, false
			}
			n = n*10 + int(c-'0')
		}
		return n, true
	}
	y, ok1 := num(0, 4)
	m, ok2 := num(5, 7)
	d, ok3 := num(8, 10)
	if !ok1 || !ok2 || !ok3 || m < 1 || m > 12 || d < 1 {
		return time.Time{}, false
	}
	t := time.Date(y, time.Month(m), d, 0, 0, 0, 0, time.UTC)
	if t.Day() != d { // 2026-02-30 normalises into March: not a date
		return time.Time{}, false
	}
	return t, true
}
