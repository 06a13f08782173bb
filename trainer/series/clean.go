package series

import (
	"fmt"
	"math"
)

// DefaultMaxGapFraction is the share of missing observations Clean tolerates when
// CleanRules.MaxGapFraction is 0.
const DefaultMaxGapFraction = 0.25

// CleanRules says how Clean treats a raw series.
type CleanRules struct {
	// NonNegative marks demand-like data: negative values (returns, corrections) are not demand
	// and are set to 0.
	NonNegative bool
	// TrimLeadingZeros drops zeros before the first non-zero value (the item was not yet sold).
	// A series that is zero throughout is kept untrimmed.
	TrimLeadingZeros bool
	// MaxGapFraction is the largest share of missing observations (after trimming) that is
	// filled; above it the series is rejected. 0 means DefaultMaxGapFraction; 1 fills any gaps.
	MaxGapFraction float64
	// MinLength is the shortest usable cleaned series; shorter ones are rejected. 0 means 1.
	MinLength int
}

// Clean prepares s for model fitting, in this order, recording each decision in s.Notes:
//
//  1. An infinite value is bad data: error naming the index.
//  2. Leading missing values are dropped (they carry nothing); Start moves forward.
//  3. With NonNegative, negative values are set to 0.
//  4. With TrimLeadingZeros, leading zeros are dropped, unless every value is zero.
//  5. If more than MaxGapFraction of the remaining observations are missing: error.
//  6. Interior gaps are filled by linear interpolation between the neighbouring observations;
//     trailing missing values repeat the last observation (common practice; Hyndman &
//     Athanasopoulos, FPP 3rd ed., section 13.9 discusses both).
//  7. If fewer than MinLength observations remain: error.
//  8. A constant or all-zero series is noted (selection treats it specially).
//
// Covariates are trimmed with the values. Clean returns an error, whose text is the reason,
// when the series cannot be used; s is then left in its partly cleaned state. Clean panics
// when MaxGapFraction is outside [0,1] or MinLength is negative.
func Clean(s *Series, r CleanRules) error {
	if r.MaxGapFraction < 0 || r.MaxGapFraction > 1 || math.IsNaN(r.MaxGapFraction) {
		panic(fmt.Sprintf("series: MaxGapFraction %v outside [0,1]", r.MaxGapFraction))
	}
	if r.MinLength < 0 {
		panic(fmt.Sprintf("series: negative MinLength %d", r.MinLength))
	}
	maxGap := r.MaxGapFraction
	if maxGap == 0 {
		maxGap = DefaultMaxGapFraction
	}
	minLen := r.MinLength
	if minLen == 0 {
		minLen = 1
	}
	for i, v := range s.Values {
		if math.IsInf(v, 0) {
			return fmt.Errorf("series %s: value at index %d is infinite", s.Key, i)
		}
	}

	first := 0
	for first < len(s.Values) && math.IsNaN(s.Values[first]) {
		first++
	}
	if first == len(s.Values) {
		return fmt.Errorf("series %s: no observed values (%d missing)", s.Key, len(s.Values))
	}
	if first > 0 {
		s.trim(first)
		s.note("dropped %d leading missing values", first)
	}

	if r.NonNegative {
		neg := 0
		for i, v := range s.Values {
			if v < 0 {
				s.Values[i] = 0
				neg++
			}
		}
		if neg > 0 {
			s.note("set %d negative values to 0 (demand cannot be negative)", neg)
		}
	}

	if r.TrimLeadingZeros {
		k := 0
		for k < len(s.Values) && (s.Values[k] == 0 || math.IsNaN(s.Values[k])) {
			k++
		}
		switch {
		case k == len(s.Values):
			s.note("all values are zero; leading zeros kept")
		case k > 0:
			s.trim(k)
			s.note("dropped %d leading zeros", k)
		}
	}

	miss := s.Missing()
	if frac := float64(miss) / float64(len(s.Values)); frac > maxGap {
		return fmt.Errorf("series %s: %d of %d values missing (%.0f%%), more than the %.0f%% allowed",
			s.Key, miss, len(s.Values), 100*frac, 100*maxGap)
	}
	if miss > 0 {
		interior, trailing := fillGaps(s.Values)
		if interior > 0 {
			s.note("filled %d interior missing values by linear interpolation", interior)
		}
		if trailing > 0 {
			s.note("filled %d trailing missing values with the last observation", trailing)
		}
	}

	if len(s.Values) < minLen {
		return fmt.Errorf("series %s: %d observations after cleaning, fewer than the %d required",
			s.Key, len(s.Values), minLen)
	}
	if c, ok := constant(s.Values); ok {
		if c == 0 {
			s.note("all values are zero")
		} else {
			s.note("constant series (every value %g)", c)
		}
	}
	return nil
}

// trim drops the first k observations and moves Start and the covariates with them.
func (s *Series) trim(k int) {
	s.Values = s.Values[k:]
	s.Start = s.PeriodAt(k)
	for name, c := range s.Covariates {
		if len(c) >= k {
			s.Covariates[name] = c[k:]
		} else {
			s.Covariates[name] = c[:0]
		}
	}
}

func (s *Series) note(format string, a ...any) {
	s.Notes = append(s.Notes, fmt.Sprintf(format, a...))
}

// fillGaps fills NaNs in x in place; x[0] must be observed. It returns how many interior and
// trailing values it filled.
func fillGaps(x []float64) (interior, trailing int) {
	last := 0 // index of the last observed value
	for i := 1; i < len(x); i++ {
		if math.IsNaN(x[i]) {
			continue
		}
		if gap := i - last - 1; gap > 0 {
			for j := last + 1; j < i; j++ {
				w := float64(j-last) / float64(i-last)
				x[j] = (1-w)*x[last] + w*x[i]
			}
			interior += gap
		}
		last = i
	}
	for j := last + 1; j < len(x); j++ {
		x[j] = x[last]
		trailing++
	}
	return interior, trailing
}

// constant reports whether every value of x equals the first.
func constant(x []float64) (float64, bool) {
	for _, v := range x[1:] {
		if v != x[0] {
			return 0, false
		}
	}
	return x[0], true
}
