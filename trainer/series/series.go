// Package series holds the time-series value type the engine works on, its frequency and calendar.
package series

import (
	"math"
	"time"
)

// Frequency is the regular spacing of a series' observations.
type Frequency string

// The frequencies the engine understands. Weekly series are anchored on a weekday (see Series.Start).
const (
	Hourly    Frequency = "Hourly"
	Daily     Frequency = "Daily"
	Weekly    Frequency = "Weekly"
	Monthly   Frequency = "Monthly"
	Quarterly Frequency = "Quarterly"
	Yearly    Frequency = "Yearly"
)

// SeasonLength returns the usual seasonal period m for the frequency (common practice:
// Hyndman & Athanasopoulos, Forecasting: Principles and Practice, 3rd ed., section 2.1):
// hourly 24, daily 7, weekly 52, monthly 12, quarterly 4, yearly 1.
func (f Frequency) SeasonLength() int {
	switch f {
	case Hourly:
		return 24
	case Daily:
		return 7
	case Weekly:
		return 52
	case Monthly:
		return 12
	case Quarterly:
		return 4
	default:
		return 1
	}
}

// SeasonalPeriods returns every seasonal period of the frequency, shortest first, for the
// members that model more than one cycle (common practice: Hyndman & Athanasopoulos,
// Forecasting: Principles and Practice, 2nd ed., sections 2.1 and 11.1, which give 365.25
// days and 52.18 weeks, 365.25 / 7 rounded, a year): hourly 24 (day) and 168 (week), daily 7
// (week) and 365.25 (year), weekly 52.18 (year), monthly 12, quarterly 4, yearly none.
func (f Frequency) SeasonalPeriods() []float64 {
	switch f {
	case Hourly:
		return []float64{24, 168}
	case Daily:
		return []float64{7, 365.25}
	case Weekly:
		return []float64{52.18}
	case Monthly:
		return []float64{12}
	case Quarterly:
		return []float64{4}
	default:
		return nil
	}
}

// Step returns t moved forward by n periods of the frequency, calendar-correct for months,
// quarters and years (the day of month is kept; month-end anchors clamp to the last day).
func (f Frequency) Step(t time.Time, n int) time.Time {
	switch f {
	case Hourly:
		return t.Add(time.Duration(n) * time.Hour)
	case Daily:
		return t.AddDate(0, 0, n)
	case Weekly:
		return t.AddDate(0, 0, 7*n)
	case Monthly:
		return addMonths(t, n)
	case Quarterly:
		return addMonths(t, 3*n)
	case Yearly:
		return addMonths(t, 12*n)
	}
	panic("series: unknown frequency " + string(f))
}

// addMonths adds n calendar months, clamping the day to the length of the target month so that
// Jan 31 + 1 month is Feb 28 (or 29), not Mar 3 as time.AddDate would give.
func addMonths(t time.Time, n int) time.Time {
	y, m, d := t.Date()
	total := int(m) - 1 + n
	ty := y + floorDiv(total, 12)
	tm := time.Month(total - 12*floorDiv(total, 12) + 1)
	last := time.Date(ty, tm+1, 0, 0, 0, 0, 0, t.Location()).Day()
	if d > last {
		d = last
	}
	return time.Date(ty, tm, d, t.Hour(), t.Minute(), t.Second(), t.Nanosecond(), t.Location())
}

func floorDiv(a, b int) int {
	q := a / b
	if (a%b != 0) && ((a < 0) != (b < 0)) {
		q--
	}
	return q
}

// Series is one regularly spaced series. Values[i] is the observation at Freq.Step(Start, i);
// a missing observation is NaN. Covariates, when present, are aligned with Values and may extend
// past the end of Values by the forecast horizon (known future values such as planned prices).
type Series struct {
	Key        string
	Start      time.Time
	Freq       Frequency
	Values     []float64
	Covariates map[string][]float64
	// Notes records every cleaning decision taken on the series, in order, so outputs can say why.
	Notes []string
}

// Len returns the number of observations, missing ones included.
func (s *Series) Len() int { return len(s.Values) }

// Missing reports how many observations are NaN.
func (s *Series) Missing() int {
	n := 0
	for _, v := range s.Values {
		if math.IsNaN(v) {
			n++
		}
	}
	return n
}

// PeriodAt returns the time of observation i (i may be past the end, for forecast periods).
func (s *Series) PeriodAt(i int) time.Time { return s.Freq.Step(s.Start, i) }
