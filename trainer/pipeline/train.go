package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// Table names, as in the manifest and the file names under runs/<run>/units/<unit>/.
const (
	TableForecasts  = "forecasts"
	TableModels     = "models"
	TableEvaluation = "evaluation"
	TableRejected   = "rejected"
)

// ReadPlan reads runs/<run>/plan.json (a missing one is ErrConfig wrapping store.ErrNotFound).
func ReadPlan(ctx context.Context, out *store.Store, run string) (*Plan, error) {
	key := store.RunKey(run, store.PlanName)
	b, err := out.Get(ctx, key)
	if err != nil {
		if errors.Is(err, store.ErrNotFound) {
			return nil, fmt.Errorf("run %s has no plan (run plan first): %w: %w", run, ErrConfig, err)
		}
		return nil, storageErr(err)
	}
	return DecodePlan(b, out.Describe(key))
}

// openRun opens the output and reads the run's plan and the previous run's manifest (nil on
// a first run); the caller closes out.
func openRun(ctx context.Context, cfg *runconfig.Config) (out *store.Store, p *Plan, prev *Manifest, err error) {
	if out, err = openOutput(ctx, cfg); err != nil {
		return nil, nil, nil, err
	}
	if p, err = ReadPlan(ctx, out, cfg.Run); err == nil {
		prev, err = previous(ctx, out, cfg)
	}
	if err != nil {
		out.Close()
		return nil, nil, nil, err
	}
	return out, p, prev, nil
}

// loaded is one unit's input after collection.
type loaded struct {
	unit     Unit
	buckets  int // the plan's bucket count
	series   []series.Series
	rejected []ingest.Rejected
	err      error
	// skip says why the unit is not trained at all (its object was broken at plan); such a
	// unit writes nothing and is not an error: publish carries it forward.
	skip string
	// broken are the input objects this unit could not read (hash buckets: every object of
	// the pass, loadBuckets); dropped are series keys whose rows were in one of them, with why.
	broken  []BrokenObject
	dropped map[string]string
	// cutoff is the plan's (publish.maxStalePeriods judges staleness against it).
	cutoff time.Time
	// nodes are the unit's within-unit aggregates and partials its partial sums of spanning
	// nodes (hierarchy.go); nil without a hierarchy.
	nodes, partials []series.Series
}

// seriesAt is the i-th series the unit forecasts: its bottom series, then its aggregates.
func (l *loaded) seriesAt(i int) series.Series {
	if i < len(l.series) {
		return l.series[i]
	}
	return l.nodes[i-len(l.series)]
}

