package pipeline

import (
	"fmt"
	"time"

	"almanac.dev/almanac/trainer/series"
)

// staleness applies publish.maxStalePeriods (limit; 0 checks nothing) to the forecast of s,
// whose last observation is at index last and whose forecast has steps periods. A forecast
// period is past when it ends (the next period starts) at or before the cutoff; past is the
// number of leading forecast periods that are. from is the first step to publish (0-based):
// past, so that no published period ends before the cutoff. why is non-empty when the series
// is stale (more than limit periods past, or no period left) and is rejected instead.
func staleness(s series.Series, last, steps int, cutoff time.Time, limit int) (from int, why string) {
	if limit <= 0 || cutoff.IsZero() {
		return 0, ""
	}
	past := 0
	for past < steps && !s.PeriodAt(last+past+2).After(cutoff) {
		past++
	}
	switch {
	case past == steps:
		return 0, fmt.Sprintf("stale: its last observation %s is at least %d periods before the cutoff %s, the whole forecast is past (publish.maxStalePeriods %d)",
			s.PeriodAt(last).Format(time.DateOnly), past, cutoff.Format(time.RFC3339), limit)
	case past > limit:
		return 0, fmt.Sprintf("stale: its last observation %s is %d periods before the cutoff %s, more than publish.maxStalePeriods %d",
			s.PeriodAt(last).Format(time.DateOnly), past, cutoff.Format(time.RFC3339), limit)
	}
	return past, ""
}
