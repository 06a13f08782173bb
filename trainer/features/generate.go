package features

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"time"

	"gonum.org/v1/gonum/mat"

	"almanac.dev/almanac/trainer/series"
)

// Source is what the generators know about one series besides its values: where period 0
// sits on the calendar, and the covariates aligned with it (Covariates[name][i] belongs to
// period i; values past the end of the history are known future values).
type Source struct {
	Key        string
	Start      time.Time
	Freq       series.Frequency
	Covariates map[string][]float64
}

// Set is the generated feature set of one series under a Config. A feature row describes one
// (origin, step) pair of the direct multi-horizon strategy: origin o means y[0..o−1] is known,
// and the row predicts the target period j = o + step − 1. Every column reads only what is
// known at the origin:
//
//	calendar, events, Fourier   the calendar of period j (known in advance)
//	covariate c, lag L          c[j], c[j−L] (known future values by declaration)
//	lag L                       y[j−L], only in models for steps <= L, so j−L < o
//	rolling w stat              the statistic of y[o−w .. o−1]
//
// Target lags are measured from the target period, so the seasonal lag m means "the same
// period a season earlier" at every step it is allowed; rolling statistics are measured at the
// origin and carry the recent level into every step (common practice for direct strategies;
// Ben Taieb, Bontempi, Atiya & Sorjamaa 2012, "A review and comparison of strategies for
// multi-step ahead time series forecasting based on the NN5 forecasting competition", Expert
// Systems with Applications 39, section 2.3, from memory).
type Set struct {
	src   Source
	cal   series.Calendar
	base  int64 // calendar ordinal of period 0
	cols  []column
	names []string
	times []time.Time // period labels, grown on demand
}

type colKind uint8

const (
	kindDayOfWeek colKind = iota
	kindWeekend
	kindWeekOfYear
	kindMonth
	kindQuarter
	kindPosition
	kindEvent
	kindFourierSin
	kindFourierCos
	kindCovariate
	kindLag
	kindRolling
)

// column is one generated feature. Its meaning depends on kind: level is the weekday, month or
// quarter a dummy stands for, the event's window part, or the harmonic; n is a lag or window
// length; period is a Fourier period.
type column struct {
	kind   colKind
	level  int
	n      int
	period float64
	stat   string
	cov    []float64
	covKey string
	event  map[int]uint8 // period index -> window parts (eventOn, eventBefore, eventAfter)
}

// Event window parts.
const (
	eventOn uint8 = 1 << iota
	eventBefore
	eventAfter
)

// calendarFits says which calendar features fit each frequency: a feature that is constant
// within or meaningless for the frequency's periods is skipped.
var calendarFits = map[string][]series.Frequency{
	DayOfWeek:       {series.Hourly, series.Daily},
	Weekend:         {series.Hourly, series.Daily},
	WeekOfYear:      {series.Hourly, series.Daily, series.Weekly},
	Month:           {series.Hourly, series.Daily, series.Weekly, series.Monthly},
	Quarter:         {series.Hourly, series.Daily, series.Weekly, series.Quarterly},
	PositionInMonth: {series.Hourly, series.Daily, series.Weekly},
}