// RunTrain is the train command for one shard. It reads the shard's units (an object unit
// reads its object or row groups; bucket units share one pass over every input object that
// keeps only their buckets' rows, so memory grows with the shard, not the input), collects
// and cleans the series, forecasts them and writes each unit's tables (with the evaluation of
// the previous run's forecasts against the new actuals) and then its unit.json as soon as the
// unit's series are done, while the rest are fitted. When no series' design depends on the
// shard's other series (Fixed, PerSeries, or Auto with the plan's decision: design.Options.
// Standalone) a unit is fitted as soon as it is read (streamShard); otherwise every unit is
// read first and one design.Forecast call fits them all (trainWholeShard).
// It prints a progress line (summary.Progress) at each phase and every Env.ProgressEvery. A
// series that cannot be used goes to rejected.csv with the reason. A unit
// whose input is broken or gone is not written; the others are, and RunTrain then returns
// the first such error (exit 3) so the shard counts as failed and publish carries it forward.
func RunTrain(ctx context.Context, cfg *runconfig.Config, shard int, env Env) (summary.Summary, error) {
	start := env.now()
	sum := summary.Summary{Kind: summary.KindTrain, Shard: shard}
	st, err := Check(cfg)
	if err != nil {
		return sum, err
	}
	out, p, prev, err := openRun(ctx, cfg)
	if err != nil {
		return sum, err
	}
	defer out.Close()
	if shard < 0 || shard >= len(p.Shards) {
		return sum, fmt.Errorf("shard %d: the plan has shards 0..%d: %w", shard, len(p.Shards)-1, ErrConfig)
	}
	tr := startTracker(env, shard, len(p.Shards[shard].Units))
	defer tr.stopTicker()
	opts, err := designOptions(st, p, env.Workers)
	if err != nil {
		return sum, err
	}
	h := newHierarchy(cfg)
	var units []*loaded
	var fit fitted
	if alone := opts.Standalone(); alone != nil && !env.wholeShard {
		units, fit, err = streamShard(ctx, cfg, st, h, out, prev, p, shard, opts, alone, tr, env)
	} else {
		units, fit, err = trainWholeShard(ctx, cfg, st, h, out, prev, p, shard, opts, tr, env)
	}
	if err != nil {
		return sum, err // a read, the context or a write failed (cfg was validated above)
	}
	outcome := fit.outcome
	env.logf("train: shard %d: design %s, %s, series per design %v",
		shard, outcome.Mode, designSource(outcome), outcome.Counts())
	fitSeconds := fit.fitSeconds

	var firstErr error
	var broken []BrokenObject
	var cal summary.Calibration
	var stab summary.Stability
	acc := summary.Accuracy{Metric: string(st.Drift.Metric)}
	levelNodes, lv := map[string]int{}, levelSums{}
	for k, u := range units {
		if u.skip != "" {
			env.logf("train: shard %d unit %s: not trained: %s", shard, u.unit.ID, u.skip)
			broken = mergeBroken(broken, p.brokenAtPlan())
			continue
		}
		broken = mergeBroken(broken, u.broken)
		if u.err != nil {
			env.logf("train: shard %d unit %s: %v", shard, u.unit.ID, u.err)
			if firstErr == nil {
				firstErr = u.err
			}
			continue
		}
		done := fit.dones[k]
		sum.Series += done.Counts.Series
		sum.Trained += done.Counts.Trained
		sum.Rejected += done.Counts.Rejected
		addCounts(&sum.Models, done.Counts.Models)
		addCounts(&sum.Designs, done.Counts.Designs)
		addCounts(&sum.DesignsByShard, done.Counts.DesignsByShard)
		if done.Accuracy != nil {
			acc.Add(*done.Accuracy)
		}
		for _, l := range done.Levels {
			levelNodes[l.Name] += l.Nodes
			if l.Accuracy != nil {
				lv.addAccuracy(l.Name, *l.Accuracy)
			}
			if l.Calibration != nil {
				lv.addCalibration(l.Name, *l.Calibration)
			}
		}
		if done.Stability != nil {
			stab.Add(*done.Stability)
		}
		if done.Calibration != nil && !cal.Add(*done.Calibration) {
			env.logf("train: shard %d unit %s: previous quantile levels %v differ from %v; its calibration is not counted",
				shard, u.unit.ID, done.Calibration.Levels, cal.Levels)
		}
	}
	if acc.Evaluated > 0 {
		sum.Accuracy = &acc
	}
	sum.Broken = brokenText(broken)
	if cal.Series > 0 {
		sum.Calibration = &cal
	}
	if stab.Series > 0 {
		sum.Stability = &stab
	}
	if h != nil {
		sum.Levels = lv.summaries(levelNodes)
	}
	sum.DurationSeconds = env.now().Sub(start).Seconds()
	if fitSeconds > 0 {
		sum.SeriesPerSecond = math.Round(float64(fit.series)/fitSeconds*10) / 10
	}
	tr.finish()
	env.logf("train: shard %d: %d series, %d trained, %d rejected in %.1fs", shard, sum.Series, sum.Trained, sum.Rejected, sum.DurationSeconds)
	return sum, firstErr
}

