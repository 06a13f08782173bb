package main

import (
	"flag"
	"io"
	"testing"
	"time"
)

// The step bound in force is the shorter of --step-timeout and the time left to
// --step-deadline, named by the flag that set it; a deadline already past ends the step at
// once; a value that is not an RFC 3339 time is refused at parsing.
func TestStepBoundFromTimeoutAndDeadline(t *testing.T) {
	now := time.Date(2026, 12, 4, 20, 0, 0, 0, time.UTC)
	parse := func(args ...string) (timeoutFlags, error) {
		var tf timeoutFlags
		fs := flag.NewFlagSet("plan", flag.ContinueOnError)
		fs.SetOutput(io.Discard)
		tf.register(fs)
		return tf, fs.Parse(args)
	}
	for _, c := range []struct {
		args []string
		want time.Duration
		by   string
	}{
		{nil, 0, "--step-timeout 0s"},
		{[]string{"--step-timeout", "5m"}, 5 * time.Minute, "--step-timeout 5m0s"},
		{[]string{"--step-deadline", "2026-12-04T21:00:00Z"}, time.Hour, "--step-deadline 2026-12-04T21:00:00Z"},
		{[]string{"--step-deadline", "2026-12-04T22:00:00+01:00", "--step-timeout", "5m"}, 5 * time.Minute, "--step-timeout 5m0s"},
		{[]string{"--step-deadline", "2026-12-04T20:02:00Z", "--step-timeout", "5m"}, 2 * time.Minute, "--step-deadline 2026-12-04T20:02:00Z"},
		{[]string{"--step-deadline", "2026-12-04T19:00:00Z"}, time.Nanosecond, "--step-deadline 2026-12-04T19:00:00Z"},
	} {
		tf, err := parse(c.args...)
		if err != nil {
			t.Fatalf("%v: %v", c.args, err)
		}
		if d, by := tf.limit(func() time.Time { return now }); d != c.want || by != c.by {
			t.Errorf("%v: bound %s by %q, want %s by %q", c.args, d, by, c.want, c.by)
		}
	}
	if _, err := parse("--step-deadline", "in an hour"); err == nil {
		t.Error("--step-deadline \"in an hour\" was accepted")
	}
}
