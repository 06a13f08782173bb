package runconfig

import (
	"fmt"
	"slices"
	"strings"
)

// Hierarchy is spec.hierarchy: aggregation levels over the key columns, reconciled so that
// every level adds up.
type Hierarchy struct {
	// Levels lists each aggregation level by the key columns its nodes are keyed by, a strict
	// subset of Source.Columns.Series in any order; an empty level is the grand total. The
	// bottom level (every key column) is implied.
	Levels [][]string `json:"levels"`
	// ShardBy are the key columns hash buckets are cut by, so a sub-tree stays on one shard;
	// empty means the whole key (no level is kept on one shard). The controller renders the
	// API's default, the first non-empty level.
	ShardBy []string `json:"shardBy,omitempty"`
	// Method is one of the API's reconciliation methods (ReconcileMethods).
	Method string `json:"method"`
	// NonNegative clips the reconciled bottom forecasts at zero (the controller renders
	// source.nonNegative when the portfolio leaves it unset).
	NonNegative bool `json:"nonNegative"`
}

// ReconcileMethods are the spellings of Hierarchy.Method, the API's.
var ReconcileMethods = []string{"BottomUp", "OLS", "StructuralScaling", "MinTShrink", "MinTSample"}

// LevelName is how outputs name a level: its key columns joined with "+", in the order of
// keys (the source's key columns), or "total" for the grand total. The bottom level is every
// key column.
func LevelName(keys, level []string) string {
	var in []string
	for _, k := range keys {
		if slices.Contains(level, k) {
			in = append(in, k)
		}
	}
	if len(in) == 0 {
		return "total"
	}
	return strings.Join(in, "+")
}

// validate checks the levels and shardBy against the key columns; errors start with the
// field below hierarchy.
func (h *Hierarchy) validate(keys []string) error {
	if len(h.Levels) == 0 {
		return fmt.Errorf("levels: at least one level")
	}
	if !slices.Contains(ReconcileMethods, h.Method) {
		return fmt.Errorf("method: %q is not one of %s", h.Method, strings.Join(ReconcileMethods, ", "))
	}
	subset := func(field string, cols []string) error {
		for j, c := range cols {
			switch {
			case !slices.Contains(keys, c):
				return fmt.Errorf("%s[%d]: %q is not a key column of source.columns.series %v", field, j, c, keys)
			case slices.Contains(cols[:j], c):
				return fmt.Errorf("%s[%d]: %q is named twice", field, j, c)
			}
		}
		if len(cols) >= len(keys) {
			return fmt.Errorf("%s: names every key column; the bottom level is implied", field)
		}
		return nil
	}
	seen := map[string]int{}
	for i, l := range h.Levels {
		if err := subset(fmt.Sprintf("levels[%d]", i), l); err != nil {
			return err
		}
		name := LevelName(keys, l)
		if j, ok := seen[name]; ok {
			return fmt.Errorf("levels[%d]: the same columns as levels[%d] (%s)", i, j, name)
		}
		seen[name] = i
	}
	if len(h.ShardBy) > 0 {
		return subset("shardBy", h.ShardBy)
	}
	return nil
}
