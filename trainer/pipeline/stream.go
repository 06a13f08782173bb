package pipeline

import (
	"context"
	"runtime"
	"sort"
	"sync"
	"sync/atomic"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
)

// readAhead is how many read units wait for a free fitting call beyond those being read: one
// keeps the fitting fed while the next is decoded, more would only hold memory.
const readAhead = 1

// fitAhead is how many design.Forecast calls (one per unit read) run at once when the workers
// are as many as the Go scheduler's processors (the default; fitCalls). Each call's pool of
// workers ends with a partial wave (and one per design group); the next unit's call, already
// running, takes the processors those leave idle. The scheduler runs at most GOMAXPROCS of the
// 2 x workers goroutines at a time: the same work and parallelism, plus the working memory of
// the fits it has paused.
const fitAhead = 2

// fitCalls is how many design.Forecast calls streamShard runs at once: fitAhead, or 1 when the
// workers are fewer than GOMAXPROCS, so that a smaller --workers keeps its meaning (that many
// forecasting goroutines running).
func fitCalls(workers int) int {
	if workers > 0 && workers < runtime.GOMAXPROCS(0) {
		return 1
	}
	return fitAhead
}

// unitFit is one unit's forecasts while its series are fitted.
type unitFit struct {
	results []design.Result
	errs    []error
	left    int // series not yet forecast
}

