package controllers

import (
	"cmp"
	"fmt"
	"slices"
	"strconv"
	"strings"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// maxHierarchyLevels bounds the levels a run's status holds, and with it the portfolio's
// status.hierarchyLevels and the almanac_hierarchy_* series (one per level and portfolio): the
// 8 aggregation levels spec.hierarchy.levels allows (its MaxItems, checked against the CRD in
// a test) and the implied bottom level.
const maxHierarchyLevels = 8 + 1

// addLevels folds one source's hierarchy levels (a train shard's or the reconcile step's
// summary.Levels) into h and returns the new status; h is not modified.
//
// For each level name, nodes are added and the accuracy sums are added exactly (addAccuracy:
// exact rationals written as decimal strings), so the result does not depend on the order in
// which shards finish. Each node is reported by exactly one source (the trainer's contract:
// a shard reports its whole sub-trees, the reconcile step the nodes that span shards), so the
// sums are the level's totals once every source is folded. The folding is all or nothing: an
// error (a level without a name, one reported twice by the same source, a metric that differs
// from the one already folded, a sum that is not finite, more than maxHierarchyLevels distinct
// levels in all) returns h unchanged with the error.
//
// The levels are kept ordered by node count, then name: top to bottom, since a level has at
// most as many nodes as the level below it (a function of the sums only, so also order-free).
func addLevels(h *forecastingv1alpha1.HierarchyStatus, levels []summary.Level) (*forecastingv1alpha1.HierarchyStatus, error) {
	out := &forecastingv1alpha1.HierarchyStatus{}
	if h != nil {
		out = h.DeepCopy()
	}
	seen := map[string]bool{}
	for _, l := range levels {
		if l.Name == "" {
			return h, fmt.Errorf("a hierarchy level has no name")
		}
		if seen[l.Name] {
			return h, fmt.Errorf("hierarchy level %q is reported twice", l.Name)
		}
		seen[l.Name] = true
		if l.Nodes < 0 {
			return h, fmt.Errorf("hierarchy level %q: %d nodes", l.Name, l.Nodes)
		}
		k := slices.IndexFunc(out.Levels, func(x forecastingv1alpha1.HierarchyLevelStatus) bool { return x.Name == l.Name })
		if k < 0 {
			out.Levels = append(out.Levels, forecastingv1alpha1.HierarchyLevelStatus{Name: l.Name})
			k = len(out.Levels) - 1
		}
		lv := &out.Levels[k]
		lv.Nodes += int64(l.Nodes)
		if l.Accuracy != nil {
			sums, err := addAccuracy(lv.AccuracySums, *l.Accuracy)
			if err != nil {
				return h, fmt.Errorf("hierarchy level %q: %w", l.Name, err)
			}
			lv.AccuracySums = sums
		}
		if l.Calibration != nil {
			sums, err := addCalibration(lv.CalibrationSums, *l.Calibration)
			if err != nil {
				return h, fmt.Errorf("hierarchy level %q: %w", l.Name, err)
			}
			lv.CalibrationSums = sums
		}
	}
	if len(out.Levels) > maxHierarchyLevels {
		return h, fmt.Errorf("%d hierarchy levels, more than the %d a hierarchy has at most (spec.hierarchy.levels and the bottom level)", len(out.Levels), maxHierarchyLevels)
	}
	slices.SortFunc(out.Levels, func(a, b forecastingv1alpha1.HierarchyLevelStatus) int {
		if c := cmp.Compare(a.Nodes, b.Nodes); c != 0 {
			return c
		}
		return strings.Compare(a.Name, b.Name)
	})
	return out, nil
}

// showLevels sets each level's displayed accuracy from its sums (accuracyStatus: expected and
// realized means, their ratio and the geometric means; withCalibration: each quantile's share
// of the new actuals against its promise, the band's coverage, the bias), for the run that
// measured them.
func showLevels(h *forecastingv1alpha1.HierarchyStatus, run string) {
	if h == nil {
		return
	}
	for k := range h.Levels {
		h.Levels[k].Accuracy = accuracyStatus(h.Levels[k].AccuracySums, run)
		withCalibration(h.Levels[k].Accuracy, h.Levels[k].CalibrationSums)
	}
}

// formatDeviation shows the reconcile step's largest relative deviation with three
// significant digits ("0" for exact coherence, "2.22e-16" for rounding).
func formatDeviation(d float64) string {
	return strconv.FormatFloat(d, 'g', 3, 64)
}

// levelNames lists the levels' names with their node counts, e.g. "total (1), depot (3)".
func levelNames(levels []summary.Level) string {
	parts := make([]string, len(levels))
	for i, l := range levels {
		parts[i] = fmt.Sprintf("%s (%d)", l.Name, l.Nodes)
	}
	return strings.Join(parts, ", ")
}
