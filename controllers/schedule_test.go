package controllers

import (
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// mustTime parses an RFC 3339 anchor time.
func mustTime(t *testing.T, s string) time.Time {
	t.Helper()
	v, err := time.Parse(time.RFC3339, s)
	if err != nil {
		t.Fatalf("anchor %q: %v", s, err)
	}
	return v
}

func TestScheduleParse(t *testing.T) {
	tests := map[string]struct {
		schedule   string
		timeZone   *string
		wantReason string
	}{
		"five fields":        {schedule: "30 2 * * *"},
		"macro":              {schedule: "@daily", timeZone: ptr.To("Europe/Berlin")},
		"six fields":         {schedule: "0 30 2 * * *", wantReason: forecastingv1alpha1.ReasonInvalidSchedule},
		"bad minute":         {schedule: "61 2 * * *", wantReason: forecastingv1alpha1.ReasonInvalidSchedule},
		"time zone in cron":  {schedule: "CRON_TZ=UTC 0 2 * * *", wantReason: forecastingv1alpha1.ReasonInvalidSchedule},
		"every is not cron":  {schedule: "@every 1h", wantReason: forecastingv1alpha1.ReasonInvalidSchedule},
		"unknown time zone":  {schedule: "0 2 * * *", timeZone: ptr.To("Mars/Olympus_Mons"), wantReason: forecastingv1alpha1.ReasonInvalidTimeZone},
		"empty zone is UTC":  {schedule: "0 2 * * *", timeZone: ptr.To("")},
		"two-part IANA zone": {schedule: "0 2 * * *", timeZone: ptr.To("America/Argentina/Buenos_Aires")},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			sched, reason, msg := scheduleParse(tc.schedule, tc.timeZone)
			if reason != tc.wantReason {
				t.Fatalf("reason = %q (%s), want %q", reason, msg, tc.wantReason)
			}
			if (sched == nil) != (tc.wantReason != "") {
				t.Errorf("sched = %v with reason %q", sched, reason)
			}
			if reason != "" && msg == "" {
				t.Errorf("reason %q without a message", reason)
			}
		})
	}
}

// TestScheduleAcrossDaylightSaving pins the wall-clock behaviour in two zones with different
// change dates (US: second Sunday of March / first Sunday of November; EU: last Sunday of March
// / October; IANA tz database 2026 rules): a time inside a spring-forward gap does not occur
// that day, a time inside a repeated hour occurs twice.
func TestScheduleAcrossDaylightSaving(t *testing.T) {
	tests := map[string]struct {
		schedule string
		zone     string
		from     string
		want     []string // the next schedule times in UTC
	}{
		"New York spring gap skips 02:30 on 8 March": {
			schedule: "30 2 * * *", zone: "America/New_York", from: "2026-03-07T12:00:00Z",
			// 7 March is EST (-5); 8 March 02:30 does not exist; 9 March is EDT (-4).
			want: []string{"2026-03-09T06:30:00Z", "2026-03-10T06:30:00Z"},
		},
		"New York fall repeat runs 01:30 twice on 1 November": {
			schedule: "30 1 * * *", zone: "America/New_York", from: "2026-10-31T12:00:00Z",
			want: []string{"2026-11-01T05:30:00Z", "2026-11-01T06:30:00Z", "2026-11-02T06:30:00Z"},
		},
		"Berlin spring gap skips 02:30 on 29 March": {
			schedule: "30 2 * * *", zone: "Europe/Berlin", from: "2026-03-28T12:00:00Z",
			want: []string{"2026-03-30T00:30:00Z", "2026-03-31T00:30:00Z"},
		},
		"Berlin fall repeat runs 02:30 twice on 25 October": {
			schedule: "30 2 * * *", zone: "Europe/Berlin", from: "2026-10-24T12:00:00Z",
			want: []string{"2026-10-25T00:30:00Z", "2026-10-25T01:30:00Z", "2026-10-26T01:30:00Z"},
		},
		"Berlin 03:00 on the spring day is one hour after 01:00": {
			schedule: "0 1,3 * * *", zone: "Europe/Berlin", from: "2026-03-28T23:00:00Z",
			want: []string{"2026-03-29T00:00:00Z", "2026-03-29T01:00:00Z"},
		},
		"UTC daily ignores both changes": {
			schedule: "@daily", zone: "UTC", from: "2026-03-28T12:00:00Z",
			want: []string{"2026-03-29T00:00:00Z", "2026-03-30T00:00:00Z"},
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			sched, reason, msg := scheduleParse(tc.schedule, ptr.To(tc.zone))
			if reason != "" {
				t.Fatalf("parse: %s: %s", reason, msg)
			}
			var got []string
			for at := mustTime(t, tc.from); len(got) < len(tc.want); {
				at = sched.Next(at)
				got = append(got, at.UTC().Format(time.RFC3339))
			}
			if diff := cmp.Diff(tc.want, got); diff != "" {
				t.Errorf("next times (-want,+got):\n%s", diff)
			}
		})
	}
}