// streamShard is train for a shard whose series' designs need none of the shard's other
// series (alone, design.Options.Standalone): readers, fitting calls and writers form a pipeline.
// Object units are read by up to env.Workers goroutines; each unit read is collected on its
// reader's goroutine and handed to the fitting (bucket units, which one pass over every object
// fills together, are handed over together once the pass ends), which forecasts a unit's
// standalone series with one design.Forecast call as soon as a call is free (fitCalls run at
// once), and hands each unit whose series are all done to the writers (startWriters).
//
// Series that do not stand alone (segments the plan's decision did not hold: the shard chooses
// their design on its own series) are kept aside and forecast with one design.Forecast call
// after every unit was fitted, in the shard's order, so their choice is the one a single call
// over the shard makes. A unit with such series is written only then.
//
// Memory: units being read (at most env.Workers, each with its decode buffers, and then one
// collected unit each waiting to be handed over), readAhead units waiting, fitCalls units being
// fitted, and up to 2 x unitWriters units queued or being written (the fitting waits when the
// writers are behind, and the readers when the fitting is). A written unit's series and
// results are released. The fallback's cost: a unit with series kept aside stays in memory
// with the results of its other series until the end, as every unit did before; a shard whose
// every segment the plan decided holds none.
func streamShard(ctx context.Context, cfg *runconfig.Config, st Settings, h *hierarchy, out *store.Store, prev *Manifest,
	p *Plan, shard int, opts design.Options, alone func(series.Series) bool, tr *tracker, env Env) ([]*loaded, fitted, error) {
	src, err := openSource(ctx, cfg.Source)
	if err != nil {
		return nil, fitted{}, err
	}
	defer src.st.Close()
	sh, err := newShardUnits(cfg, p, shard, p.Cutoff, src, tr)
	if err != nil {
		return nil, fitted{}, err
	}
	units := sh.units
	index := make(map[*loaded]int, len(units))
	for k, l := range units {
		index[l] = k
	}

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	ready := make(chan []*loaded, readAhead)
	send := func(batch []*loaded) {
		select {
		case ready <- batch:
		case <-ctx.Done():
		}
	}
	var readErr error
	var held, maxHeld atomic.Int64 // units collected and not yet written
	hold := func() {
		n := held.Add(1)
		for {
			if m := maxHeld.Load(); n <= m || maxHeld.CompareAndSwap(m, n) {
				return
			}
		}
	}
	go func() {
		defer close(ready)
		collect := func(l *loaded, c *ingest.Collector) {
			l.collect(c)
			l.withNodes(h, p)
			if l.err == nil {
				hold()
				tr.collected(len(l.series) + len(l.rejected))
				tr.done(len(l.rejected))
			}
		}
		readErr = readObjectUnits(ctx, src, p, sh.objects, sh.collectors, env.Workers, tr, func(l *loaded, c *ingest.Collector) {
			collect(l, c)
			send([]*loaded{l})
		})
		if readErr != nil {
			return
		}
		if readErr = sh.readBuckets(ctx, src, p, h, tr); readErr != nil {
			return
		}
		var batch []*loaded
		for _, l := range units {
			if l.unit.Object == "" {
				collect(l, sh.collectors[l.unit.ID])
				batch = append(batch, l)
			}
		}
		if len(batch) > 0 {
			send(batch)
		}
	}()

	fits := make([]unitFit, len(units))
	wr := startWriters(ctx, cancel, len(units), unitWriters, tr, func(k int) (UnitDone, error) {
		u := units[k]
		d, err := writeUnit(ctx, out, cfg, st, h, prev, u, fits[k].results, fits[k].errs)
		fits[k] = unitFit{}
		u.series, u.nodes, u.partials, u.rejected = nil, nil, nil, nil
		held.Add(-1)
		return d, err
	})
	type ref struct{ unit, at int }
	res := fitted{}
	var (
		mu        sync.Mutex // guards what the fitting calls share: res, parts, ferr, busy
		parts     []*design.Outcome
		ferr      error
		busy      int // calls in flight
		busySince time.Time
	)
	// forecast fits in (refs: each series' unit and place there) with one design.Forecast
	// call. fitSeconds adds the wall time during which at least one call runs.
	forecast := func(in []series.Series, refs []ref) *design.Outcome {
		emit := func(i int, r design.Result, err error) {
			k, j := refs[i].unit, refs[i].at
			f := &fits[k] // a unit's series are in one call at a time
			f.results[j], f.errs[j] = forWriting(r, h), err
			if j < len(units[k].series) {
				tr.done(1)
			}
			if f.left--; f.left == 0 {
				wr.queue <- k
			}
		}
		mu.Lock()
		if busy++; busy == 1 {
			busySince = env.now()
		}
		res.series += len(in)
		mu.Unlock()
		o, err := design.Forecast(ctx, in, opts, emit)
		mu.Lock()
		defer mu.Unlock()
		if busy--; busy == 0 {
			res.fitSeconds += env.now().Sub(busySince).Seconds()
		}
		if err != nil && ferr == nil {
			ferr = err
			cancel()
		}
		return o
	}
	failed := func() bool { mu.Lock(); defer mu.Unlock(); return ferr != nil }
	aside := make([][]int, len(units)) // per unit, its series kept for the end
	slots := make(chan struct{}, fitCalls(env.Workers))
	var fitting sync.WaitGroup
	for {
		slots <- struct{}{} // a free call first, so a unit taken is fitted at once
		batch, ok := <-ready
		if !ok || failed() {
			<-slots
			if !ok {
				break
			}
			continue // drain: the readers stop at the cancelled context
		}
		var in []series.Series
		var refs []ref
		for _, l := range batch {
			if l.err != nil {
				continue // broken input: reported by the caller, not written
			}
			k, n := index[l], len(l.series)+len(l.nodes)
			fits[k] = unitFit{results: make([]design.Result, n), errs: make([]error, n), left: n}
			for j := 0; j < n; j++ {
				if s := l.seriesAt(j); alone(s) {
					in = append(in, s)
					refs = append(refs, ref{k, j})
				} else {
					aside[k] = append(aside[k], j)
				}
			}
			if n == 0 {
				wr.queue <- k
			}
		}
		fitting.Add(1)
		go func() {
			defer fitting.Done()
			if o := forecast(in, refs); o != nil {
				mu.Lock()
				parts = append(parts, o)
				mu.Unlock()
			}
			<-slots
		}()
	}
	fitting.Wait()
	if ferr == nil && readErr == nil {
		tr.collected(0) // the fitting phase, if no unit was collected (every one broken or skipped)
		var in []series.Series
		var refs []ref
		for k, js := range aside {
			for _, j := range js {
				in = append(in, units[k].seriesAt(j))
				refs = append(refs, ref{k, j})
			}
		}
		if o := forecast(in, refs); ferr == nil {
			res.outcome = mergeOutcomes(o, parts)
		}
	}
	res.dones = wr.wait()
	res.maxHeld = int(maxHeld.Load())
	// A write error cancels the fitting and the reading, a fitting error the reading: the
	// first cause is reported, not the cancellation it caused.
	switch {
	case wr.err != nil:
		return nil, res, wr.err
	case ferr != nil:
		return nil, res, ferr
	case readErr != nil:
		return nil, res, readErr
	}
	return units, res, ctx.Err()
}

// mergeOutcomes is the outcome one design.Forecast call over the whole shard reports, from the
// calls streamShard made: parts (standalone series, every segment the plan's) and last (the
// series kept aside, the segments this shard chose; its head is the plan's decision). A
// segment's choice counts its series over every part; the plan's segments come first, by name.
func mergeOutcomes(last *design.Outcome, parts []*design.Outcome) *design.Outcome {
	if last.Mode != design.Auto {
		return last
	}
	at := map[string]int{}
	var planned []design.Choice
	for _, o := range parts {
		for _, ch := range o.Choices {
			if i, ok := at[ch.Segment.String()]; ok {
				planned[i].Series += ch.Series
				continue
			}
			at[ch.Segment.String()] = len(planned)
			planned = append(planned, ch)
		}
	}
	sort.Slice(planned, func(a, b int) bool { return planned[a].Segment.String() < planned[b].Segment.String() })
	out := *last
	out.Choices = append(planned, last.Choices...)
	return &out
}
