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
}

func (t *timeoutFlags) register(fs *flag.FlagSet) {
	fs.DurationVar(&t.request, "request-timeout", store.DefaultRequestTimeout,
		"bound on one storage request: a stat, list or delete must answer, and a read or write move a byte, within it (0: none); past it exit 4")
	fs.DurationVar(&t.step, "step-timeout", 0,
		"bound on the whole command (0: none; in the cluster the Job's activeDeadlineSeconds bounds it); past it exit 4")
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
	if t.step <= 0 {
		return recovered(kind, stderr, func() (summary.Summary, error) { return fn(ctx) })
	}
	sctx, cancel := context.WithTimeout(ctx, t.step)
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
			return summary.Summary{Kind: kind}, fmt.Errorf("%s did not finish within --step-timeout %s (a storage call that ignores cancellation, e.g. a read blocked on a hung file system): %w",
				kind, t.step, store.ErrTimeout)
		}
	}
	if r.err != nil && sctx.Err() != nil && ctx.Err() == nil {
		r.err = fmt.Errorf("%s did not finish within --step-timeout %s: %w", kind, t.step, r.err)
	}
	return r.s, r.err
}