// trainWholeShard reads every unit of the shard, then forecasts all their series with one
// design.Forecast call (its automatic design is chosen on the whole shard) and writes each unit
// as soon as its series are done (fitAndWrite).
func trainWholeShard(ctx context.Context, cfg *runconfig.Config, st Settings, h *hierarchy, out *store.Store, prev *Manifest,
	p *Plan, shard int, opts design.Options, tr *tracker, env Env) ([]*loaded, fitted, error) {
	units, err := loadShard(ctx, cfg, p, shard, p.Cutoff, env.Workers, tr)
	if err != nil {
		return nil, fitted{}, err
	}
	planned, rejected := 0, 0
	for _, u := range units {
		u.withNodes(h, p)
		planned += len(u.series) + len(u.rejected)
		rejected += len(u.rejected)
	}
	tr.fitting(planned)
	tr.done(rejected)
	fit, err := fitAndWrite(ctx, cfg, st, h, out, prev, units, opts, tr, env)
	return units, fit, err
}

// loadShard reads and collects the shard's units. A unit's broken input is kept in its err.
// Configuration errors (frequency, layout) end the shard. Object units are read by up to
// `workers` goroutines at once (each unit has its own collector, so every unit's series are
// what a sequential read gives); bucket units share one sequential pass over every object.
// Memory: the shard's collected series, which the design needs all together anyway, plus one
// object's decoding buffers per reader.
func loadShard(ctx context.Context, cfg *runconfig.Config, p *Plan, shard int, now time.Time, workers int, tr *tracker) ([]*loaded, error) {
	src, err := openSource(ctx, cfg.Source)
	if err != nil {
		return nil, err
	}
	defer src.st.Close()
	sh, err := newShardUnits(cfg, p, shard, now, src, tr)
	if err != nil {
		return nil, err
	}
	if err := readObjectUnits(ctx, src, p, sh.objects, sh.collectors, workers, tr, nil); err != nil {
		return nil, err
	}
	if err := sh.readBuckets(ctx, src, p, newHierarchy(cfg), tr); err != nil {
		return nil, err
	}
	for _, l := range sh.units {
		l.collect(sh.collectors[l.unit.ID])
	}
	return sh.units, nil
}

// shardUnits are a shard's units before reading: object units (read each on its own) and
// bucket units (read together in one pass), each with its collector.
type shardUnits struct {
	units      []*loaded // every unit, in the shard's order
	objects    []*loaded // object units to read (not those broken at plan)
	byBucket   map[int]*loaded
	collectors map[string]*ingest.Collector // by unit id; not changed while units are read
}

// newShardUnits sets up the shard's units and their collectors; a unit whose object was
// broken at plan is marked skipped and counted as read.
func newShardUnits(cfg *runconfig.Config, p *Plan, shard int, now time.Time, src *source, tr *tracker) (*shardUnits, error) {
	sh := &shardUnits{byBucket: map[int]*loaded{}, collectors: map[string]*ingest.Collector{}}
	for _, id := range p.Shards[shard].Units {
		u, _ := p.unit(id)
		c, err := ingest.NewCollector(cfg.Source, now)
		if err != nil {
			return nil, fmt.Errorf("%w: %w", ErrConfig, err)
		}
		if usesCovariates(cfg) {
			c.KeepFuture(cfg.Horizon)
		}
		l := &loaded{unit: u, buckets: p.Buckets, cutoff: now}
		sh.units = append(sh.units, l)
		sh.collectors[id] = c
		if u.Object == "" {
			sh.byBucket[u.Bucket] = l
			continue
		}
		o, _ := p.object(u.Object)
		if o.Broken != "" {
			l.skip = fmt.Sprintf("input object %s was broken at plan: %s", src.st.Describe(o.Key), o.Broken)
			tr.read() // nothing to read: counted as read, never written
			continue
		}
		sh.objects = append(sh.objects, l)
	}
	return sh, nil
}

// readBuckets reads the bucket units in one pass (loadBuckets) and counts them read.
func (sh *shardUnits) readBuckets(ctx context.Context, src *source, p *Plan, h *hierarchy, tr *tracker) error {
	if len(sh.byBucket) == 0 {
		return nil
	}
	if err := loadBuckets(ctx, src, p, h, sh.byBucket, sh.collectors); err != nil {
		return err
	}
	for range sh.byBucket {
		tr.read()
	}
	return nil
}

