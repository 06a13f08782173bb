package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"sort"
	"strings"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// SpanningUnit is the unit id under which the reconcile step writes the nodes that span units
// (runs/<run>/units/hierarchy/...), and the manifest lists them. No input unit has it: bucket
// ids start with "b", object ids with "o-".
const SpanningUnit = "hierarchy"

// ReconciledName is the reconcile step's record, written last in the spanning unit's folder.
const ReconciledName = "reconciled.json"

// Reconciled is reconciled.json: what the reconcile step wrote, with checksums, for publish.
type Reconciled struct {
	Version int    `json:"version"`
	Run     string `json:"run"`
	// Method is the method that ran (the configured one, or reconcile's stated fallback), Note
	// why a fallback ran, Lambda MinTShrink's shrinkage intensity (0 otherwise).
	Method string  `json:"method"`
	Note   string  `json:"note,omitempty"`
	Lambda float64 `json:"lambda,omitempty"`
	// MaxDeviation is reconcile.MaxDeviation of the reconciled means: the largest relative
	// difference between an aggregate and the sum of its bottom series.
	MaxDeviation float64 `json:"maxDeviation"`
	// Forecasts maps each input unit to its reconciled forecasts table, which replaces the
	// unit's own in the manifest.
	Forecasts map[string]File `json:"forecasts"`
	// Models maps each input unit with a reconciled promise to its models table with those
	// promises (score and step errors), which replaces the unit's own in the manifest; a unit
	// none of whose nodes has one (nodes.json version 2) keeps its own.
	Models map[string]File `json:"models,omitempty"`
	// Files are the spanning nodes' tables (forecasts, models, evaluation, rejected).
	Files []File `json:"files"`
	// Levels counts the spanning nodes per level, with their evaluation's accuracy.
	Levels []summary.Level `json:"levels,omitempty"`
}

