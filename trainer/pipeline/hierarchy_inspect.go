package pipeline

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/reconcile"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// CoherenceTolerance is the largest relative deviation (reconcile.MaxDeviation) a published
// hierarchy may show and still be called coherent: reconciled aggregates are sums of the
// reconciled bottom forecasts, so only the order of floating-point additions differs.
const CoherenceTolerance = 1e-9

// Coherence is what CheckCoherence found in a published run.
type Coherence struct {
	// Bottom and Aggregates count the nodes with forecasts; Periods the distinct forecast
	// periods.
	Bottom, Aggregates, Periods int
	// MaxDeviation is reconcile.MaxDeviation over every aggregate and period of the published
	// means (+Inf when some node lacks a period another has).
	MaxDeviation float64
	// Worst names the aggregate with the largest deviation.
	Worst string
}

// Coherent reports whether the deviation is within CoherenceTolerance.
func (c Coherence) Coherent() bool { return c.MaxDeviation <= CoherenceTolerance }

// CheckCoherence reads every forecasts table of a published hierarchical run and measures how
// far each aggregate's mean is from the sum of its bottom series' means, period by period. The
// means are what the run promises to add up; quantiles are not (see hierarchy.go).
func CheckCoherence(ctx context.Context, out *store.Store, m *Manifest, cfg *runconfig.Config) (Coherence, error) {
	h := newHierarchy(cfg)
	if h == nil {
		return Coherence{}, fmt.Errorf("run %s has no hierarchy: %w", m.Run, ErrConfig)
	}
	keys := cfg.Source.Columns.Series
	means := map[string]map[time.Time]float64{}
	periodSet := map[time.Time]bool{}
	for _, u := range m.Units {
		f, ok := u.file(TableForecasts)
		if !ok {
			continue
		}
		err := readTable(ctx, out, f, func(r io.Reader) error {
			_, rows, err := tables.ReadForecasts(r, formatOf(f), keys)
			for _, row := range rows {
				if means[row.Key] == nil {
					means[row.Key] = map[time.Time]float64{}
				}
				means[row.Key][row.Period] = row.Mean
				periodSet[row.Period] = true
			}
			return err
		})
		if err != nil {
			return Coherence{}, err
		}
	}
	periods := make([]time.Time, 0, len(periodSet))
	for p := range periodSet {
		periods = append(periods, p)
	}
	sort.Slice(periods, func(i, j int) bool { return periods[i].Before(periods[j]) })
	var bottom, aggs []string
	for k := range means {
		if h.levelOf(k) == h.bottom {
			bottom = append(bottom, k)
		} else {
			aggs = append(aggs, k)
		}
	}
	sort.Strings(bottom)
	sort.Strings(aggs)
	aggAt := map[string]int{}
	for a, k := range aggs {
		aggAt[k] = a
	}
	hs := reconcile.Hierarchy{Bottom: len(bottom), Sums: make([][]int, len(aggs))}
	for j, k := range bottom {
		cells, err := ingest.SplitKey(k, len(keys))
		if err != nil {
			return Coherence{}, err
		}
		for _, l := range h.levels {
			if a, ok := aggAt[h.nodeKey(cells, l)]; ok {
				hs.Sums[a] = append(hs.Sums[a], j)
			}
		}
	}
	c := Coherence{Bottom: len(bottom), Aggregates: len(aggs), Periods: len(periods)}
	row := func(k string) []float64 {
		r := make([]float64, len(periods))
		for t, p := range periods {
			v, ok := means[k][p]
			if !ok {
				v = math.NaN()
			}
			r[t] = v
		}
		return r
	}
	f := make([][]float64, 0, len(aggs)+len(bottom))
	for _, k := range aggs {
		f = append(f, row(k))
	}
	for _, k := range bottom {
		f = append(f, row(k))
	}
	if len(bottom) == 0 {
		c.MaxDeviation = math.Inf(1)
		return c, nil
	}
	for a := range aggs {
		if len(hs.Sums[a]) == 0 {
			c.MaxDeviation, c.Worst = math.Inf(1), aggs[a]+" (no bottom series under it)"
			return c, nil
		}
	}
	c.MaxDeviation = reconcile.MaxDeviation(hs, f)
	worst := -1.0
	for a, k := range aggs {
		one := reconcile.Hierarchy{Bottom: hs.Bottom, Sums: [][]int{hs.Sums[a]}}
		d := reconcile.MaxDeviation(one, append([][]float64{f[a]}, f[len(aggs):]...))
		if d > worst {
			worst, c.Worst = d, k
		}
	}
	return c, nil
}

// inspectHierarchy prints the coherence line of a hierarchical run.
func inspectHierarchy(ctx context.Context, out *store.Store, m *Manifest, w io.Writer) error {
	cfg, err := publishedConfig(ctx, out, m.Run)
	if errors.Is(err, store.ErrNotFound) {
		return nil // a run without its config.json (written by hand): nothing says it has a hierarchy
	}
	if err != nil || cfg.Hierarchy == nil {
		return err
	}
	c, err := CheckCoherence(ctx, out, m, cfg)
	if err != nil {
		return err
	}
	verdict := "coherent"
	if !c.Coherent() {
		verdict = "NOT COHERENT"
	}
	fmt.Fprintf(w, "hierarchy: %s: %d aggregates over %d bottom series, %d periods; largest deviation %.3g (relative, tolerance %g)",
		verdict, c.Aggregates, c.Bottom, c.Periods, c.MaxDeviation, CoherenceTolerance)
	if c.Worst != "" && c.MaxDeviation > 0 {
		fmt.Fprintf(w, " at %s", keyText(cfg.Source.Columns.Series, c.Worst))
	}
	fmt.Fprintln(w)
	return nil
}

// publishedConfig reads runs/<run>/config.json.
func publishedConfig(ctx context.Context, out *store.Store, run string) (*runconfig.Config, error) {
	key := store.RunKey(run, store.ConfigName)
	b, err := out.Get(ctx, key)
	if err != nil {
		return nil, storageErr(err)
	}
	cfg, err := runconfig.Parse(b, out.Describe(key))
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrConfig, err)
	}
	return cfg, nil
}
