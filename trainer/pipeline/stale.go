package pipeline

import (
	"fmt"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
)

// staleness applies the cutoff rule to the forecast of s, whose last observation is at index
// last and whose forecast has steps periods. A forecast period is past when it ends (the next
// period starts) at or before the cutoff; past is the number of leading forecast periods that
// are. Always (limit 0, the default): a series whose whole forecast is past is rejected (why
// non-empty) and the others publish every step (from 0), so a reader whose actuals arrive
// late still gets, and the next run still evaluates, the periods the data has not reached.
// With limit > 0 (publish.maxStalePeriods) a series with more than limit past periods is
// rejected too, and one within it publishes from step past (0-based), so that no published
// period ends at or before the cutoff.
func staleness(s series.Series, last, steps int, cutoff time.Time, limit int) (from int, why string) {
	if cutoff.IsZero() || steps == 0 {
		return 0, ""
	}
	past := 0
	for past < steps && !s.PeriodAt(last+past+2).After(cutoff) {
		past++
	}
	switch {
	case past == steps:
		return 0, fmt.Sprintf("stale: its last observation %s is at least %d periods before the cutoff %s, the whole forecast is past",
			s.PeriodAt(last).Format(time.DateOnly), past, cutoff.Format(time.RFC3339))
	case limit <= 0:
		return 0, ""
	case past > limit:
		return 0, fmt.Sprintf("stale: its last observation %s is %d periods before the cutoff %s, more than publish.maxStalePeriods %d",
			s.PeriodAt(last).Format(time.DateOnly), past, cutoff.Format(time.RFC3339), limit)
	}
	return past, ""
}

// hierarchyStale applies the rule staleness applies always to a hierarchical run, whose
// every node is forecast from end, the input's newest period: when the whole horizon after
// end is past at the cutoff, no node has a forecast to publish and the run fails (exit 3)
// instead of publishing forecasts for periods that have ended.
func hierarchyStale(cfg *runconfig.Config, end, cutoff time.Time) error {
	f, err := series.ParseFrequency(cfg.Source.Frequency)
	if err != nil || end.IsZero() || cutoff.IsZero() || f.Step(end, cfg.Horizon+1).After(cutoff) {
		return nil
	}
	return fmt.Errorf("stale input: its newest period %s is at least %d periods before the cutoff %s, the whole forecast of every node is past: %w",
		end.Format(time.DateOnly), cfg.Horizon, cutoff.Format(time.RFC3339), ingest.ErrBrokenInput)
}
