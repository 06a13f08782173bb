package report

import (
	"context"
	"fmt"
	"path/filepath"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
)

// TestReportShowsThePlanScores: an automatic-design run on generated weekly demand; the
// report's table of groups gives, for every group the plan chose, the hidden-periods MASE of
// the chosen design and of the simplest candidate exactly as plan.json records them.
func TestReportShowsThePlanScores(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	in, out := "file://"+dir+"/in/", "file://"+dir+"/out/"
	st, err := store.Open(ctx, in)
	if err != nil {
		t.Fatal(err)
	}
	o := synth.Options{Items: 6, Depots: 4, Frequency: synth.Weekly, Periods: 160}
	if _, err := o.Write(ctx, st, "", synth.CSV); err != nil {
		t.Fatal(err)
	}
	st.Close()
	cfg := &runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind, Run: "flp-auto-1", Trigger: "Manual",
		Source: runconfig.Source{URI: in, Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true, Partitioning: runconfig.PartitionHashBuckets,
			Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: o.DateColumn(), Value: "units"}},
		Output: runconfig.Output{URI: out, Format: "csv"}, Horizon: 8, QuantilePercents: []int{10, 90}, QuantileWidth: runconfig.QuantileWidthBacktest,
		Models: []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}, {Family: models.FamilyTheta},
			{Family: models.FamilyDOTM}, {Family: models.FamilyETS}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 2, BacktestStep: 1, BacktestRefit: runconfig.RefitOnce,
			Design: runconfig.DesignAuto, DesignCostPercent: 500},
		Sharding: runconfig.Sharding{TargetSeriesPerShard: 8, Buckets: 32},
		Drift:    runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 1},
	}
	env := pipeline.Env{Now: func() time.Time { return time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC) }, Workers: 2}
	if _, err := pipeline.RunLocal(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	if _, err := Write(ctx, out, filepath.Join(dir, "report"), Options{NoHistory: true}); err != nil {
		t.Fatal(err)
	}
	ost, err := store.Open(ctx, out)
	if err != nil {
		t.Fatal(err)
	}
	defer ost.Close()
	rec, err := planDesign(ctx, ost, cfg.Run)
	if err != nil || rec == nil || len(rec.Segments) == 0 {
		t.Fatalf("plan.json design %+v, %v", rec, err)
	}
	want := map[string][2]string{} // segment -> chosen, simplest
	for _, sg := range rec.Segments {
		var w [2]string
		for _, sc := range sg.Scores {
			if sc.Design == sg.Design {
				w[0] = fmt.Sprintf("%.3f", sc.MeanMASE)
			}
			if sc.Design == rec.Candidates[0].Name {
				w[1] = fmt.Sprintf("%.3f", sc.MeanMASE)
			}
		}
		want[sg.Segment] = w
	}
	doc := parsePage(t, filepath.Join(dir, "report", "index.html"))
	rows := tableRows(byID(t, doc, "design-choices"))
	if len(rows) == 0 {
		t.Fatal("no design rows")
	}
	for _, r := range rows {
		w, ok := want[r[0]]
		if !ok || r[3] != "plan" || w[0] == "" || w[1] == "" {
			t.Fatalf("row %v: plan.json has %v for its group", r, w)
		}
		if r[4] != w[0] || r[5] != w[1] {
			t.Errorf("group %s: hidden-periods MASE %s and %s, want %s and %s (plan.json)", r[0], r[4], r[5], w[0], w[1])
		}
	}
	t.Logf("design rows %v", rows)
	// Below the table, the plan's cost verdict as plan.json records it (every member timed).
	if len(rec.MemberCostMillis) != len(cfg.Models) {
		t.Fatalf("plan.json timed %v; want all %d members", rec.MemberCostMillis, len(cfg.Models))
	}
	if got, want := text(byID(t, doc, "design-cost")), CostWords(rec); got != want || want == "" {
		t.Errorf("cost paragraph %q; want %q", got, want)
	}
}

// TestCostWords: the sentences below the design table, by hand from a record with one member
// dropped and one held, with none dropped, and without a timed plan.
func TestCostWords(t *testing.T) {
	rec := &design.Record{BudgetMillis: 5.2391, DroppedMembers: []string{"ARIMA", "MSTLARIMA"}, HeldMembers: []string{"MSTLARIMA"},
		MemberCostMillis: map[string]float64{"ETS": 0.71, "ARIMA": 41.37, "MSTLARIMA": 5.82}}
	want := "Left out of every way for cost: ARIMA (41.4 ms) and MSTLARIMA (5.82 ms). The plan timed each model on a few series; " +
		"these took more than the budget of 5.24 ms of CPU per series (spec.selection.designCostPercent of the simplest way's cost). " +
		"The cost of MSTLARIMA lay within 20% of the budget, so the previous run's verdict stands (left out or kept as in that run): " +
		"timing noise does not move a model in and out from run to run."
	if got := CostWords(rec); got != want {
		t.Errorf("dropped and held:\n got %q\nwant %q", got, want)
	}
	rec.DroppedMembers, rec.HeldMembers = nil, nil
	want = "No model was left out for cost: each took less than the budget of 5.24 ms of CPU per series " +
		"(spec.selection.designCostPercent of the simplest way's cost) when the plan timed it on a few series."
	if got := CostWords(rec); got != want {
		t.Errorf("none dropped:\n got %q\nwant %q", got, want)
	}
	if got := CostWords(&design.Record{BudgetMillis: 5}); got != "" {
		t.Errorf("no member timed: %q; want nothing", got)
	}
	if got := CostWords(nil); got != "" {
		t.Errorf("no record: %q; want nothing", got)
	}
}

// TestWithPlanScores: a row the plan chose gets its design's and the simplest candidate's
// scores from the record; a row chosen by a shard, or whose design the record's segment did
// not choose (a carried-forward unit from another plan), gets none.
func TestWithPlanScores(t *testing.T) {
	rec := &design.Record{
		Candidates: []design.RecordCandidate{{Name: "ets-theta-dotm"}, {Name: "top3-median"}},
		Segments: []design.RecordSegment{{Segment: "weekly/smooth/short", Design: "top3-median",
			Scores: []design.RecordScore{{Design: "ets-theta-dotm", MeanMASE: 1.1726}, {Design: "top3-median", MeanMASE: 0.37666}}}},
	}
	rows := []DesignRow{
		{Segment: "weekly/smooth/short", Design: "top3-median", ChosenBy: design.FromPlan},
		{Segment: "weekly/smooth/short", Design: "ets-theta-dotm", ChosenBy: design.FromPlan},
		{Segment: "weekly/erratic/short", Design: "top3-median", ChosenBy: design.FromShard},
	}
	withPlanScores(rows, rec)
	if rows[0].Inner != "0.377" || rows[0].Simplest != "1.173" {
		t.Errorf("chosen row %+v, want 0.377 and 1.173", rows[0])
	}
	for _, r := range rows[1:] {
		if r.Inner != "" || r.Simplest != "" {
			t.Errorf("row %+v got plan scores", r)
		}
	}
}
