package report

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"path"
	"slices"
	"sort"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// Errors Main maps to exit codes.
var (
	// errNotPublished: the output has no latest.json (and no run was named).
	errNotPublished = errors.New("nothing published")
	// errTable: a table file cannot be decoded or differs from its manifest checksum.
	errTable = errors.New("unreadable table")
)

// Forecast is one series' forecast: its quantile levels (they can differ between units when a
// unit was carried forward from a run with other settings) and its rows in step order.
type Forecast struct {
	Levels []float64
	Rows   []tables.ForecastRow
}

// Run is a published run as the report reads it: the run's configuration, its manifest when
// present, and the per-unit tables of every unit. Forecast rows are kept only for the series
// LoadForecasts asks for; for the others, LoadRun keeps their volume and origin, so memory
// does not grow with horizon times quantiles times series.
type Run struct {
	Name   string
	Config *runconfig.Config
	// Manifest is nil when the run has no MANIFEST.json (tables listed from the unit folders).
	Manifest *pipeline.Manifest
	// Volume is each series' forecast volume: the sum of its mean over the horizon.
	Volume map[string]float64
	// Origin is each series' first forecast period.
	Origin map[string]time.Time
	// Forecasts holds the series loaded by LoadForecasts.
	Forecasts  map[string]Forecast
	Models     []tables.ModelRow
	Evaluation []tables.EvaluationRow
	Rejected   []tables.RejectedRow
	// Carried maps a series whose unit was carried forward to the run its forecast comes from.
	Carried map[string]string
	// Missing lists the units the manifest has no files for, with the reason.
	Missing []string
	// Nodes and NodeEvaluation are a hierarchy's aggregates (models and evaluation rows),
	// kept apart from Models and Evaluation, which hold the input series; Levels sums both by
	// level and Coherence is the published run's check (nil without a hierarchy or manifest).
	Nodes          []tables.ModelRow
	NodeEvaluation []tables.EvaluationRow
	Levels         []LevelRow
	Coherence      *pipeline.Coherence
	// Design is the run's design decision from plan.json (selection.design Auto; nil
	// otherwise or when plan.json is gone).
	Design *design.Record
	units  []unitFiles
}

// unitFiles is one unit's table files: table name -> key and expected SHA-256 ("" unknown).
type unitFiles struct {
	id, source string
	files      map[string]pipeline.File
}

// LoadRun reads a published run from st. run "" means the run latest.json points at.
func LoadRun(ctx context.Context, st *store.Store, run string) (*Run, error) {
	if run == "" {
		p, ok, err := st.ReadLatest(ctx)
		if err != nil {
			return nil, err
		}
		if !ok {
			return nil, fmt.Errorf("%s: no %s: %w", st, store.LatestKey, errNotPublished)
		}
		run = p.Run
	}
	if err := store.CheckName("run", run); err != nil {
		return nil, err
	}
	cb, err := st.Get(ctx, store.RunKey(run, store.ConfigName))
	if err != nil {
		return nil, fmt.Errorf("run %s: %w", run, err)
	}
	cfg, err := runconfig.Parse(cb, st.Describe(store.RunKey(run, store.ConfigName)))
	if err != nil {
		return nil, err
	}
	r := &Run{Name: run, Config: cfg, Volume: map[string]float64{}, Origin: map[string]time.Time{},
		Forecasts: map[string]Forecast{}, Carried: map[string]string{}}
	if r.units, err = r.listUnits(ctx, st); err != nil {
		return nil, err
	}
	if r.Design, err = planDesign(ctx, st, run); err != nil {
		return nil, err
	}
	for _, u := range r.units {
		if err := r.readUnit(ctx, st, u); err != nil {
			return nil, err
		}
	}
	sort.Slice(r.Models, func(i, j int) bool { return r.Models[i].Key < r.Models[j].Key })
	sort.Slice(r.Rejected, func(i, j int) bool { return r.Rejected[i].Key < r.Rejected[j].Key })
	sort.Slice(r.Evaluation, func(i, j int) bool { return r.Evaluation[i].Key < r.Evaluation[j].Key })
	if err := r.splitLevels(ctx, st); err != nil {
		return nil, err
	}
	return r, nil
}

// planDesign reads the design decision of the run's plan.json; nil when the run has none
// (a declared design, or plan.json pruned).
func planDesign(ctx context.Context, st *store.Store, run string) (*design.Record, error) {
	p, err := pipeline.ReadPlan(ctx, st, run)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	return p.Design, nil
}

