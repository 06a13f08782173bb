package report

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
)

// TestReportOfHierarchy: a published hierarchy (Fenwick Lane Provisions' invented weekly
// demand, 4 items x 3 depots, depot totals, item totals and the total) gets a levels section
// whose series counts are the levels' node counts and which says the forecasts add up, while
// the overview counts the input series only.
func TestReportOfHierarchy(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	cfg, env := hierarchyReportRun(t, dir)
	if _, err := pipeline.RunLocal(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	if _, err := Write(ctx, cfg.Output.URI, filepath.Join(dir, "report"), Options{NoHistory: true}); err != nil {
		t.Fatal(err)
	}
	doc := parsePage(t, filepath.Join(dir, "report", "index.html"))
	rows := tableRows(byID(t, doc, "levels-table"))
	want := map[string]string{"item+depot": "12", "total": "1", "depot": "3", "item": "4"}
	if len(rows) != len(want) || rows[0][0] != "item+depot" {
		t.Fatalf("levels table %v", rows)
	}
	for _, r := range rows {
		if want[r[0]] != r[1] {
			t.Errorf("level %s: %s series, want %s", r[0], r[1], want[r[0]])
		}
		if r[6] != "–" || r[7] != "–" {
			t.Errorf("level %s: band cells %q, %q before any new actuals, want dashes", r[0], r[6], r[7])
		}
	}
	page := text(doc)
	if !strings.Contains(page, "The published forecasts add up") {
		t.Error("the levels section does not say the forecasts add up")
	}
	if !strings.Contains(page, "12 series in the input") {
		t.Error("the overview does not count the 12 input series only")
	}
}

// TestReportOfHierarchyBandsPerLevel: a second run of the hierarchy, four weeks after the
// first, evaluates the first run's bands on the new actuals; the levels table gives, per level,
// the share of those actuals inside the widest band (q10 to q90) against the share the bands'
// models rows promised, each pooled over the level's nodes exactly as the evaluation tables
// count them (recomputed here from the tables).
func TestReportOfHierarchyBandsPerLevel(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	cfg, env := hierarchyReportRun(t, dir)
	second := *cfg
	cfg.ScheduledTime = env.Now().AddDate(0, 0, -28)
	if _, err := pipeline.RunLocal(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	second.Run, second.PreviousRun, second.ScheduledTime = "flp-hier-2", cfg.Run, env.Now()
	if _, err := pipeline.RunLocal(ctx, &second, env); err != nil {
		t.Fatal(err)
	}
	if _, err := Write(ctx, cfg.Output.URI, filepath.Join(dir, "report"), Options{NoHistory: true}); err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(ctx, cfg.Output.URI)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	r, err := LoadRun(ctx, st, second.Run)
	if err != nil {
		t.Fatal(err)
	}
	levelOf := map[string]string{}
	for _, m := range append(r.Models, r.Nodes...) {
		levelOf[m.Key] = m.Level
	}
	type sums struct{ in, promised, points float64 }
	want := map[string]*sums{}
	for _, e := range append(r.Evaluation, r.NodeEvaluation...) {
		c := e.Calibration
		if c == nil || c.Points == 0 {
			continue
		}
		w := want[levelOf[e.Key]]
		if w == nil {
			w = &sums{}
			want[levelOf[e.Key]] = w
		}
		w.in += float64(c.Below[2] - c.Below[0])
		w.promised += float64(c.Points) * (c.Promised[2] - c.Promised[0])
		w.points += float64(c.Points)
	}
	doc := parsePage(t, filepath.Join(dir, "report", "index.html"))
	rows := tableRows(byID(t, doc, "levels-table"))
	t.Logf("levels table %v", rows)
	if len(rows) != 4 || len(want) != 4 {
		t.Fatalf("levels table %v; evaluated levels %v", rows, want)
	}
	for _, row := range rows {
		w := want[row[0]]
		if w == nil {
			t.Fatalf("level %s has no evaluated bands", row[0])
		}
		if p, a := fmt.Sprintf("%.3f", w.promised/w.points), fmt.Sprintf("%.3f", w.in/w.points); row[6] != p || row[7] != a {
			t.Errorf("level %s: band cells %q, %q, want promised %s and achieved %s", row[0], row[6], row[7], p, a)
		}
	}
}

// hierarchyReportRun is the configuration of a published hierarchy run on generated weekly
// data in dir (its env's clock is the data's end).
func hierarchyReportRun(t *testing.T, dir string) (*runconfig.Config, pipeline.Env) {
	t.Helper()
	ctx := context.Background()
	in, out := "file://"+dir+"/in/", "file://"+dir+"/out/"
	st, err := store.Open(ctx, in)
	if err != nil {
		t.Fatal(err)
	}
	o := synth.Options{Items: 4, Depots: 3, Frequency: synth.Weekly, Periods: 80, SpareShare: -1}
	if _, err := o.Write(ctx, st, "", synth.CSV); err != nil {
		t.Fatal(err)
	}
	st.Close()
	cfg := &runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind, Run: "flp-hier-1", Trigger: "Manual",
		Source: runconfig.Source{URI: in, Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true, Partitioning: runconfig.PartitionHashBuckets,
			Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: o.DateColumn(), Value: "units"}},
		Output: runconfig.Output{URI: out, Format: "csv"}, Horizon: 6, QuantilePercents: []int{10, 50, 90}, QuantileWidth: runconfig.QuantileWidthBacktest,
		Models: []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilyTheta}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 2, BacktestStep: 1, BacktestRefit: runconfig.RefitOnce,
			Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:  runconfig.Sharding{TargetSeriesPerShard: 4, Buckets: 32},
		Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 1},
		Hierarchy: &runconfig.Hierarchy{Levels: [][]string{{"depot"}, {"item"}, {}}, ShardBy: []string{"depot"}, Method: "StructuralScaling", NonNegative: true},
	}
	env := pipeline.Env{Now: func() time.Time { return time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC) }, Workers: 2}
	return cfg, env
}
