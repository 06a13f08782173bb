package report

import (
	"context"
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
		Output: runconfig.Output{URI: out, Format: "csv"}, Horizon: 6, QuantilePercents: []int{10, 50, 90},
		Models: []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilyTheta}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 2, BacktestStep: 1, BacktestRefit: runconfig.RefitOnce,
			Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:  runconfig.Sharding{TargetSeriesPerShard: 4, Buckets: 32},
		Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 1},
		Hierarchy: &runconfig.Hierarchy{Levels: [][]string{{"depot"}, {"item"}, {}}, ShardBy: []string{"depot"}, Method: "StructuralScaling", NonNegative: true},
	}
	env := pipeline.Env{Now: func() time.Time { return time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC) }, Workers: 2}
	if _, err := pipeline.RunLocal(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	if _, err := Write(ctx, out, filepath.Join(dir, "report"), Options{NoHistory: true}); err != nil {
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
	}
	page := text(doc)
	if !strings.Contains(page, "The published forecasts add up") {
		t.Error("the levels section does not say the forecasts add up")
	}
	if !strings.Contains(page, "12 series in the input") {
		t.Error("the overview does not count the 12 input series only")
	}
}