// collect takes a read unit's series and rejections out of its collector (nothing for a unit
// that failed or was skipped) and drops the series of objects that broke.
func (l *loaded) collect(c *ingest.Collector) {
	if l.err == nil && l.skip == "" {
		l.series, l.rejected = c.Finish()
		l.dropBroken()
	}
}

// withNodes adds a hierarchy's within-unit aggregates and partial sums to a collected unit
// (nothing without a hierarchy or for a unit that failed).
func (l *loaded) withNodes(h *hierarchy, p *Plan) {
	if h != nil && l.err == nil {
		extendTo(l.series, p.HierarchyEnd)
		l.nodes = h.aggregate(l.series, h.levelsWhere(true))
		l.partials = h.aggregate(l.series, h.levelsWhere(false))
	}
}

// readObjectUnits reads object units on up to workers goroutines. The first error that ends
// the shard (see fatal) stops the others and is returned; broken input stays in the unit.
// onRead (nil: none) is called on the reader's goroutine with each unit read, broken or not,
// and its collector; while it runs, that reader reads nothing else.
func readObjectUnits(ctx context.Context, src *source, p *Plan, units []*loaded, collectors map[string]*ingest.Collector, workers int, tr *tracker,
	onRead func(*loaded, *ingest.Collector)) error {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	rctx, cancel := context.WithCancel(ctx)
	defer cancel()
	next := make(chan *loaded)
	var (
		wg       sync.WaitGroup
		mu       sync.Mutex
		firstErr error
	)
	for w := 0; w < min(workers, len(units)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for l := range next {
				c := collectors[l.unit.ID] // read-only map access: no writer while reading
				o, _ := p.object(l.unit.Object)
				if l.err = src.unchanged(rctx, o); l.err == nil {
					l.err = src.scan(rctx, l.unit.Object, l.unit.Groups, func(r ingest.Row) error { c.Add(r); return nil })
				}
				if err := fatal(ctx, l.err); err != nil {
					mu.Lock()
					if firstErr == nil {
						firstErr = err
						cancel()
					}
					mu.Unlock()
					continue
				}
				tr.read()
				if onRead != nil {
					onRead(l, c)
				}
			}
		}()
	}
	for _, l := range units {
		if rctx.Err() != nil {
			break
		}
		next <- l
	}
	close(next)
	wg.Wait()
	if firstErr != nil {
		return firstErr
	}
	return ctx.Err()
}

// usesCovariates reports whether the regression members read covariates as features
// (features.covariates): only then are the covariates of rows dated after the history
// kept, for the horizon's periods, as known future values (ingest.Collector.KeepFuture).
// Otherwise such rows are dropped as before.
func usesCovariates(cfg *runconfig.Config) bool {
	return cfg.Features != nil && len(cfg.Features.Covariates) > 0
}

// fatal returns the errors that end the whole shard rather than one unit: anything that is
// not broken input (storage outages, refused credentials, cancellation).
func fatal(ctx context.Context, err error) error {
	if err == nil || errors.Is(err, ingest.ErrBrokenInput) {
		return ctx.Err()
	}
	return err
}