// NewSet generates the columns cfg declares for src, in this order: calendar, events, Fourier,
// covariates and their lags, target lags, rolling statistics. Calendar features are encoded for
// linear models: dayOfWeek as 6 dummies (Monday is the base level), month as 11 (January base),
// quarter as 3 (first quarter base), weekend as 0/1, weekOfYear as the ISO 8601 week number,
// positionInMonth as (day − 1)/(days in month − 1) of the period's first day (seasonal dummies:
// Hyndman & Athanasopoulos, FPP 3rd ed., section 7.4, from memory). The std statistic needs a
// window of at least 2 and is skipped for shorter ones. An invalid cfg, or a declared
// covariate the series does not have, is an error naming the series.
func NewSet(cfg Config, src Source) (*Set, error) {
	if err := cfg.Validate(); err != nil {
		return nil, fmt.Errorf("series %s: %w", src.Key, err)
	}
	s := &Set{src: src, cal: series.Calendar{Freq: src.Freq, Anchor: src.Start.Weekday()}}
	s.base = s.cal.Ordinal(src.Start)
	add := func(name string, c column) {
		s.names = append(s.names, name)
		s.cols = append(s.cols, c)
	}
	for _, name := range CalendarNames { // fixed order, whatever the order in cfg
		if !slices.Contains(cfg.Calendar, name) || !slices.Contains(calendarFits[name], src.Freq) {
			continue
		}
		switch name {
		case DayOfWeek:
			for d := 1; d < 7; d++ { // Tuesday..Sunday against Monday
				wd := time.Weekday((d + 1) % 7)
				add("dayOfWeek:"+wd.String()[:3], column{kind: kindDayOfWeek, level: int(wd)})
			}
		case Weekend:
			add("weekend", column{kind: kindWeekend})
		case WeekOfYear:
			add("weekOfYear", column{kind: kindWeekOfYear})
		case Month:
			for mo := time.February; mo <= time.December; mo++ {
				add("month:"+mo.String()[:3], column{kind: kindMonth, level: int(mo)})
			}
		case Quarter:
			for q := 2; q <= 4; q++ {
				add("quarter:"+strconv.Itoa(q), column{kind: kindQuarter, level: q})
			}
		case PositionInMonth:
			add("positionInMonth", column{kind: kindPosition})
		}
	}
	for _, e := range cfg.Events {
		win := s.eventWindows(e)
		add("event:"+e.Name, column{kind: kindEvent, level: int(eventOn), event: win})
		if e.Lead > 0 {
			add("event:"+e.Name+":before", column{kind: kindEvent, level: int(eventBefore), event: win})
		}
		if e.Lag > 0 {
			add("event:"+e.Name+":after", column{kind: kindEvent, level: int(eventAfter), event: win})
		}
	}
	for _, f := range cfg.Fourier {
		p := strconv.FormatFloat(f.Period, 'g', 6, 64)
		for k := 1; k <= f.Order; k++ {
			add(fmt.Sprintf("fourier%s:sin%d", p, k), column{kind: kindFourierSin, level: k, period: f.Period})
			add(fmt.Sprintf("fourier%s:cos%d", p, k), column{kind: kindFourierCos, level: k, period: f.Period})
		}
	}
	for _, name := range cfg.Covariates {
		v, ok := src.Covariates[name]
		if !ok {
			return nil, fmt.Errorf("series %s: covariate %q is declared in features.covariates but the series has no such column", src.Key, name)
		}
		add("covariate:"+name, column{kind: kindCovariate, cov: v, covKey: name})
		for _, l := range cfg.CovariateLags {
			add(fmt.Sprintf("covariate:%s:lag%d", name, l), column{kind: kindCovariate, n: l, cov: v, covKey: name})
		}
	}
	for _, l := range cfg.Lags {
		add(fmt.Sprintf("lag%d", l), column{kind: kindLag, n: l})
	}
	for _, w := range cfg.Windows {
		for _, st := range StatNames { // fixed order
			if !slices.Contains(cfg.Stats, st) || (st == StatStd && w < 2) {
				continue
			}
			add(fmt.Sprintf("rolling%d:%s", w, st), column{kind: kindRolling, n: w, stat: st})
		}
	}
	return s, nil
}

// eventWindows maps each period index touched by the event to its window parts. A date covers
// the periods that contain any part of its day (all 24 for hourly data); Lead periods before the
// first and Lag periods after the last are the windows around it.
func (s *Set) eventWindows(e Event) map[int]uint8 {
	w := map[int]uint8{}
	for _, d := range e.Dates {
		day, _ := time.Parse(DateLayout, d) // Validate checked the layout
		first := int(s.cal.Ordinal(day) - s.base)
		last := int(s.cal.Ordinal(day.Add(24*time.Hour-time.Nanosecond)) - s.base)
		for p := first; p <= last; p++ {
			w[p] |= eventOn
		}
		for p := first - e.Lead; p < first; p++ {
			w[p] |= eventBefore
		}
		for p := last + 1; p <= last+e.Lag; p++ {
			w[p] |= eventAfter
		}
	}
	return w
}

// Names returns every column name, in generation order.
func (s *Set) Names() []string { return s.names }

// Columns returns the indexes of the columns a step-ahead model may use: all but the target
// lags shorter than step.
func (s *Set) Columns(step int) []int {
	if step < 1 {
		panic("features: step must be >= 1")
	}
	out := make([]int, 0, len(s.cols))
	for i, c := range s.cols {
		if c.kind == kindLag && c.n < step {
			continue
		}
		out = append(out, i)
	}
	return out
}

// FirstOrigin is the smallest origin at which every column of cols is defined for step:
// o − w >= 0 for rolling windows, j − L >= 0 for target and covariate lags (j = o + step − 1).
func (s *Set) FirstOrigin(cols []int, step int) int {
	o := 0
	for _, i := range cols {
		c := s.cols[i]
		switch c.kind {
		case kindRolling:
			o = max(o, c.n)
		case kindLag, kindCovariate:
			o = max(o, c.n-step+1)
		}
	}
	return o
}

