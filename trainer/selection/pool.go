package selection

import (
	"context"
	"fmt"
	"runtime"
	"slices"
	"sync"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// ForecastMany runs Forecast on every series of in with a pool of workers (<= 0: GOMAXPROCS)
// and calls emit(i, result, err) once per series, in input order, from the calling goroutine,
// so emit needs no locking. Each result depends only on its series and cfg, never on the
// number of workers. A series whose forecast fails (bad data, or a panic inside a model) gets
// its own error and the others carry on. ForecastMany returns an invalid cfg's error before
// starting, or ctx.Err() when the context ends first (series not yet emitted are dropped).
func ForecastMany(ctx context.Context, in []series.Series, cfg Config, workers int, emit func(i int, r Result, err error)) error {
	return forecastPool(ctx, in, cfg, nil, workers, func(i int, rs []Result, errs []error) { emit(i, rs[0], errs[0]) })
}

// Variant is one design over Config's zoo: the members it selects among and its combination
// setting (CombineTop, CombineMethod, CombineMargin).
type Variant struct {
	// Members names (models.Spec.DisplayName) the zoo members this variant selects among, in
	// its own simplicity order (the earlier of two equal backtest scores wins, and a
	// combination's members are named in this order); nil is the whole zoo in zoo order.
	Members       []string
	CombineTop    int
	CombineMethod string
	CombineMargin float64
}

// ForecastManyVariants is ForecastMany for several designs at once: each series is cleaned
// once, backtested and ranked once per distinct member set, then finished once per variant,
// and each member's backtest on a plan and its refit on the whole series are computed once
// per series and shared by every variant that weighs the member. rs[v] and errs[v] equal what
// ForecastMany returns with cfg's zoo replaced by variants[v]'s members and its combination
// settings by variants[v]'s; cfg's own combination settings are not used. It costs about one
// ForecastMany over the members the variants name, not one per variant: a variant whose
// members are a subset of another's adds no fits, except on series too short for the larger
// set's backtest plan (member.forecasts).
func ForecastManyVariants(ctx context.Context, in []series.Series, cfg Config, variants []Variant, workers int, emit func(i int, rs []Result, errs []error)) error {
	if len(variants) == 0 {
		return fmt.Errorf("selection: no variants")
	}
	for j, v := range variants {
		c := cfg
		c.CombineTop, c.CombineMethod, c.CombineMargin = v.CombineTop, v.CombineMethod, v.CombineMargin
		if v.Members != nil {
			c.Zoo = nil
			for _, name := range v.Members {
				i := slices.IndexFunc(cfg.Zoo, func(sp models.Spec) bool { return sp.DisplayName() == name })
				if i < 0 {
					return fmt.Errorf("variants[%d]: member %q is not in the zoo", j, name)
				}
				c.Zoo = append(c.Zoo, cfg.Zoo[i])
			}
		}
		if err := c.Validate(); err != nil {
			return fmt.Errorf("variants[%d]: %w", j, err)
		}
	}
	return forecastPool(ctx, in, cfg, variants, workers, emit)
}

// forecastPool runs forecastVariants on every series with a pool of workers and emits in input order.
func forecastPool(ctx context.Context, in []series.Series, cfg Config, variants []Variant, workers int, emit func(i int, rs []Result, errs []error)) error {
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
		i    int
		rs   []Result
		errs []error
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
				rs, errs := protect(in[i], cfg, variants)
				select {
				case done <- outcome{i, rs, errs}:
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
				emit(p.i, p.rs, p.errs)
				next++
			}
		}
	}
	return nil
}

// protect runs forecastVariants and turns a panic into that series' error for every variant.
func protect(s series.Series, cfg Config, variants []Variant) (rs []Result, errs []error) {
	defer func() {
		if p := recover(); p != nil {
			n := max(len(variants), 1)
			rs, errs = make([]Result, n), make([]error, n)
			for i := range rs {
				rs[i] = Result{Key: s.Key}
				errs[i] = fmt.Errorf("selection: series %s: internal error: %v", s.Key, p)
			}
		}
	}()
	return forecastVariants(s, cfg, variants)
}
