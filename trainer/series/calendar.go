package series

import (
	"fmt"
	"strings"
	"time"
)

// Frequencies lists every Frequency the engine understands, finest first.
var Frequencies = []Frequency{Hourly, Daily, Weekly, Monthly, Quarterly, Yearly}

// ParseFrequency returns the Frequency named s (one of Frequencies, exact spelling).
func ParseFrequency(s string) (Frequency, error) {
	for _, f := range Frequencies {
		if string(f) == s {
			return f, nil
		}
	}
	return "", fmt.Errorf("%q is not one of %v", s, Frequencies)
}

// DefaultWeekAnchor is the weekday weekly periods start on when none is configured: Monday, as
// in ISO 8601 week numbering.
const DefaultWeekAnchor = time.Monday

// ParseWeekday returns the weekday named s ("Monday".."Sunday", case-insensitive; the empty
// string gives DefaultWeekAnchor).
func ParseWeekday(s string) (time.Weekday, error) {
	if s == "" {
		return DefaultWeekAnchor, nil
	}
	for d := time.Sunday; d <= time.Saturday; d++ {
		if strings.EqualFold(d.String(), s) {
			return d, nil
		}
	}
	return 0, fmt.Errorf("%q is not a weekday name (Monday..Sunday)", s)
}

// Calendar is a frequency together with the weekday weekly periods start on. It maps
// timestamps to period numbers and back, so a reader can place observations on the grid of
// Frequency.Step without walking it.
//
// Periods are labelled by their first instant, in UTC:
//
//	hourly     the top of the hour
//	daily      00:00 of the day
//	weekly     00:00 of the anchor weekday
//	monthly    00:00 on the 1st of the month
//	quarterly  00:00 on 1 January, April, July or October
//	yearly     00:00 on 1 January
type Calendar struct {
	Freq   Frequency
	Anchor time.Weekday // used by Weekly only
}

// PeriodStart returns the label of the period that contains t (t is first converted to UTC).
func (c Calendar) PeriodStart(t time.Time) time.Time {
	t = t.UTC()
	y, m, d := t.Date()
	switch c.Freq {
	case Hourly:
		return t.Truncate(time.Hour)
	case Daily:
		return time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
	case Weekly:
		back := (int(t.Weekday()) - int(c.Anchor) + 7) % 7
		return time.Date(y, m, d-back, 0, 0, 0, 0, time.UTC)
	case Monthly:
		return time.Date(y, m, 1, 0, 0, 0, 0, time.UTC)
	case Quarterly:
		return time.Date(y, m-(m-1)%3, 1, 0, 0, 0, 0, time.UTC)
	case Yearly:
		return time.Date(y, 1, 1, 0, 0, 0, 0, time.UTC)
	}
	panic("series: unknown frequency " + string(c.Freq))
}

// OnGrid reports whether t is exactly a period label (see Calendar).
func (c Calendar) OnGrid(t time.Time) bool { return c.PeriodStart(t).Equal(t) }

// Ordinal returns the number of the period containing t, counted from the period containing
// 1970-01-01 00:00 UTC; consecutive periods have consecutive ordinals, so for labels a and b,
// Freq.Step(a, Ordinal(b)-Ordinal(a)) == b.
func (c Calendar) Ordinal(t time.Time) int64 {
	p := c.PeriodStart(t)
	y, m, _ := p.Date()
	months := int64(y-1970)*12 + int64(m-1)
	switch c.Freq {
	case Hourly:
		return floorDiv64(p.Unix(), 3600)
	case Daily:
		return floorDiv64(p.Unix(), 86400)
	case Weekly:
		// 1970-01-01 was a Thursday; shift so that ordinal boundaries fall on the anchor.
		shift := (int64(time.Thursday) - int64(c.Anchor) + 7) % 7
		return floorDiv64(floorDiv64(p.Unix(), 86400)+shift, 7)
	case Monthly:
		return months
	case Quarterly:
		return floorDiv64(months, 3)
	case Yearly:
		return int64(y - 1970)
	}
	panic("series: unknown frequency " + string(c.Freq))
}

// Label returns the label of the period with the given ordinal; Label(Ordinal(t)) ==
// PeriodStart(t).
func (c Calendar) Label(ord int64) time.Time {
	switch c.Freq {
	case Hourly:
		return time.Unix(ord*3600, 0).UTC()
	case Daily:
		return time.Unix(ord*86400, 0).UTC()
	case Weekly:
		shift := (int64(time.Thursday) - int64(c.Anchor) + 7) % 7
		return time.Unix((ord*7-shift)*86400, 0).UTC()
	case Monthly:
		return time.Date(1970, time.Month(1+ord), 1, 0, 0, 0, 0, time.UTC)
	case Quarterly:
		return time.Date(1970, time.Month(1+3*ord), 1, 0, 0, 0, 0, time.UTC)
	case Yearly:
		return time.Date(1970+int(ord), 1, 1, 0, 0, 0, 0, time.UTC)
	}
	panic("series: unknown frequency " + string(c.Freq))
}

func floorDiv64(a, b int64) int64 {
	q := a / b
	if (a%b != 0) && ((a < 0) != (b < 0)) {
		q--
	}
	return q
}

// GridRule describes the labels of c's periods in words, for error messages.
func (c Calendar) GridRule() string {
	switch c.Freq {
	case Hourly:
		return "hourly periods start on the hour (minutes and seconds 0)"
	case Daily:
		return "daily periods start at 00:00"
	case Weekly:
		return "weekly periods start at 00:00 on " + c.Anchor.String()
	case Monthly:
		return "monthly periods start at 00:00 on the 1st"
	case Quarterly:
		return "quarterly periods start at 00:00 on 1 January, April, July or October"
	case Yearly:
		return "yearly periods start at 00:00 on 1 January"
	}
	return "unknown frequency " + string(c.Freq)
}