// Fill writes the row of (origin, step) for the columns cols into dst (len(dst) == len(cols)),
// reading y[0..origin−1] only. y may be longer than origin: what lies beyond is never read.
// A covariate that is missing (NaN, or not known that far ahead) is an error naming the
// series, the covariate and the period. Fill panics when the origin is below FirstOrigin or
// beyond len(y).
func (s *Set) Fill(dst []float64, cols []int, y []float64, origin, step int) error {
	if len(dst) != len(cols) {
		panic("features: Fill dst and cols differ in length")
	}
	if origin > len(y) || step < 1 {
		panic(fmt.Sprintf("features: Fill origin %d beyond the %d known values (or step %d < 1)", origin, len(y), step))
	}
	j := origin + step - 1
	known := y[:origin]
	for k, i := range cols {
		c := &s.cols[i]
		switch c.kind {
		case kindLag:
			if c.n < step || j-c.n < 0 {
				panic(fmt.Sprintf("features: lag %d is not known at origin %d for step %d", c.n, origin, step))
			}
			dst[k] = known[j-c.n]
		case kindRolling:
			if origin < c.n {
				panic(fmt.Sprintf("features: window %d does not fit before origin %d", c.n, origin))
			}
			dst[k] = rolling(c.stat, known[origin-c.n:])
		case kindCovariate:
			t := j - c.n
			if t < 0 {
				panic(fmt.Sprintf("features: covariate lag %d reaches before period 0 at origin %d", c.n, origin))
			}
			if t >= len(c.cov) || math.IsNaN(c.cov[t]) || math.IsInf(c.cov[t], 0) {
				what := "is missing"
				if t >= len(c.cov) {
					what = "has no known value"
				}
				return fmt.Errorf("series %s: covariate %q %s for period %s (needed by feature %s)",
					s.src.Key, c.covKey, what, s.period(t).Format(time.RFC3339), s.names[i])
			}
			dst[k] = c.cov[t]
		default:
			dst[k] = s.calendarValue(c, j)
		}
	}
	return nil
}

// period returns the label of period index j.
func (s *Set) period(j int) time.Time {
	for len(s.times) <= j {
		s.times = append(s.times, s.src.Freq.Step(s.src.Start, len(s.times)))
	}
	return s.times[j]
}

func (s *Set) calendarValue(c *column, j int) float64 {
	switch c.kind {
	case kindEvent:
		return b2f(c.event[j]&uint8(c.level) != 0)
	case kindFourierSin, kindFourierCos:
		t := float64(s.base + int64(j)) // absolute period number, so series with different starts agree
		x := 2 * math.Pi * float64(c.level) * t / c.period
		if c.kind == kindFourierSin {
			return math.Sin(x)
		}
		return math.Cos(x)
	}
	t := s.period(j)
	switch c.kind {
	case kindDayOfWeek:
		return b2f(int(t.Weekday()) == c.level)
	case kindWeekend:
		return b2f(t.Weekday() == time.Saturday || t.Weekday() == time.Sunday)
	case kindWeekOfYear:
		_, w := t.ISOWeek()
		return float64(w)
	case kindMonth:
		return b2f(int(t.Month()) == c.level)
	case kindQuarter:
		return b2f((int(t.Month())-1)/3+1 == c.level)
	case kindPosition:
		days := time.Date(t.Year(), t.Month()+1, 0, 0, 0, 0, 0, time.UTC).Day()
		return float64(t.Day()-1) / float64(days-1)
	}
	panic("features: unknown column kind")
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// rolling is a statistic of a window: the mean, the minimum, the maximum, or the sample
// standard deviation (divisor w − 1).
func rolling(stat string, w []float64) float64 {
	switch stat {
	case StatMin:
		return slices.Min(w)
	case StatMax:
		return slices.Max(w)
	}
	m := 0.0
	for _, v := range w {
		m += v
	}
	m /= float64(len(w))
	if stat == StatMean {
		return m
	}
	ss := 0.0
	for _, v := range w {
		ss += (v - m) * (v - m)
	}
	return math.Sqrt(ss / float64(len(w)-1))
}

// Matrix returns the design matrix of step for the origins from..to (inclusive, in order) over
// the columns cols, and the targets y[o+step−1]. It makes one allocation for the matrix and one
// for the targets. y must hold the targets (to + step − 1 < len(y)).
func (s *Set) Matrix(y []float64, cols []int, step, from, to int) (*mat.Dense, []float64, error) {
	if to+step-1 >= len(y) || from > to {
		panic(fmt.Sprintf("features: Matrix origins %d..%d for step %d need targets beyond the %d values", from, to, step, len(y)))
	}
	rows := to - from + 1
	data := make([]float64, rows*len(cols))
	target := make([]float64, rows)
	for r := 0; r < rows; r++ {
		o := from + r
		if err := s.Fill(data[r*len(cols):(r+1)*len(cols)], cols, y, o, step); err != nil {
			return nil, nil, err
		}
		target[r] = y[o+step-1]
	}
	if len(cols) == 0 {
		return nil, target, nil
	}
	return mat.NewDense(rows, len(cols), data), target, nil
}