// RunReconcile is the reconcile command, run between train and publish when the plan says
// Reconcile. It reads only what the shards wrote: every unit's unit.json and nodes.json (base
// forecasts and backtest errors of the bottom series and within-unit aggregates, partial sums of the
// spanning nodes). It adds the partial sums into the spanning nodes' histories, forecasts them
// with the run's design, evaluates the previous run's spanning forecasts against those
// histories, reconciles the whole tree at once, and writes each unit's reconciled forecasts
// (units/<unit>/reconciled-forecasts.<format>), the spanning nodes' tables under
// units/hierarchy/ and, last, units/hierarchy/reconciled.json.
//
// A unit without this run's output (its shard failed) leaves the tree without its bottom
// series: the step refuses (exit 5, as the publish guard) rather than publish a hierarchy that
// does not add up, and the previous run stays published.
func RunReconcile(ctx context.Context, cfg *runconfig.Config, env Env) (summary.Summary, error) {
	start := env.now()
	sum := summary.Summary{Kind: summary.KindReconcile}
	st, err := Check(cfg)
	if err != nil {
		return sum, err
	}
	out, p, prev, err := openRun(ctx, cfg)
	if err != nil {
		return sum, err
	}
	defer out.Close()
	h := newHierarchy(cfg)
	if h == nil || !p.Reconcile {
		env.logf("reconcile: %s: the plan has no nodes that span units; nothing to do", cfg.Run)
		return sum, nil
	}
	freq, err := series.ParseFrequency(cfg.Source.Frequency)
	if err != nil {
		return sum, fmt.Errorf("source.frequency: %v: %w", err, ErrConfig)
	}
	var nodes []NodeBase
	partials := map[string][]*series.Series{}
	unitFc, unitMf := map[string]File{}, map[string]File{}
	for _, u := range p.Units {
		done, reason, err := verifyUnit(ctx, out, cfg.Run, u.ID)
		if err != nil {
			return sum, err
		}
		if reason != "" {
			return sum, fmt.Errorf("unit %s: %s; a hierarchy that spans units is reconciled only when every unit trained in this run: %w", u.ID, reason, ErrRefused)
		}
		nf, ok := unitFile(done.Files, TableNodes)
		fcf, okf := unitFile(done.Files, TableForecasts)
		if !ok || !okf {
			return sum, fmt.Errorf("unit %s: unit.json lists no %s or %s table (trained without the hierarchy?): %w", u.ID, NodesName, TableForecasts, ErrConfig)
		}
		unitFc[u.ID] = fcf
		if mf, ok := unitFile(done.Files, TableModels); ok {
			unitMf[u.ID] = mf
		}
		var doc NodesFile
		if err := readTable(ctx, out, nf, func(r io.Reader) error { return json.NewDecoder(r).Decode(&doc) }); err != nil {
			return sum, err
		}
		if !nodesVersionRead(doc.Version) || doc.Run != cfg.Run || doc.Unit != u.ID {
			return sum, fmt.Errorf("%s: version %d run %q unit %q, want %d %q %q: %w", nf.Key, doc.Version, doc.Run, doc.Unit, NodesVersion, cfg.Run, u.ID, store.ErrDamaged)
		}
		nodes = append(nodes, doc.Nodes...)
		for _, pt := range doc.Partials {
			s := series.Series{Key: pt.Key, Start: pt.Start, Freq: freq, Values: pt.Values}
			partials[pt.Key] = append(partials[pt.Key], &s)
		}
	}
	keys := make([]string, 0, len(partials))
	for k := range partials {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	spanning := make([]series.Series, len(keys))
	for i, k := range keys {
		spanning[i] = sumSeries(k, partials[k])
	}
	results := make([]design.Result, len(spanning))
	errs := make([]error, len(spanning))
	opts, err := designOptions(st, p, env.Workers)
	if err != nil {
		return sum, err
	}
	if _, err := design.Forecast(ctx, spanning, opts, func(i int, r design.Result, err error) {
		results[i], errs[i] = r, err
	}); err != nil {
		return sum, err
	}
	var rejected []tables.RejectedRow
	levelNodes := map[string]int{}
	for i, s := range spanning {
		if errs[i] == nil {
			if why := unpublishable(results[i].Mean, results[i].Levels, results[i].Quantiles); why != "" {
				errs[i] = fmt.Errorf("model %s: %s", results[i].Chosen, why)
			}
		}
		if errs[i] != nil {
			rejected = append(rejected, tables.RejectedRow{Key: s.Key, Reason: errs[i].Error()})
			continue
		}
		nodes = append(nodes, h.baseOf(s, h.levelOf(s.Key), results[i]))
		levelNodes[h.levelOf(s.Key)]++
	}
	tr, err := h.reconcileTree(nodes, freq)
	if err != nil {
		return sum, err
	}
	rec := Reconciled{Version: ManifestVersion, Run: cfg.Run, Method: string(tr.method), Note: tr.note, MaxDeviation: tr.deviation,
		Forecasts: map[string]File{}, Models: map[string]File{}}
	if tr.method == "MinTShrink" {
		rec.Lambda = tr.lambda
	}
	keyCols := cfg.Source.Columns.Series
	format := tableFormat(cfg)
	for _, u := range p.Units {
		f, err := reconcileUnitTable(ctx, out, cfg.Run, u.ID, unitFc[u.ID], format, keyCols, tr)
		if err != nil {
			return sum, err
		}
		rec.Forecasts[u.ID] = f
		if len(tr.promise) == 0 && len(tr.band) == 0 {
			continue
		}
		mf, ok := unitMf[u.ID]
		if !ok {
			continue
		}
		if f, changed, err := promiseUnitTable(ctx, out, cfg.Run, u.ID, mf, format, keyCols, tr); err != nil {
			return sum, err
		} else if changed {
			rec.Models[u.ID] = f
		}
	}

	// The spanning nodes' own tables.
	note := "reconciled by " + string(tr.method)
	if tr.note != "" {
		note += " (" + tr.note + ")"
	}
	var fc []tables.ForecastRow
	var mr []tables.ModelRow
	for i, s := range spanning {
		if errs[i] != nil {
			continue
		}
		if _, ok := tr.mean[s.Key]; !ok {
			rejected = append(rejected, tables.RejectedRow{Key: s.Key, Reason: "no bottom series under it has a forecast"})
			continue
		}
		r := results[i]
		r.Mean, r.Quantiles = tr.mean[s.Key], tr.quantiles[s.Key]
		if p, ok := tr.promise[s.Key]; ok {
			r.Expected, r.StepErrors = p.score, p.steps
		}
		if b, ok := tr.band[s.Key]; ok {
			r.Backtest = b
		}
		r.Notes = append(r.Notes, note)
		level := h.levelOf(s.Key)
		last := s.Len() - 1
		for k := range r.Mean {
			row := tables.ForecastRow{Key: s.Key, Period: s.PeriodAt(last + k + 1), Step: k + 1, Model: r.Chosen, Mean: r.Mean[k], Level: level}
			for j := range r.Levels {
				row.Quantiles = append(row.Quantiles, r.Quantiles[j][k])
			}
			fc = append(fc, row)
		}
		mr = append(mr, tables.ModelRow{Key: s.Key, Model: r.Chosen, Params: paramsText(r.Result), BacktestErrors: r.StepErrors,
			Metric: string(r.Metric), Score: r.Expected, Notes: strings.Join(r.Notes, "; "), Design: r.Design, Segment: r.Segment.String(), DesignBy: r.From, Backtest: backtestRecord(r.Levels, r.Backtest), Level: level})
	}
	ev, err := evaluateUnit(ctx, out, st.Drift, cfg.Source.NonNegative, keyCols, prev, &loaded{unit: Unit{ID: SpanningUnit}, series: spanning})
	if err != nil {
		return sum, err
	}
	evals := ev.rows
	var lv levelSums
	for i, r := range evals {
		l := h.levelOf(r.Key)
		evals[i].Level = l
		lv.add(l, r, ev.cals)
	}
	rec.Levels = lv.summaries(levelNodes)
	hdr := tables.Header{Keys: keyCols, Quantiles: st.Selection.Levels}
	for _, wr := range []struct {
		table, name string
		fn          func(w io.Writer) error
	}{
		{TableForecasts, TableForecasts + "." + format, func(w io.Writer) error { return tables.WriteForecasts(w, format, hdr, fc) }},
		{TableModels, TableModels + "." + format, func(w io.Writer) error { return tables.WriteModels(w, format, keyCols, mr) }},
		{TableEvaluation, TableEvaluation + "." + format, func(w io.Writer) error { return tables.WriteEvaluation(w, format, keyCols, evals) }},
		{TableRejected, store.RejectedName, func(w io.Writer) error { return tables.WriteRejected(w, tables.CSV, keyCols, rejected) }},
	} {
		f, err := putTable(ctx, out, store.UnitKey(cfg.Run, SpanningUnit, wr.name), wr.table, wr.fn)
		if err != nil {
			return sum, err
		}
		rec.Files = append(rec.Files, f)
	}
	if _, err := out.PutJSON(ctx, store.UnitKey(cfg.Run, SpanningUnit, ReconciledName), rec); err != nil {
		return sum, storageErr(err)
	}
	sum.Series = len(spanning)
	sum.Trained = len(mr)
	sum.Rejected = len(rejected)
	sum.Levels = rec.Levels
	sum.MaxDeviation = tr.deviation
	sum.DurationSeconds = env.now().Sub(start).Seconds()
	env.logf("reconcile: %s: %d nodes (%d spanning) reconciled by %s, largest deviation %.3g%s%s%s",
		cfg.Run, len(nodes), len(mr), tr.method, tr.deviation, noteText(tr.note), noteText(tr.bands), noteText(tr.promises))
	return sum, nil
}

func noteText(n string) string {
	if n == "" {
		return ""
	}
	return "; " + n
}

// reconcileUnitTable rewrites one unit's forecasts table with the reconciled means and
// quantiles of its nodes and writes it as units/<unit>/reconciled-forecasts.<format>.
func reconcileUnitTable(ctx context.Context, out *store.Store, run, unit string, f File, format string, keys []string, tr treeResult) (File, error) {
	var hdr tables.Header
	var rows []tables.ForecastRow
	if err := readTable(ctx, out, f, func(r io.Reader) (err error) { hdr, rows, err = tables.ReadForecasts(r, formatOf(f), keys); return }); err != nil {
		return File{}, err
	}
	for i, r := range rows {
		m, ok := tr.mean[r.Key]
		if !ok || r.Step < 1 || r.Step > len(m) {
			return File{}, fmt.Errorf("unit %s: series %q step %d has no reconciled forecast: %w", unit, r.Key, r.Step, store.ErrDamaged)
		}
		rows[i].Mean = m[r.Step-1]
		for j := range r.Quantiles {
			rows[i].Quantiles[j] = tr.quantiles[r.Key][j][r.Step-1]
		}
	}
	return putTable(ctx, out, store.UnitKey(run, unit, "reconciled-"+TableForecasts+"."+format), TableForecasts,
		func(w io.Writer) error { return tables.WriteForecasts(w, format, hdr, rows) })
}

// promiseUnitTable rewrites one unit's models table with the reconciled promises of its nodes
// (score and per-step backtest errors, and the band record of nodes whose bands were rebuilt;
// a node without them keeps its row) and writes it as
// units/<unit>/reconciled-models.<format>; changed is false, and nothing is written, when no row
// changed.
func promiseUnitTable(ctx context.Context, out *store.Store, run, unit string, f File, format string, keys []string, tr treeResult) (File, bool, error) {
	var rows []tables.ModelRow
	if err := readTable(ctx, out, f, func(r io.Reader) (err error) { rows, err = tables.ReadModels(r, formatOf(f), keys); return }); err != nil {
		return File{}, false, err
	}
	changed := false
	for i, r := range rows {
		if p, ok := tr.promise[r.Key]; ok {
			rows[i].Score, rows[i].BacktestErrors = p.score, p.steps
			changed = true
		}
		if b, ok := tr.band[r.Key]; ok {
			rows[i].Backtest = backtestRecord(tr.levels, b)
			changed = true
		}
	}
	if !changed {
		return File{}, false, nil
	}
	g, err := putTable(ctx, out, store.UnitKey(run, unit, "reconciled-"+TableModels+"."+format), TableModels,
		func(w io.Writer) error { return tables.WriteModels(w, format, keys, rows) })
	return g, err == nil, err
}

// putTable encodes and writes one table and returns its File record.
func putTable(ctx context.Context, out *store.Store, key, table string, fn func(io.Writer) error) (File, error) {
	var buf bytes.Buffer
	if err := fn(&buf); err != nil {
		return File{}, fmt.Errorf("%s: %w", key, err)
	}
	if err := out.Put(ctx, key, buf.Bytes()); err != nil {
		return File{}, storageErr(err)
	}
	return File{Table: table, Key: key, Bytes: int64(buf.Len()), SHA256: store.SHA256(buf.Bytes())}, nil
}

// unitFile returns the file of a table among files.
func unitFile(files []File, table string) (File, bool) {
	for _, f := range files {
		if f.Table == table {
			return f, true
		}
	}
	return File{}, false
}

// readReconciled reads and verifies the reconcile step's record for publish: reason is
// non-empty when it is absent or does not match its files.
func readReconciled(ctx context.Context, out *store.Store, run string) (*Reconciled, string, error) {
	key := store.UnitKey(run, SpanningUnit, ReconciledName)
	var rec Reconciled
	err := out.GetJSON(ctx, key, &rec)
	if errors.Is(err, store.ErrNotFound) {
		return nil, "the reconcile step did not finish (no " + key + ")", nil
	}
	if err != nil {
		return nil, "", storageErr(err)
	}
	if rec.Version != ManifestVersion || rec.Run != run {
		return nil, key + " is not this run's record", nil
	}
	files := append([]File{}, rec.Files...)
	for _, f := range rec.Forecasts {
		files = append(files, f)
	}
	for _, f := range rec.Models {
		files = append(files, f)
	}
	bad, err := verifyFiles(ctx, out, files)
	if bad != "" {
		bad = "the reconcile step's output is unusable: " + bad
	}
	return &rec, bad, err
}

// reconciledUnits applies the reconcile step's output to a manifest about to be published
// when the plan says Reconcile: every unit's forecasts file becomes its reconciled one, and
// the record is returned for the spanning unit's entry (added after the guard, which counts
// input units). why is non-empty when the run cannot be published coherent: the step did not
// finish, its files do not match, or a unit was not trained by this run.
func reconciledUnits(ctx context.Context, out *store.Store, run string, p *Plan, m *Manifest) (*Reconciled, string, error) {
	if !p.Reconcile {
		return nil, "", nil
	}
	rec, why, err := readReconciled(ctx, out, run)
	if err != nil || why != "" {
		return nil, why, err
	}
	for i := range m.Units {
		e := &m.Units[i]
		f, ok := rec.Forecasts[e.ID]
		if e.State != StateTrained || !ok {
			return nil, fmt.Sprintf("unit %s (%s) has no reconciled forecasts; a hierarchy that spans units is published only whole", e.ID, e.State), nil
		}
		mf, okm := rec.Models[e.ID]
		files := make([]File, 0, len(e.Files))
		for _, g := range e.Files {
			if g.Table == TableForecasts {
				g = f
			}
			if g.Table == TableModels && okm {
				g = mf
			}
			files = append(files, g)
		}
		e.Files = files
	}
	return rec, "", nil
}