// writeUnit evaluates, builds and writes one unit's tables and then its unit.json.
func writeUnit(ctx context.Context, out *store.Store, cfg *runconfig.Config, st Settings, h *hierarchy, prev *Manifest,
	u *loaded, results []design.Result, errs []error) (UnitDone, error) {
	format := tableFormat(cfg)
	done := UnitDone{Version: ManifestVersion, Run: cfg.Run, Unit: u.unit.ID}
	if h == nil && st.CalibrateBands {
		calibrateUnitBands(results, errs, cfg.Source.NonNegative)
	}
	var uh unitHierarchy
	if h != nil {
		var err error
		if uh, err = h.reconcileUnit(cfg.Run, cfg.Source.Frequency, u, results, errs); err != nil {
			return done, err
		}
	}
	var rejected []tables.RejectedRow
	for _, r := range u.rejected {
		rejected = append(rejected, tables.RejectedRow{Key: r.Key, Reason: r.Reason})
	}
	var fc []tables.ForecastRow
	var mr []tables.ModelRow
	models, designs, byShard := map[string]int{}, map[string]int{}, map[string]int{}
	trained := 0
	for i := range results {
		s := u.seriesAt(i)
		r := results[i]
		level := ""
		if h != nil {
			level = h.levelOf(s.Key)
		}
		if errs[i] != nil {
			rejected = append(rejected, tables.RejectedRow{Key: s.Key, Reason: errs[i].Error()})
			continue
		}
		if why := unpublishable(r.Mean, r.Levels, r.Quantiles); why != "" {
			rejected = append(rejected, tables.RejectedRow{Key: s.Key, Reason: fmt.Sprintf("model %s: %s", r.Chosen, why)})
			continue
		}
		last := s.Len() - 1
		from := 0
		if h == nil { // a hierarchy publishes every node's whole horizon, reconciled
			var why string
			if from, why = staleness(s, last, len(r.Mean), u.cutoff, cfg.PublishGuard().MaxStalePeriods); why != "" {
				rejected = append(rejected, tables.RejectedRow{Key: s.Key, Reason: why})
				continue
			}
		}
		for k := from; k < len(r.Mean); k++ {
			row := tables.ForecastRow{Key: s.Key, Period: s.PeriodAt(last + k + 1), Step: k + 1, Model: r.Chosen, Mean: r.Mean[k], Level: level}
			for j := range r.Levels {
				row.Quantiles = append(row.Quantiles, r.Quantiles[j][k])
			}
			fc = append(fc, row)
		}
		mr = append(mr, tables.ModelRow{Key: s.Key, Model: r.Chosen, Params: paramsText(r.Result), BacktestErrors: r.StepErrors,
			Metric: string(r.Metric), Score: r.Expected, Notes: strings.Join(r.Notes, "; "), Features: r.Features,
			Design: r.Design, Segment: r.Segment.String(), DesignBy: r.From, Backtest: backtestRecord(r.Levels, r.Backtest), Level: level})
		if i >= len(u.series) {
			continue // an aggregate: counted by level, not as an input series
		}
		trained++
		models[r.Family]++
		designs[r.Design]++
		if r.From == design.FromShard {
			byShard[r.Design]++
		}
	}
	sort.Slice(rejected, func(i, j int) bool { return rejected[i].Key < rejected[j].Key })

	ev, err := evaluateUnit(ctx, out, st.Drift, cfg.Source.NonNegative, cfg.Source.Columns.Series, prev, u)
	if err != nil {
		return done, err
	}
	evals, acc, cal, prevFc, prevRun := ev.rows, ev.acc, ev.cal, ev.prevFc, ev.prevRun
	var stab summary.Stability
	newFc := map[string][]tables.ForecastRow{}
	for _, r := range fc {
		newFc[r.Key] = append(newFc[r.Key], r)
	}
	modelAt := make(map[string]int, len(mr))
	for i, r := range mr {
		modelAt[r.Key] = i
	}
	for _, s := range u.series {
		if m, ok := Movement(s, newFc[s.Key], prevFc[s.Key]); ok {
			stab.Add(m)
			if i, ok := modelAt[s.Key]; ok {
				mr[i].Movement, mr[i].MovementPoints = m.MovementSum/float64(m.Points), m.Points
			}
		}
	}
	if stab.Series > 0 {
		done.Stability = &stab
	}
	done.PreviousRun = prevRun
	if acc.Evaluated > 0 {
		done.Accuracy = &acc
	}
	if cal.Series > 0 {
		done.Calibration = &cal
	}
	var carried []tables.ForecastRow
	nCarried, nBroken, found := 0, 0, len(rejected)
	if h == nil { // a hierarchy is reconciled over this run's series only: no per-series carry-forward
		rejected, carried, nCarried, nBroken, err = carryForward(ctx, out, cfg.Source.Columns.Series, st.Selection.Levels, cfg.PublishGuard().MaxCarriedRuns, prev, u, rejected)
		if err != nil {
			return done, err
		}
	}
	fc = append(fc, carried...)
	if h != nil {
		aggRows, lv, err := evaluateNodes(ctx, out, st.Drift, cfg.Source.NonNegative, cfg.Source.Columns.Series, prev, u, h)
		if err != nil {
			return done, err
		}
		for i := range evals {
			evals[i].Level = h.bottom
		}
		evals = append(evals, aggRows...)
		lv.addAccuracy(h.bottom, acc)
		lv.addCalibration(h.bottom, cal)
		done.Levels = lv.summaries(uh.levelNodes)
	}
	done.Broken = u.broken
	done.Counts = Counts{Series: len(u.series) + len(u.rejected) + len(rejected) - found, Trained: trained, Rejected: len(rejected), Carried: nCarried, CarriedBroken: nBroken}
	if len(models) > 0 {
		done.Counts.Models = models
		done.Counts.Designs = designs
		if len(byShard) > 0 {
			done.Counts.DesignsByShard = byShard
		}
	}

	keys := cfg.Source.Columns.Series
	writers := []struct {
		table, name string
		fn          func(w io.Writer) error
	}{
		{TableForecasts, TableForecasts + "." + format, func(w io.Writer) error {
			return tables.WriteForecasts(w, format, tables.Header{Keys: keys, Quantiles: st.Selection.Levels}, fc)
		}},
		{TableModels, TableModels + "." + format, func(w io.Writer) error { return tables.WriteModels(w, format, keys, mr) }},
		{TableEvaluation, TableEvaluation + "." + format, func(w io.Writer) error { return tables.WriteEvaluation(w, format, keys, evals) }},
		{TableRejected, store.RejectedName, func(w io.Writer) error { return tables.WriteRejected(w, tables.CSV, keys, rejected) }},
	}
	if uh.nodes != nil {
		writers = append(writers, struct {
			table, name string
			fn          func(w io.Writer) error
		}{TableNodes, NodesName, func(w io.Writer) error { return json.NewEncoder(w).Encode(uh.nodes) }})
	}
	for _, wr := range writers {
		var buf bytes.Buffer
		if err := wr.fn(&buf); err != nil {
			return done, fmt.Errorf("unit %s: %s: %w", u.unit.ID, wr.table, err)
		}
		key := store.UnitKey(cfg.Run, u.unit.ID, wr.name)
		if err := out.Put(ctx, key, buf.Bytes()); err != nil {
			return done, storageErr(err)
		}
		done.Files = append(done.Files, File{Table: wr.table, Key: key, Bytes: int64(buf.Len()), SHA256: store.SHA256(buf.Bytes())})
	}
	if _, err := out.PutJSON(ctx, store.UnitKey(cfg.Run, u.unit.ID, store.UnitDoneName), done); err != nil {
		return done, storageErr(err)
	}
	return done, nil
}

