package store

import (
	"context"
	"errors"
	"fmt"
	"io"
	"sync/atomic"
	"time"

	"gocloud.dev/blob"
)

// DefaultRequestTimeout is RequestTimeout's value unless the command sets it
// (--request-timeout). Two minutes: a request that sends no byte for that long is not slow,
// it is stalled; a healthy object store answers a request in well under a second and a 64 MiB
// range at 1 MB/s still moves bytes every few milliseconds. Our choice, no source.
const DefaultRequestTimeout = 2 * time.Minute

// RequestTimeout bounds every storage request of the stores opened after it is set: a
// metadata request (stat, list page, delete, copy) must answer within it, and a read or write
// must move a byte within it (the clock restarts with every Read and Write call, so a large
// object streamed steadily never times out, while an endpoint that accepts the connection
// and never answers does). A request past it fails with ErrTimeout (exit 4, transient). 0
// turns the bound off. It reaches the drivers through the context, so it bounds the network
// stores (s3, gs, azblob); a file:// read blocked in the kernel (a hung network mount, a named
// pipe without a writer) does not see the context, and only the command's step timeout ends
// it.
var RequestTimeout = DefaultRequestTimeout

// ErrTimeout: a storage request got no answer within RequestTimeout. It wraps
// context.DeadlineExceeded, so callers that map that to a transient failure see it as one.
var ErrTimeout = fmt.Errorf("storage request timed out: %w", context.DeadlineExceeded)

// request runs one metadata request under the store's timeout and names a stall in its error.
func (s *Store) request(ctx context.Context, what string, fn func(ctx context.Context) error) error {
	if s.timeout <= 0 {
		return fn(ctx)
	}
	rctx, cancel := context.WithTimeout(ctx, s.timeout)
	defer cancel()
	err := fn(rctx)
	if err != nil && ctx.Err() == nil && errors.Is(rctx.Err(), context.DeadlineExceeded) {
		return fmt.Errorf("store: %s: no answer within %s: %w", what, s.timeout, ErrTimeout)
	}
	return err
}

// watchdog cancels a streaming request's context when one call (a Read, a Write, the opening
// request or the final Close) takes longer than d; the time between calls does not count.
type watchdog struct {
	d      time.Duration
	what   string
	cancel context.CancelFunc
	timer  *time.Timer // nil when d is 0
	fired  atomic.Bool
}

func newWatchdog(ctx context.Context, d time.Duration, what string) (context.Context, *watchdog) {
	wctx, cancel := context.WithCancel(ctx)
	w := &watchdog{d: d, what: what, cancel: cancel}
	if d > 0 {
		w.timer = time.AfterFunc(d, func() { w.fired.Store(true); cancel() })
		w.timer.Stop()
	}
	return wctx, w
}

// call runs one call of the request under the watchdog.
func (w *watchdog) call(fn func() error) error {
	if w.timer != nil {
		w.timer.Reset(w.d)
	}
	err := fn()
	if w.timer != nil {
		w.timer.Stop()
	}
	if err != nil && err != io.EOF && w.fired.Load() {
		return fmt.Errorf("store: %s: no answer within %s: %w", w.what, w.d, ErrTimeout)
	}
	return err
}

// stop ends the watchdog and cancels its context.
func (w *watchdog) stop() {
	if w.timer != nil {
		w.timer.Stop()
	}
	w.cancel()
}

// watchedReader is an object reader under a watchdog.
type watchedReader struct {
	r    *blob.Reader
	w    *watchdog
	name string
}

func (r *watchedReader) Read(p []byte) (n int, err error) {
	err = r.w.call(func() error {
		n, err = r.r.Read(p)
		return err
	})
	if err != nil && err != io.EOF && !errors.Is(err, ErrTimeout) {
		err = fmt.Errorf("store: read %s: %w", r.name, classify(err))
	}
	return n, err
}

func (r *watchedReader) Close() error {
	err := r.r.Close()
	r.w.stop()
	return err
}

// watchedWriter is an object writer under a watchdog.
type watchedWriter struct {
	w  *blob.Writer
	wd *watchdog
}

func (w *watchedWriter) Write(p []byte) (n int, err error) {
	err = w.wd.call(func() error {
		n, err = w.w.Write(p)
		return err
	})
	return n, err
}
