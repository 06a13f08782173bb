package report

import (
	"context"
	"fmt"
	"math"
	"sort"

	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// LevelRow is one hierarchy level on the page: its nodes, their backtest accuracy (what the
// run expects) and their accuracy on the new actuals of the previous run's forecasts.
type LevelRow struct {
	Level string
	Nodes int
	// Expected is the mean backtest score of the level's nodes (NaN when none has one).
	Expected float64
	// Evaluated nodes had new actuals; Promised and Realized are their means.
	Evaluated          int
	Promised, Realized float64
}

// splitLevels keeps the input series in r.Models, r.Evaluation and the volume and origin maps
// (every other section is about them) and moves a hierarchy's aggregates into r.Nodes and
// r.NodeEvaluation; then it builds r.Levels and, for a published run, r.Coherence.
func (r *Run) splitLevels(ctx context.Context, st *store.Store) error {
	if r.Config.Hierarchy == nil {
		return nil
	}
	keys := r.Config.Source.Columns.Series
	bottom := runconfig.LevelName(keys, keys)
	isNode := func(level string) bool { return level != "" && level != bottom }
	var models []tables.ModelRow
	for _, m := range r.Models {
		if isNode(m.Level) {
			r.Nodes = append(r.Nodes, m)
			delete(r.Volume, m.Key)
			delete(r.Origin, m.Key)
			continue
		}
		models = append(models, m)
	}
	var evals []tables.EvaluationRow
	for _, e := range r.Evaluation {
		if isNode(e.Level) {
			r.NodeEvaluation = append(r.NodeEvaluation, e)
			continue
		}
		evals = append(evals, e)
	}
	r.Models, r.Evaluation = models, evals
	r.Levels = levelRows(bottom, models, evals, r.Nodes, r.NodeEvaluation)
	if r.Manifest != nil {
		c, err := pipeline.CheckCoherence(ctx, st, r.Manifest, r.Config)
		if err != nil {
			return fmt.Errorf("run %s: coherence: %w", r.Name, err)
		}
		r.Coherence = &c
	}
	return nil
}

// levelRows sums the models and evaluation rows per level, the bottom level first, then by
// fewest nodes (the grand total first).
func levelRows(bottom string, models []tables.ModelRow, evals []tables.EvaluationRow, nodes []tables.ModelRow, nodeEvals []tables.EvaluationRow) []LevelRow {
	at := map[string]*LevelRow{}
	row := func(level string) *LevelRow {
		if level == "" {
			level = bottom
		}
		if at[level] == nil {
			at[level] = &LevelRow{Level: level}
		}
		return at[level]
	}
	scored := map[string]int{}
	for _, m := range append(append([]tables.ModelRow{}, models...), nodes...) {
		l := row(m.Level)
		l.Nodes++
		if !math.IsNaN(m.Score) && !math.IsInf(m.Score, 0) {
			l.Expected += m.Score
			scored[l.Level]++
		}
	}
	for _, e := range append(append([]tables.EvaluationRow{}, evals...), nodeEvals...) {
		l := row(e.Level)
		l.Evaluated++
		l.Promised += e.Expected
		l.Realized += e.Realized
	}
	out := make([]LevelRow, 0, len(at))
	for _, l := range at {
		l.Expected = mean(l.Expected, scored[l.Level])
		l.Promised, l.Realized = mean(l.Promised, l.Evaluated), mean(l.Realized, l.Evaluated)
		out = append(out, *l)
	}
	sort.Slice(out, func(i, j int) bool {
		if (out[i].Level == bottom) != (out[j].Level == bottom) {
			return out[i].Level == bottom
		}
		if out[i].Nodes != out[j].Nodes {
			return out[i].Nodes < out[j].Nodes
		}
		return out[i].Level < out[j].Level
	})
	return out
}

func mean(sum float64, n int) float64 {
	if n == 0 {
		return math.NaN()
	}
	return sum / float64(n)
}
