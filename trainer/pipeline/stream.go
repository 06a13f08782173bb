package pipeline

import (
	"context"
	"sort"
	"sync/atomic"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
)

// readAhead is how many read units wait for the fitter beyond those being read: one keeps
// the fitter fed while the next is decoded, more would only hold memory.
const readAhead = 1

// unitFit is one unit's forecasts while its series are fitted.
type unitFit struct {
	results []design.Result
	errs    []error
	left    int // series not yet forecast
}

// streamShard is train for a shard whose series' designs need none of the shard's other
// series (alone, design.Options.Standalone): readers, one fitter and writers form a pipeline.
// Object units are read by up to env.Workers goroutines; each unit read is collected on its
// reader's goroutine and handed to the fitter (bucket units, which one pass over every object
// fills together, are handed over together once the pass ends). The fitter forecasts a
// unit's standalone series with one design.Forecast call as soon as it gets the unit, and
// hands each unit whose series are all done to the writers (startWriters).
//
// Series that do not stand alone (segments the plan's decision did not hold: the shard chooses
// their design on its own series) are kept aside and forecast with one design.Forecast call
// after every unit was fitted, in the shard's order, so their choice is the one a single call
// over the shard makes. A unit with such series is written only then.
//
// Memory: units being read (at most env.Workers, each with its decode buffers), readAhead
// units waiting, one unit being fitted, and up to 2 x unitWriters units queued or being written
// (the fitter waits when the writers are behind, and the readers when the fitter is). A
// written unit's series and results are released. The fallback's cost: a unit with series
// kept aside stays in memory with the results of its other series until the end, as every
// unit did before; a shard whose every segment the plan decided holds none.
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
	var refs []ref
	emit := func(i int, r design.Result, err error) {
		// Keep only what the unit's tables and the hierarchy read (as fitAndWrite).
		r.Residuals = nil
		if h == nil {
			r.BacktestErrors, r.BacktestHeld = nil, nil
		}
		k, j := refs[i].unit, refs[i].at
		f := &fits[k]
		f.results[j], f.errs[j] = r, err
		if j < len(units[k].series) {
			tr.done(1)
		}
		if f.left--; f.left == 0 {
			wr.queue <- k
		}
	}
	res := fitted{}
	forecast := func(in []series.Series) (*design.Outcome, error) {
		t0 := env.now()
		o, err := design.Forecast(ctx, in, opts, emit)
		res.fitSeconds += env.now().Sub(t0).Seconds()
		res.series += len(in)
		return o, err
	}
	aside := make([][]int, len(units)) // per unit, its series kept for the end
	var parts []*design.Outcome
	var ferr error
	for batch := range ready {
		if ferr != nil {
			continue // drain: the readers stop at the cancelled context
		}
		var in []series.Series
		refs = refs[:0]
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
		o, err := forecast(in)
		if err != nil {
			ferr = err
			cancel()
			continue
		}
		parts = append(parts, o)
	}
	if ferr == nil && readErr == nil {
		tr.collected(0) // the fitting phase, if no unit was collected (every one broken or skipped)
		var in []series.Series
		refs = refs[:0]
		for k, js := range aside {
			for _, j := range js {
				in = append(in, units[k].seriesAt(j))
				refs = append(refs, ref{k, j})
			}
		}
		var o *design.Outcome
		if o, ferr = forecast(in); ferr == nil {
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