func TestMostRecentScheduleTime(t *testing.T) {
	type want struct {
		Due     string
		Missed  int
		TooLate bool
		Next    string
	}
	tests := map[string]struct {
		// spec
		schedule string
		zone     string
		deadline *int64
		// status / environment
		earliest string
		now      string
		// expectations
		want want
	}{
		"nothing due yet": {
			schedule: "0 2 * * *", zone: "UTC",
			earliest: "2026-05-01T02:00:00Z", now: "2026-05-01T10:00:00Z",
			want: want{Next: "2026-05-02T02:00:00Z"},
		},
		"one due exactly now": {
			schedule: "0 2 * * *", zone: "UTC",
			earliest: "2026-05-01T02:00:00Z", now: "2026-05-02T02:00:00Z",
			want: want{Due: "2026-05-02T02:00:00Z", Missed: 1, Next: "2026-05-03T02:00:00Z"},
		},
		"three days down: one catch-up for the newest": {
			schedule: "0 2 * * *", zone: "UTC",
			earliest: "2026-05-01T02:00:00Z", now: "2026-05-04T09:00:00Z",
			want: want{Due: "2026-05-04T02:00:00Z", Missed: 3, Next: "2026-05-05T02:00:00Z"},
		},
		"within the starting deadline": {
			schedule: "0 2 * * *", zone: "UTC", deadline: ptr.To[int64](3600),
			earliest: "2026-05-01T02:00:00Z", now: "2026-05-02T02:59:59Z",
			want: want{Due: "2026-05-02T02:00:00Z", Missed: 1, Next: "2026-05-03T02:00:00Z"},
		},
		"past the starting deadline": {
			schedule: "0 2 * * *", zone: "UTC", deadline: ptr.To[int64](3600),
			earliest: "2026-05-01T02:00:00Z", now: "2026-05-02T03:00:01Z",
			want: want{Due: "2026-05-02T02:00:00Z", Missed: 1, TooLate: true, Next: "2026-05-03T02:00:00Z"},
		},
		"Berlin wall clock, missed over the spring change": {
			schedule: "30 2 * * *", zone: "Europe/Berlin",
			earliest: "2026-03-28T01:30:00Z", now: "2026-03-30T06:00:00Z",
			// 29 March 02:30 does not exist, so only 30 March 02:30 CEST = 00:30Z is missed.
			want: want{Due: "2026-03-30T00:30:00Z", Missed: 1, Next: "2026-03-31T00:30:00Z"},
		},
		"New York wall clock, repeated hour counts twice": {
			schedule: "30 1 * * *", zone: "America/New_York",
			earliest: "2026-10-31T05:30:00Z", now: "2026-11-01T07:00:00Z",
			want: want{Due: "2026-11-01T06:30:00Z", Missed: 2, Next: "2026-11-02T06:30:00Z"},
		},
		"long downtime beyond the walk cap still finds the newest": {
			schedule: "*/5 * * * *", zone: "UTC",
			earliest: "2026-05-01T00:00:00Z", now: "2026-05-20T13:07:00Z",
			want: want{Due: "2026-05-20T13:05:00Z", Missed: 102, Next: "2026-05-20T13:10:00Z"},
		},
		"sparse times beyond the walk cap": {
			schedule: "* * 1 1 *", zone: "UTC",
			earliest: "2026-01-01T00:00:00Z", now: "2026-07-01T00:00:00Z",
			want: want{Due: "2026-01-01T23:59:00Z", Missed: 1439, Next: "2027-01-01T00:00:00Z"},
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			sched, reason, msg := scheduleParse(tc.schedule, ptr.To(tc.zone))
			if reason != "" {
				t.Fatalf("parse: %s: %s", reason, msg)
			}
			st := mostRecentScheduleTime(sched, mustTime(t, tc.earliest), mustTime(t, tc.now), tc.deadline)
			got := want{Missed: st.Missed, TooLate: st.TooLate, Next: st.Next.UTC().Format(time.RFC3339)}
			if !st.Due.IsZero() {
				got.Due = st.Due.UTC().Format(time.RFC3339)
			}
			if diff := cmp.Diff(tc.want, got); diff != "" {
				t.Errorf("mostRecentScheduleTime (-want,+got):\n%s", diff)
			}
		})
	}
}

func TestRequeueAfter(t *testing.T) {
	now := mustTime(t, "2026-05-01T00:00:00Z")
	tests := map[string]struct {
		next time.Time
		want time.Duration
	}{
		"future":  {next: now.Add(time.Hour), want: time.Hour + 100*time.Millisecond},
		"past":    {next: now.Add(-time.Hour), want: 100 * time.Millisecond},
		"no next": {next: time.Time{}, want: 0},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			if got := requeueAfter(tc.next, now); got != tc.want {
				t.Errorf("requeueAfter = %v, want %v", got, tc.want)
			}
		})
	}
}