// calibrateUnitBands scales the bands of the unit's forecast series by the factors their
// pooled backtest asks for (selection.CalibrateBands; a unit of fewer than 30 such series
// keeps its bands). Hierarchical runs keep the members' bands: their reconcile step builds
// the aggregates' bands from the backtest errors and scores every level's itself.
func calibrateUnitBands(results []design.Result, errs []error, nonNegative bool) {
	var pool []*selection.Result
	for i := range results {
		if errs[i] == nil {
			pool = append(pool, &results[i].Result)
		}
	}
	selection.CalibrateBands(pool, nonNegative)
}

// backtestRecord is the models table's record of a forecast's quantiles on its own backtest
// (means of the pinball and bias sums), nil without one.
func backtestRecord(levels []float64, b backtest.QuantileRecord) *tables.Calibration {
	if b.Points == 0 || len(b.Below) != len(levels) {
		return nil
	}
	n := float64(b.Points)
	r := &tables.Calibration{Levels: levels, Points: b.Points, Below: b.Below, Bias: b.BiasSum / n, Pinball: make([]float64, len(levels))}
	for j := range levels {
		r.Pinball[j] = b.PinballSum[j] / n
	}
	return r
}

// unpublishable says why a forecast may not be published, or "": every mean and quantile must
// be finite, and at each step the quantiles must not decrease with the level (levels are
// increasing, runconfig validates them). Values that overflow (a history with values near
// 1e155 squares past the float64 range) give NaN or infinite bands, which a reader cannot use.
func unpublishable(mean []float64, levels []float64, q [][]float64) string {
	for k, m := range mean {
		if math.IsNaN(m) || math.IsInf(m, 0) {
			return fmt.Sprintf("mean at step %d is %v", k+1, m)
		}
		for j := range levels {
			v := q[j][k]
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Sprintf("quantile %v at step %d is %v", levels[j], k+1, v)
			}
			if j > 0 && v < q[j-1][k] {
				return fmt.Sprintf("quantiles decrease at step %d: %v at level %v, %v at level %v", k+1, q[j-1][k], levels[j-1], v, levels[j])
			}
		}
	}
	return ""
}

