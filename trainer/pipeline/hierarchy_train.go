package pipeline

import (
	"context"
	"fmt"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// unitHierarchy is what train's hierarchy work adds to one unit.
type unitHierarchy struct {
	// nodes is nodes.json (nil unless the run has spanning levels).
	nodes *NodesFile
	// levelNodes counts the nodes forecast per level (the bottom level included).
	levelNodes map[string]int
}

// reconcileUnit builds the unit's hierarchy work before its tables are written. results and
// errs hold the unit's bottom series (u.series) then its within-unit aggregates (u.nodes). It
// records every publishable node's base forecast (for nodes.json), reconciles the unit's
// sub-trees when the run has within-unit levels only (with spanning levels the reconcile step
// reconciles the whole tree from the base forecasts and replaces the unit's forecasts table),
// replacing the means, quantiles and promises (Expected, StepErrors) in results, and
// rejects an aggregate whose own forecast failed (its reason says so; the aggregate is not
// published, its bottom series are).
func (h *hierarchy) reconcileUnit(runName string, freq string, u *loaded, results []design.Result, errs []error) (unitHierarchy, error) {
	uh := unitHierarchy{levelNodes: map[string]int{}}
	var bases []NodeBase
	all := indexes(len(u.series) + len(u.nodes))
	for _, i := range all {
		s := u.seriesAt(i)
		if errs[i] != nil {
			continue
		}
		r := results[i]
		if why := unpublishable(r.Mean, r.Levels, r.Quantiles); why != "" {
			if i >= len(u.series) {
				errs[i] = fmt.Errorf("model %s: %s", r.Chosen, why)
			}
			continue
		}
		level := h.levelOf(s.Key)
		bases = append(bases, h.baseOf(s, level, r))
		uh.levelNodes[level]++
	}
	if len(u.nodes) > 0 && len(bases) > 0 && !h.spanning { // else the reconcile step reconciles the whole tree from the bases
		tr, err := h.reconcileTree(bases, u.series[0].Freq)
		if err != nil {
			return uh, fmt.Errorf("unit %s: %w", u.unit.ID, err)
		}
		note := fmt.Sprintf("reconciled within unit by %s", tr.method)
		if tr.note != "" {
			note += " (" + tr.note + ")"
		}
		for _, i := range all {
			s := u.seriesAt(i)
			m, ok := tr.mean[s.Key]
			if errs[i] != nil {
				continue
			}
			if !ok { // an aggregate none of whose bottom series has a forecast
				errs[i] = fmt.Errorf("no bottom series under it has a forecast")
				continue
			}
			results[i].Mean, results[i].Quantiles = m, tr.quantiles[s.Key]
			if p, ok := tr.promise[s.Key]; ok {
				results[i].Expected, results[i].StepErrors = p.score, p.steps
			}
			if b, ok := tr.band[s.Key]; ok {
				results[i].Backtest = b
			}
			results[i].Notes = append(results[i].Notes, note)
		}
	}
	if h.spanning {
		uh.nodes = &NodesFile{Version: NodesVersion, Run: runName, Unit: u.unit.ID, Frequency: freq, Nodes: bases}
		for _, p := range u.partials {
			uh.nodes.Partials = append(uh.nodes.Partials, Partial{Key: p.Key, Level: h.levelOf(p.Key), Start: p.Start, Values: p.Values})
		}
	}
	return uh, nil
}

func indexes(n int) []int {
	out := make([]int, n)
	for i := range out {
		out[i] = i
	}
	return out
}

// Table and file name of nodes.json in a unit's folder.
const (
	TableNodes = "nodes"
	NodesName  = "nodes.json"
)

// evaluateNodes evaluates the previous run's forecasts of the unit's within-unit aggregates
// against their summed histories, as evaluateUnit does for the bottom series, and sums the
// accuracy and calibration by level.
func evaluateNodes(ctx context.Context, out *store.Store, d DriftRule, nonNegative bool, keys []string, prev *Manifest, u *loaded, h *hierarchy) (
	[]tables.EvaluationRow, levelSums, error) {
	var lv levelSums
	if prev == nil || len(u.nodes) == 0 {
		return nil, lv, nil
	}
	ua := *u
	ua.series = u.nodes
	ev, err := evaluateUnit(ctx, out, d, nonNegative, keys, prev, &ua)
	for i, r := range ev.rows {
		l := h.levelOf(r.Key)
		ev.rows[i].Level = l
		lv.add(l, r, ev.cals)
	}
	return ev.rows, lv, err
}
