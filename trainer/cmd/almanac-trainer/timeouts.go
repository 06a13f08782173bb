package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"time"

	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
)

// timeoutFlags are the storage and step bounds every data command takes.
type timeoutFlags struct {
	request, step time.Duration
	// deadline is --step-deadline: a time by which the command must have ended (the controller
	// passes its Job's activeDeadlineSeconds, from the Job's creation, less a margin, so that a
	// stalled pod writes its summary and exits 4 before the Job controller kills it).
	deadline time.Time
}

func (t *timeoutFlags) register(fs *flag.FlagSet) {
	fs.DurationVar(&t.request, "request-timeout", store.DefaultRequestTimeout,
		"bound on one storage request: a stat, list or delete must answer, and a read or write move a byte, within it (0: none); past it exit 4")
	fs.DurationVar(&t.step, "step-timeout", 0,
		"bound on the whole command (0: none); past it exit 4")
	fs.Func("step-deadline", "`time` (RFC 3339) by which the whole command must end, past it exit 4 (the controller passes its Job's deadline less a margin)", func(v string) error {
		d, err := time.Parse(time.RFC3339, v)
		if err != nil {
			return fmt.Errorf("not an RFC 3339 time (2026-12-04T21:00:00Z): %v", err)
		}
		t.deadline = d
		return nil
	})
}

// limit is the step bound in force at now() (read only when a deadline is given): the shorter of --step-timeout and the time left to
// --step-deadline (at least 1ns once the deadline has passed, so the step ends at once), named
// as the flag that set it; 0 when neither is given.
func (t timeoutFlags) limit(now func() time.Time) (time.Duration, string) {
	d, by := t.step, fmt.Sprintf("--step-timeout %s", t.step)
	if !t.deadline.IsZero() {
		if left := max(t.deadline.Sub(now()), time.Nanosecond); d <= 0 || left < d {
			d, by = left, fmt.Sprintf("--step-deadline %s", t.deadline.UTC().Format(time.RFC3339))
		}
	}
	return d, by
}

// stepGrace is how long a command past its step timeout may take to return after its context
// ended before bounded gives up on it: enough to write a summary and close a store.
const stepGrace = 10 * time.Second

// bounded runs a step under the timeouts: store.RequestTimeout for each storage request, and
// a context ending at the step timeout. A step that still has not returned stepGrace after
// that (a call that does not see its context: a read blocked in the kernel on a hung mount or
// a named pipe without a writer) is abandoned: bounded returns an error wrapping
// store.ErrTimeout, the command writes its summary and the process exits 4, which also ends
// the stuck goroutine.
func (t timeoutFlags) bounded(ctx context.Context, kind string, stderr io.Writer, fn func(ctx context.Context) (summary.Summary, error)) (summary.Summary, error) {
	store.RequestTimeout = t.request
	step, by := t.limit(clock)
	if step <= 0 {
		return recovered(kind, stderr, func() (summary.Summary, error) { return fn(ctx) })
	}
	sctx, cancel := context.WithTimeout(ctx, step)
	defer cancel()
	type result struct {
		s   summary.Summary
		err error
	}
	done := make(chan result, 1)
	go func() {
		s, err := recovered(kind, stderr, func() (summary.Summary, error) { return fn(sctx) })
		done <- result{s, err}
	}()
	var r result
	select {
	case r = <-done:
	case <-sctx.Done():
		select {
		case r = <-done:
		case <-time.After(stepGrace):
			return summary.Summary{Kind: kind}, fmt.Errorf("%s did not finish within %s (a storage call that ignores cancellation, e.g. a read blocked on a hung file system): %w",
				kind, by, store.ErrTimeout)
		}
	}
	if r.err != nil && sctx.Err() != nil && ctx.Err() == nil {
		r.err = fmt.Errorf("%s did not finish within %s: %w", kind, by, r.err)
	}
	return r.s, r.err
}
