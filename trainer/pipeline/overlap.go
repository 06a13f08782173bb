package pipeline

import (
	"context"
	"slices"
	"sync"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
)

// unitWriters is how many goroutines evaluate, encode and write finished units while the
// remaining series are fitted. Two keep the storage round trip of one unit from holding up
// the next; more would only take cores from fitting.
const unitWriters = 2

// fitted is fitAndWrite's outcome.
type fitted struct {
	dones      []UnitDone // per unit, in the shard's order (zero for units with an input error)
	outcome    *design.Outcome
	series     int     // series passed to design.Forecast
	fitSeconds float64 // wall time of design.Forecast
	// maxHeld is the most units collected and not yet written at one time (streamShard;
	// 0 in fitAndWrite, which holds every unit).
	maxHeld int
}

// fitAndWrite forecasts the shard's series with one design.Forecast call over all of them (the
// design is chosen on the whole shard, exactly as when every unit was written afterwards) and
// writes each unit as soon as its last series is forecast, on unitWriters goroutines, while
// the other series are still being fitted. A unit with no series is written at once; a unit
// whose input failed, or that was skipped (its object broken at plan), is not written (the
// caller reports it).
//
// Memory: the shard's series and results are held as before; a written unit's results are
// released, and each writer holds one unit's encoded tables, so the peak is the shard's input
// plus its results plus unitWriters units' tables, never more than the sequential order held.
// The first write error cancels the fitting and is returned.
func fitAndWrite(ctx context.Context, cfg *runconfig.Config, st Settings, h *hierarchy, out *store.Store, prev *Manifest,
	units []*loaded, opts design.Options, tr *tracker, env Env) (fitted, error) {
	var all []series.Series
	var unitOf []int
	var node []bool // aggregated hierarchy nodes, not counted as series done
	offs := make([]int, len(units))
	left := make([]int, len(units))
	for k, u := range units {
		offs[k], left[k] = len(all), len(u.series)+len(u.nodes)
		all = append(all, u.series...)
		all = append(all, u.nodes...)
		for j := 0; j < left[k]; j++ {
			unitOf = append(unitOf, k)
			node = append(node, j >= len(u.series))
		}
	}
	left0 := slices.Clone(left)
	results := make([]design.Result, len(all))
	errs := make([]error, len(all))
	res := fitted{series: len(all)}

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	// each unit is queued once: sends never block
	wr := startWriters(ctx, cancel, len(units), len(units), tr, func(k int) (UnitDone, error) {
		lo, hi := offs[k], offs[k]+left0[k]
		d, err := writeUnit(ctx, out, cfg, st, h, prev, units[k], results[lo:hi], errs[lo:hi])
		clear(results[lo:hi])
		return d, err
	})
	for k, u := range units {
		if u.err == nil && u.skip == "" && left[k] == 0 {
			wr.queue <- k
		}
	}
	t0 := env.now()
	outcome, ferr := design.Forecast(ctx, all, opts, func(i int, r design.Result, err error) {
		results[i], errs[i] = forWriting(r, h), err
		if !node[i] {
			tr.done(1)
		}
		k := unitOf[i]
		if left[k]--; left[k] == 0 {
			wr.queue <- k
		}
	})
	res.fitSeconds = env.now().Sub(t0).Seconds()
	res.outcome = outcome
	res.dones = wr.wait()
	if wr.err != nil {
		return res, wr.err
	}
	return res, ferr
}

// writers evaluate, encode and write finished units (their indices sent on queue) on
// unitWriters goroutines. The first write error is kept and cancels the context; later units
// are then taken off the queue and not written, so a send never waits on a stopped writer.
type writers struct {
	queue chan int
	wg    sync.WaitGroup
	once  sync.Once
	err   error
	dones []UnitDone // per unit index; zero for units not written
}

// startWriters starts the writers of units units with a queue of the given capacity; write
// writes unit k.
func startWriters(ctx context.Context, cancel context.CancelFunc, units, capacity int, tr *tracker, write func(k int) (UnitDone, error)) *writers {
	w := &writers{queue: make(chan int, capacity), dones: make([]UnitDone, units)}
	for i := 0; i < min(unitWriters, max(units, 1)); i++ {
		w.wg.Add(1)
		go func() {
			defer w.wg.Done()
			for k := range w.queue {
				if ctx.Err() != nil {
					continue
				}
				d, err := write(k)
				if err != nil {
					w.once.Do(func() { w.err = err; cancel() })
					continue
				}
				w.dones[k] = d
				tr.written()
			}
		}()
	}
	return w
}

// wait closes the queue, waits for the writers and returns what they wrote (see err).
func (w *writers) wait() []UnitDone {
	close(w.queue)
	w.wg.Wait()
	return w.dones
}

// forWriting keeps of a forecast result what a unit's tables and the hierarchy read: nothing
// reads the one-step residuals (a series' whole history long), and the per-origin backtest
// errors only feed a hierarchy's weights and bands (h nil: none).
func forWriting(r design.Result, h *hierarchy) design.Result {
	r.Residuals = nil
	if h == nil {
		r.BacktestErrors, r.BacktestHeld = nil, nil
	}
	return r
}
