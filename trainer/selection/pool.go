package selection

import (
	"context"
	"fmt"
	"runtime"
	"sync"

	"almanac.dev/almanac/trainer/series"
)

// ForecastMany runs Forecast on every series of in with a pool of workers (<= 0: GOMAXPROCS)
// and calls emit(i, result, err) once per series, in input order, from the calling goroutine,
// so emit needs no locking. Each result depends only on its series and cfg, never on the
// number of workers. A series whose forecast fails (bad data, or a panic inside a model) gets
// its own error and the others carry on. ForecastMany returns an invalid cfg's error before
// starting, or ctx.Err() when the context ends first (series not yet emitted are dropped).
func ForecastMany(ctx context.Context, in []series.Series, cfg Config, workers int, emit func(i int, r Result, err error)) error {
	if err := cfg.Validate(); err != nil {
		return err
	}
	cfg = cfg.withDefaults()
	if hasAcrossShard(cfg.Zoo) {
		cfg.shard = newShardModels(in, cfg)
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, max(len(in), 1))

	type outcome struct {
		i   int
		r   Result
		err error
	}
	jobs := make(chan int)
	done := make(chan outcome, workers)
	stop := make(chan struct{})
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range jobs {
				r, err := protect(in[i], cfg)
				select {
				case done <- outcome{i, r, err}:
				case <-stop:
					return
				}
			}
		}()
	}
	go func() {
		defer close(jobs)
		for i := range in {
			select {
			case jobs <- i:
			case <-ctx.Done():
				return
			case <-stop:
				return
			}
		}
	}()
	defer func() {
		close(stop)
		wg.Wait()
	}()

	pending := map[int]outcome{}
	next := 0
	for next < len(in) {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case o := <-done:
			pending[o.i] = o
			for {
				p, ok := pending[next]
				if !ok {
					break
				}
				delete(pending, next)
				emit(p.i, p.r, p.err)
				next++
			}
		}
	}
	return nil
}

// protect runs forecast and turns a panic into that series' error.
func protect(s series.Series, cfg Config) (r Result, err error) {
	defer func() {
		if p := recover(); p != nil {
			r = Result{Key: s.Key}
			err = fmt.Errorf("selection: series %s: internal error: %v", s.Key, p)
		}
	}()
	return forecast(s, cfg)
}
