package controllers

import (
	"fmt"
	"strings"
	"time"
	// The IANA zone database is embedded so that spec.timeZone works without zoneinfo files
	// in the image.
	_ "time/tzdata"

	"github.com/robfig/cron/v3"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// maxScheduleSteps bounds how many schedule times mostRecentScheduleTime walks one by one before
// it jumps forward; a portfolio that missed more than this many times is caught up with one run.
const maxScheduleSteps = 100

// scheduleParse turns a portfolio's schedule and time zone into a cron schedule that yields times
// in that zone.
//
// It returns:
//   - sched, the schedule, or nil when either field is invalid;
//   - reason, empty on success, else forecastingv1alpha1.ReasonInvalidSchedule or
//     ReasonInvalidTimeZone;
//   - message, a sentence for the Stalled condition and the Warning Event.
//
// The zone is loaded from the IANA database (this package embeds time/tzdata, so no file in
// the image is needed). Like a Kubernetes CronJob, the schedule is read in the zone's wall clock:
// a time that falls in a daylight-saving gap does not occur that day, and a time in a repeated
// hour occurs twice, once per UTC offset (the behaviour of github.com/robfig/cron/v3, which
// the CronJob controller also uses; pinned by the tests in schedule_test.go).
func scheduleParse(schedule string, timeZone *string) (sched cron.Schedule, reason, message string) {
	zone := "UTC"
	if timeZone != nil && *timeZone != "" {
		zone = *timeZone
	}
	loc, err := time.LoadLocation(zone)
	if err != nil {
		return nil, forecastingv1alpha1.ReasonInvalidTimeZone,
			fmt.Sprintf("spec.timeZone %q is not an IANA time zone: %v", zone, err)
	}
	if strings.Contains(schedule, "TZ") {
		return nil, forecastingv1alpha1.ReasonInvalidSchedule,
			"spec.schedule must not set a time zone; use spec.timeZone"
	}
	s, err := cron.ParseStandard(schedule)
	if err != nil {
		return nil, forecastingv1alpha1.ReasonInvalidSchedule,
			fmt.Sprintf("spec.schedule %q is not a 5-field cron expression: %v", schedule, err)
	}
	spec, ok := s.(*cron.SpecSchedule)
	if !ok {
		return nil, forecastingv1alpha1.ReasonInvalidSchedule,
			fmt.Sprintf("spec.schedule %q is not a 5-field cron expression or calendar macro", schedule)
	}
	spec.Location = loc
	return spec, "", ""
}

// scheduleState is what the schedule says at one instant.
type scheduleState struct {
	// Due is the most recent schedule time at or before now and after the earliest time, or
	// zero when none has passed.
	Due time.Time
	// Missed counts the schedule times in (earliest, now]; more than one means the controller
	// was down or a run was in the way, and only Due is started (at most one catch-up).
	Missed int
	// TooLate is true when Due is older than the starting deadline allows; Due is then skipped.
	TooLate bool
	// Next is the first schedule time after now, for RequeueAfter.
	Next time.Time
}

// mostRecentScheduleTime evaluates sched between earliest (the last schedule time a run was
// started for, or the portfolio's creation) and now.
//
// It returns the most recent missed time, how many were missed, whether the most recent one is
// past deadline (nil: no deadline) and the next time after now. Times are walked one by one up to
// maxScheduleSteps; beyond that the walk jumps to a window just before now that is known to hold a
// schedule time (doubled from twice the longest gap seen until Next of its start is not after
// now), so the cost stays bounded after a long downtime (common practice: the Kubernetes CronJob
// controller also caps its walk). Missed is then a lower bound, which only feeds an Event.
func mostRecentScheduleTime(sched cron.Schedule, earliest, now time.Time, deadline *int64) scheduleState {
	st := scheduleState{Next: sched.Next(now)}
	var longest time.Duration
	prev := earliest
	for t := sched.Next(earliest); !t.IsZero() && !t.After(now); t = sched.Next(t) {
		st.Due, st.Missed = t, st.Missed+1
		longest = max(longest, t.Sub(prev))
		prev = t
		if st.Missed < maxScheduleSteps {
			continue
		}
		window := 2 * longest
		for now.Add(-window).After(t) && sched.Next(now.Add(-window)).After(now) && window < 20*366*24*time.Hour {
			window *= 2
		}
		if from := now.Add(-window); from.After(t) {
			t = from
		}
		for u := sched.Next(t); !u.IsZero() && !u.After(now); u = sched.Next(u) {
			st.Due, st.Missed = u, st.Missed+1
		}
		break
	}
	if !st.Due.IsZero() && deadline != nil && now.Sub(st.Due) > time.Duration(*deadline)*time.Second {
		st.TooLate = true
	}
	return st
}

// requeueAfter is the wait until next plus a small pad, so the reconcile lands after the
// schedule time and not a hair before it (the CronJob controller pads by 100ms too).
func requeueAfter(next, now time.Time) time.Duration {
	if next.IsZero() {
		return 0
	}
	d := next.Sub(now)
	if d < 0 {
		d = 0
	}
	return d + 100*time.Millisecond
}