// listUnits returns the units to read: the manifest's entries when MANIFEST.json exists (so
// carried-forward units are read from the run that wrote them), otherwise the folders under
// runs/<run>/units/.
func (r *Run) listUnits(ctx context.Context, st *store.Store) ([]unitFiles, error) {
	b, err := st.Get(ctx, store.RunKey(r.Name, store.ManifestName))
	switch {
	case err == nil:
		var m pipeline.Manifest
		if err := json.Unmarshal(b, &m); err != nil {
			return nil, fmt.Errorf("%s: %w: %w", st.Describe(store.RunKey(r.Name, store.ManifestName)), errTable, err)
		}
		r.Manifest = &m
		var out []unitFiles
		for _, e := range m.Units {
			if e.State == pipeline.StateMissing || len(e.Files) == 0 {
				r.Missing = append(r.Missing, strings.TrimSpace(e.ID+": "+e.Reason))
				continue
			}
			u := unitFiles{id: e.ID, files: map[string]pipeline.File{}}
			if e.State == pipeline.StateCarried {
				u.source = e.Source
			}
			for _, f := range e.Files {
				u.files[f.Table] = f
			}
			out = append(out, u)
		}
		return out, nil
	case !errors.Is(err, store.ErrNotFound):
		return nil, err
	}
	prefix := "runs/" + r.Name + "/units/"
	objs, err := st.List(ctx, prefix)
	if err != nil {
		return nil, err
	}
	byID := map[string]*unitFiles{}
	var ids []string
	for _, o := range objs {
		id, name, ok := strings.Cut(strings.TrimPrefix(o.Key, prefix), "/")
		if !ok || strings.Contains(name, "/") {
			continue
		}
		table := strings.TrimSuffix(name, path.Ext(name))
		if !slices.Contains([]string{pipeline.TableForecasts, pipeline.TableModels, pipeline.TableEvaluation, pipeline.TableRejected}, table) {
			continue
		}
		u := byID[id]
		if u == nil {
			u = &unitFiles{id: id, files: map[string]pipeline.File{}}
			byID[id] = u
			ids = append(ids, id)
		}
		u.files[table] = pipeline.File{Table: table, Key: o.Key}
	}
	if len(ids) == 0 {
		return nil, fmt.Errorf("run %s: no unit tables under %s and no %s", r.Name, prefix, store.ManifestName)
	}
	out := make([]unitFiles, len(ids))
	for i, id := range ids {
		out[i] = *byID[id]
	}
	return out, nil
}

// read reads one of the unit's tables with decode; a table the unit does not have is skipped,
// a file whose checksum differs from the manifest's is an error.
func (u unitFiles) read(ctx context.Context, st *store.Store, table string, decode func(io.Reader, string) error) error {
	f, ok := u.files[table]
	if !ok {
		return nil
	}
	b, err := st.Get(ctx, f.Key)
	if err != nil {
		return fmt.Errorf("unit %s: %w", u.id, err)
	}
	if f.SHA256 != "" && store.SHA256(b) != f.SHA256 {
		return fmt.Errorf("unit %s: %s: checksum differs from the manifest: %w", u.id, st.Describe(f.Key), errTable)
	}
	format := strings.TrimPrefix(path.Ext(f.Key), ".")
	if err := decode(bytes.NewReader(b), format); err != nil {
		return fmt.Errorf("unit %s: %s: %w: %w", u.id, st.Describe(f.Key), errTable, err)
	}
	return nil
}

// readUnit reads a unit's tables into r (of the forecasts, only volume, origin and whether the
// unit was carried forward).
func (r *Run) readUnit(ctx context.Context, st *store.Store, u unitFiles) error {
	err := u.read(ctx, st, pipeline.TableForecasts, func(rd io.Reader, format string) error {
		_, rows, err := tables.ReadForecasts(rd, format, r.Config.Source.Columns.Series)
		for _, row := range rows {
			if !math.IsNaN(row.Mean) {
				r.Volume[row.Key] += row.Mean
			}
			if o, ok := r.Origin[row.Key]; !ok || row.Period.Before(o) {
				r.Origin[row.Key] = row.Period
			}
			if u.source != "" {
				r.Carried[row.Key] = u.source
			}
		}
		return err
	})
	if err == nil {
		err = u.read(ctx, st, pipeline.TableModels, func(rd io.Reader, format string) error {
			rows, err := tables.ReadModels(rd, format, r.Config.Source.Columns.Series)
			r.Models = append(r.Models, rows...)
			return err
		})
	}
	if err == nil {
		err = u.read(ctx, st, pipeline.TableEvaluation, func(rd io.Reader, format string) error {
			rows, err := tables.ReadEvaluation(rd, format, r.Config.Source.Columns.Series)
			r.Evaluation = append(r.Evaluation, rows...)
			return err
		})
	}
	if err == nil {
		err = u.read(ctx, st, pipeline.TableRejected, func(rd io.Reader, format string) error {
			rows, err := tables.ReadRejected(rd, format, r.Config.Source.Columns.Series)
			r.Rejected = append(r.Rejected, rows...)
			return err
		})
	}
	return err
}

