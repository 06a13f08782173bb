package selection

import (
	"context"
	"fmt"
	"reflect"
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
	return forecastPool(ctx, in, cfg, nil, nil, workers, func(i int, rs []Result, errs []error) { emit(i, rs[0], errs[0]) })
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
//
// fits, when not nil, has one entry per series: fits[i] (nil: none) keeps in[i]'s member
// fits after the call and offers those an earlier call kept there, the backtests by plan and
// the refit of every member with the same spec, when the cleaned series (key, start,
// frequency, values, covariates) and cfg's settings other than zoo and combination are that
// call's; otherwise fits[i] is emptied and filled anew. A member's fits depend on the member,
// the series, the plan and those settings only, so the results are the same with or without
// fits. Members fitted across the call's series (regression.acrossShard) are never kept. One
// Fits must not serve two series of one call, and a series' data must not change between the
// calls that share its Fits.
func ForecastManyVariants(ctx context.Context, in []series.Series, cfg Config, variants []Variant, fits []*Fits, workers int, emit func(i int, rs []Result, errs []error)) error {
	if fits != nil && len(fits) != len(in) {
		return fmt.Errorf("selection: %d fits for %d series", len(fits), len(in))
	}
	if err := validVariants(cfg, variants); err != nil {
		return err
	}
	return forecastPool(ctx, in, cfg, variants, fits, workers, emit)
}

// validVariants reports the first variant that does not make a valid Config with cfg, by index.
func validVariants(cfg Config, variants []Variant) error {
	if len(variants) == 0 {
		return fmt.Errorf("selection: no variants")
	}
	for j, v := range variants {
		c := cfg
		c.CombineTop, c.CombineMethod, c.CombineMargin = v.CombineTop, v.CombineMethod, v.CombineMargin
		if v.Members != nil {
			c.Zoo = nil
			for _, name := range v.Members {
				i := MemberIndex(cfg.Zoo, name)
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
	return nil
}

// Fits is one series' member fits kept between calls of ForecastManyVariants (the zero value
// is empty and ready to use).
type Fits struct {
	mu       sync.Mutex
	series   series.Series // the cleaned series the fits are of
	settings Config        // the call's settings other than zoo and combination
	members  map[string]*member
}

// open locks f and returns its members by name for the cleaned series s under cfg, emptied
// first when f held another series' or other settings' fits; nil (and no lock) for a nil f.
func (f *Fits) open(s series.Series, cfg Config) map[string]*member {
	if f == nil {
		return nil
	}
	f.mu.Lock()
	set := cfg.Settings()
	if f.members == nil || !reflect.DeepEqual(f.series, s) || !reflect.DeepEqual(f.settings, set) {
		f.series, f.settings, f.members = s, set, map[string]*member{}
	}
	return f.members
}

// close unlocks f (after open).
func (f *Fits) close() {
	if f != nil {
		f.mu.Unlock()
	}
}

// forecastPool runs forecastVariants on every series with a pool of workers and emits in input order.
// fits (nil, or one per series) keeps member fits between calls (ForecastManyVariants).
func forecastPool(ctx context.Context, in []series.Series, cfg Config, variants []Variant, fits []*Fits, workers int, emit func(i int, rs []Result, errs []error)) error {
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
				var f *Fits
				if fits != nil {
					f = fits[i]
				}
				rs, errs := protect(in[i], cfg, variants, f)
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
func protect(s series.Series, cfg Config, variants []Variant, fits *Fits) (rs []Result, errs []error) {
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
	return forecastVariants(s, cfg, variants, fits)
}
