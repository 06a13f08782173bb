package design

import (
	"strings"

	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// History-length bands, relative to T = 2h + 2m + 2 observations (horizon h, season length
// m): the shortest history the inner holdout can use (h points held out, and h + 2m + 2 left
// to fit and backtest on, the bench's rule since the second session).
const (
	// BandShort: n < T; too short for the inner holdout, so the choice comes from a coarser
	// segment.
	BandShort = "short"
	// BandMedium: T <= n < 2T.
	BandMedium = "medium"
	// BandLong: n >= 2T.
	BandLong = "long"
)

// Any stands for every value of a segment field in a pooled segment.
const Any = "*"

// Segment is a group of series that share one design: frequency, demand class (Syntetos,
// Boylan & Croston 2005, selection.Classify) and history-length band.
type Segment struct {
	Frequency series.Frequency
	Class     string
	Band      string
}

// String is "frequency/class/band", e.g. "monthly/smooth/long"; pooled fields read "*".
func (s Segment) String() string {
	return strings.ToLower(string(s.Frequency)) + "/" + s.Class + "/" + s.Band
}

// coarser returns the segment one level up: the band pooled first, then the class; ok is
// false at the top (frequency only).
func (s Segment) coarser() (Segment, bool) {
	switch {
	case s.Band != Any:
		s.Band = Any
	case s.Class != Any:
		s.Class = Any
	default:
		return s, false
	}
	return s, true
}

// minInner is T = 2h + 2m + 2, the history length that separates the short band from the
// medium one (BandOf).
func minInner(h, m int) int { return 2*h + 2*max(m, 1) + 2 }

// minHoldout is 2h + m + 2, the shortest history that takes part in the inner holdout: with
// its last h points held out, the rest holds one horizon for the candidates' own backtest, one
// full season for the seasonal-naive MASE scale (Hyndman & Koehler 2006) and two more points.
// Members that need two seasons (seasonal decomposition, seasonal ETS) fit their non-seasonal
// forms there, as they do on any history that short. Why not 2h + 2m + 2 (minInner, the
// rule before): with weekly data (m = 52) that asks for 2h + 106 weeks, more than the two
// years of history most weekly demand portfolios keep, so such a portfolio never chose a design
// and took the first candidate everywhere, its regression members with their planned
// promotions included.
func minHoldout(h, m int) int { return 2*h + max(m, 1) + 2 }

// BandOf returns the band of a history of n observations for horizon h and season length m.
func BandOf(n, h, m int) string {
	t := minInner(h, m)
	switch {
	case n < t:
		return BandShort
	case n < 2*t:
		return BandMedium
	}
	return BandLong
}

// SegmentOf returns the segment of a cleaned series for horizon h and season length m.
func SegmentOf(s series.Series, h, m int) Segment {
	class, _, _ := selection.Classify(s.Values)
	return Segment{Frequency: s.Freq, Class: class, Band: BandOf(len(s.Values), h, m)}
}