// LoadForecasts reads the forecast rows of the series in keys into r.Forecasts, in step order.
func (r *Run) LoadForecasts(ctx context.Context, st *store.Store, keys map[string]bool) error {
	for _, u := range r.units {
		err := u.read(ctx, st, pipeline.TableForecasts, func(rd io.Reader, format string) error {
			h, rows, err := tables.ReadForecasts(rd, format, r.Config.Source.Columns.Series)
			for _, row := range rows {
				if keys[row.Key] {
					fc := r.Forecasts[row.Key]
					fc.Levels = h.Quantiles
					fc.Rows = append(fc.Rows, row)
					r.Forecasts[row.Key] = fc
				}
			}
			return err
		})
		if err != nil {
			return err
		}
	}
	for _, fc := range r.Forecasts {
		sort.Slice(fc.Rows, func(i, j int) bool { return fc.Rows[i].Step < fc.Rows[j].Step })
	}
	return nil
}

// LoadHistory reads the run's input and returns the series named in keys, each cut to the
// periods before its forecast's first period (keys[key]; zero: no cut), so that actuals that
// arrived after the run are not drawn as history. Rows of other series are skipped as they
// stream by, so memory grows with the series asked for, not with the input.
func LoadHistory(ctx context.Context, src runconfig.Source, keys map[string]time.Time) (map[string]series.Series, error) {
	c, err := ingest.NewCollector(src, time.Time{})
	if err != nil {
		return nil, err
	}
	err = scanInput(ctx, src, func(row ingest.Row) {
		if first, ok := keys[row.Key]; ok && (first.IsZero() || row.Date.Before(first)) {
			c.Add(row)
		}
	})
	if err != nil {
		return nil, err
	}
	ok, _ := c.Finish()
	out := make(map[string]series.Series, len(ok))
	for _, s := range ok {
		out[s.Key] = s
	}
	return out, nil
}

// demand accumulates what the demand class of one series needs.
type demand struct {
	rows, nonZero int
	sum, sum2     float64
}

// DemandClasses reads the run's input once and returns the demand class (selection.Classify's
// classes: smooth, erratic, intermittent, lumpy) of every series in keys, from its rows before
// keys[key], with the ADI and CV² cut-offs of Syntetos, Boylan & Croston (2005). Periods with
// no row count as no demand only when a row says 0, as the trainer's calendar would leave a
// missing row missing; ADI is rows over non-zero rows. Memory is a few numbers per series.
func DemandClasses(ctx context.Context, src runconfig.Source, keys map[string]time.Time) (map[string]string, error) {
	acc := make(map[string]*demand, len(keys))
	err := scanInput(ctx, src, func(row ingest.Row) {
		first, ok := keys[row.Key]
		if !ok || row.Problem != "" || (!first.IsZero() && !row.Date.Before(first)) {
			return
		}
		d := acc[row.Key]
		if d == nil {
			d = &demand{}
			acc[strings.Clone(row.Key)] = d
		}
		d.rows++
		if row.Value != 0 {
			d.nonZero++
			d.sum += row.Value
			d.sum2 += row.Value * row.Value
		}
	})
	if err != nil {
		return nil, err
	}
	out := make(map[string]string, len(acc))
	for k, d := range acc {
		out[k] = d.class()
	}
	return out, nil
}

// class applies the Syntetos-Boylan-Croston cut-offs as selection.Classify does.
func (d *demand) class() string {
	if d.nonZero == 0 {
		return selection.ClassIntermittent
	}
	adi := float64(d.rows) / float64(d.nonZero)
	mean := d.sum / float64(d.nonZero)
	cv2 := max(0, d.sum2/float64(d.nonZero)-mean*mean) / (mean * mean)
	switch {
	case adi < selection.ADICutoff && cv2 < selection.CV2Cutoff:
		return selection.ClassSmooth
	case adi < selection.ADICutoff:
		return selection.ClassErratic
	case cv2 < selection.CV2Cutoff:
		return selection.ClassIntermittent
	}
	return selection.ClassLumpy
}

// scanInput streams every row of the run's input to fn, read as the trainer reads it.
func scanInput(ctx context.Context, src runconfig.Source, fn func(ingest.Row)) error {
	return pipeline.ScanInput(ctx, src, func(r ingest.Row) error { fn(r); return nil })
}