// paramsText renders the fitted model and its parameters, sorted by name:
// "ETS(A,N,N) alpha=0.31 level0=12.5".
func paramsText(r selection.Result) string {
	names := make([]string, 0, len(r.Params))
	for k := range r.Params {
		names = append(names, k)
	}
	sort.Strings(names)
	parts := []string{r.Model}
	for _, k := range names {
		parts = append(parts, k+"="+strconv.FormatFloat(r.Params[k], 'g', 6, 64))
	}
	return strings.TrimSpace(strings.Join(parts, " "))
}

// evaluateUnit evaluates the previous run's forecast of the unit's series, read from the
// previous manifest's entries for the unit (previousUnits; an entry may itself be carried
// forward from an older run). A unit the previous run did not have is not evaluated, nor are
// units whose previous files were pruned.
func evaluateUnit(ctx context.Context, out *store.Store, d DriftRule, nonNegative bool, keys []string, prev *Manifest, u *loaded) (unitEvaluation, error) {
	metric := d.Metric
	acc := summary.Accuracy{Metric: string(metric)}
	var cal summary.Calibration
	if prev == nil {
		return unitEvaluation{acc: acc}, nil
	}
	cals := map[string]summary.Calibration{}
	ours := make(map[string]bool, len(u.series))
	for _, s := range u.series {
		ours[s.Key] = true
	}
	bySeries := map[string][]tables.ForecastRow{}
	levels := map[string][]float64{}
	expected := map[string]float64{}
	promised := map[string]*tables.Calibration{}
	source := map[string]string{}
	for _, entry := range previousUnits(prev, u.unit, u.buckets) {
		ff, okf := entry.file(TableForecasts)
		mf, okm := entry.file(TableModels)
		if !okf || !okm {
			continue
		}
		format := strings.TrimPrefix(ff.Key[strings.LastIndex(ff.Key, "."):], ".")
		var fcs []tables.ForecastRow
		var mrs []tables.ModelRow
		var header tables.Header
		err := readTable(ctx, out, ff, func(r io.Reader) (err error) { header, fcs, err = tables.ReadForecasts(r, format, keys); return })
		if err == nil {
			err = readTable(ctx, out, mf, func(r io.Reader) (err error) { mrs, err = tables.ReadModels(r, format, keys); return })
		}
		if errors.Is(err, store.ErrNotFound) {
			continue // pruned: nothing to evaluate, which is not a failure
		}
		if err != nil {
			return unitEvaluation{}, err
		}
		for _, r := range fcs {
			if ours[r.Key] {
				bySeries[r.Key] = append(bySeries[r.Key], r)
				levels[r.Key] = header.Quantiles
			}
		}
		for _, m := range mrs {
			if ours[m.Key] && m.Metric == string(metric) {
				expected[m.Key], source[m.Key], promised[m.Key] = m.Score, entry.Source, m.Backtest
			}
		}
	}
	var rows []tables.EvaluationRow
	for _, s := range u.series {
		exp, ok := expected[s.Key]
		if !ok {
			continue
		}
		row, ok := Evaluate(s, bySeries[s.Key], exp, d, nonNegative)
		if !ok {
			continue
		}
		row.PreviousRun = source[s.Key]
		if len(levels[s.Key]) > 0 {
			if c, ok := Calibrate(s, bySeries[s.Key], levels[s.Key], nonNegative, promised[s.Key]); ok {
				row.Calibration = EvaluationRecord(c)
				if !cal.Add(c) { // a unit whose previous entries used other levels keeps the first's
					row.Calibration = nil // one set of calibration columns per table
				} else {
					cals[s.Key] = c
				}
			}
		}
		rows = append(rows, row)
		accumulate(&acc, row)
	}
	return unitEvaluation{rows: rows, acc: acc, cal: cal, cals: cals, prevFc: bySeries, prevRun: prev.Run}, nil
}

// unitEvaluation is evaluateUnit's result: the evaluation rows, their accuracy and
// calibration sums, each evaluated series' calibration (cals, by key: what per-level sums are
// folded from), the previous forecasts by series and the run they came from.
type unitEvaluation struct {
	rows    []tables.EvaluationRow
	acc     summary.Accuracy
	cal     summary.Calibration
	cals    map[string]summary.Calibration
	prevFc  map[string][]tables.ForecastRow
	prevRun string
}

// previousUnits returns the previous manifest's entries that hold the previous forecasts of
// unit u's series: the entry with the same id; or, for a hash bucket b of a new power-of-two
// count n when the previous run used count p, bucket b mod p when p <= n (one entry), or the
// buckets b, b+n, b+2n, ... below p when p > n (a key's hash modulo the smaller count is the
// bucket modulo that count, both being powers of two).
func previousUnits(prev *Manifest, u Unit, buckets int) []ManifestUnit {
	if e, ok := prev.unit(u.ID); ok {
		return []ManifestUnit{e}
	}
	if u.Object != "" || buckets == 0 || !hashedLayout(prev.Partitioning) || prev.Buckets == 0 {
		return nil
	}
	var out []ManifestUnit
	add := func(b int) {
		if e, ok := prev.unit(BucketID(b, prev.Buckets)); ok {
			out = append(out, e)
		}
	}
	if prev.Buckets <= buckets {
		add(u.Bucket % prev.Buckets)
	} else {
		for b := u.Bucket; b < prev.Buckets; b += buckets {
			add(b)
		}
	}
	return out
}

// readTable reads a listed file, checks its checksum and decodes it.
func readTable(ctx context.Context, out *store.Store, f File, decode func(io.Reader) error) error {
	b, err := out.Get(ctx, f.Key)
	if err != nil {
		return storageErr(err)
	}
	if store.SHA256(b) != f.SHA256 {
		return fmt.Errorf("%s: checksum %s, the manifest says %s: %w", out.Describe(f.Key), store.SHA256(b), f.SHA256, ErrStorage)
	}
	if err := decode(bytes.NewReader(b)); err != nil {
		return fmt.Errorf("%s: %w", out.Describe(f.Key), err)
	}
	return nil
}

// designOptions is the run's design.Forecast options; under Auto with a plan that decided
// the design (Plan.Design) they carry that decision, so every shard applies the plan's
// choice and chooses by itself only for segments the plan's sample did not hold.
func designOptions(st Settings, p *Plan, workers int) (design.Options, error) {
	o := st.Design(workers)
	if o.Mode != design.Auto || p.Design == nil {
		return o, nil
	}
	dec, err := p.Design.Outcome()
	if err != nil {
		return o, fmt.Errorf("plan.json: design: %w: %w", err, ErrConfig)
	}
	o.Decided = dec
	return o, nil
}

// designSource says where a Forecast outcome's designs were chosen, for the log.
func designSource(out *design.Outcome) string {
	if out.Mode != design.Auto {
		return "declared"
	}
	plan, own := 0, 0
	for _, ch := range out.Choices {
		if ch.From == design.FromPlan {
			plan++
		} else {
			own++
		}
	}
	inner := out.InnerSeries
	cpu := out.InnerCPU
	if out.Fallback != nil {
		inner, cpu = out.Fallback.InnerSeries, out.Fallback.InnerCPU
	} else if plan > 0 {
		inner, cpu = 0, 0
	}
	return fmt.Sprintf("%d segments chosen by the plan, %d by this shard (%d inner-holdout series in %.1fs CPU)", plan, own, inner, cpu.Seconds())
}
