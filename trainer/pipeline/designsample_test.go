package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
)

// The plan's streaming sample keeps exactly the keys design.Sample draws from the whole set
// (the limit first by rank), never holds more than limit series, keeps every row of a kept
// series although keys arrive interleaved over several objects, gives the same sample for
// the objects in another order, and leaves out for good the keys of an object that broke.
func TestDesignSampleIsBoundedAndDeterministic(t *testing.T) {
	cfg := testConfig("flp-sample", "file:///in/", "file:///out/")
	cfg.Source.Columns.Covariates = nil
	const keys, objects, days, limit = 600, 3, 10, 40
	end := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	// Object o holds days o, o+3, o+6, ... of every key, keys in a shuffled order.
	rows := make([][]ingest.Row, objects)
	for o := range rows {
		for k := 0; k < keys; k++ {
			key := ingest.JoinKey(fmt.Sprintf("FLP-ITEM-%04d", (k*7919)%keys), "ashby")
			for d := o; d < days; d += objects {
				rows[o] = append(rows[o], ingest.Row{Key: key, Date: end.AddDate(0, 0, -d), Value: float64(d)})
			}
		}
	}
	// draw also returns the most series the sample held at once.
	draw := func(order []int, broken int) ([]series.Series, *designSample, int) {
		s, err := newDesignSample(cfg, anchor, limit)
		if err != nil {
			t.Fatal(err)
		}
		peak := 0
		for _, o := range order {
			for i, r := range rows[o] {
				s.add(r)
				peak = max(peak, len(s.kept))
				if s.c.Len() > limit || len(s.kept) > limit {
					t.Fatalf("holds %d series (%d kept) after %d rows of object %d, limit %d", s.c.Len(), len(s.kept), i+1, o, limit)
				}
				if o == broken && i == len(rows[o])/2 {
					break // the object breaks halfway
				}
			}
			s.commit(o == broken)
		}
		return s.finish(), s, peak
	}
	got, _, peak := draw([]int{0, 1, 2}, -1)
	var all []series.Series
	for k := 0; k < keys; k++ {
		all = append(all, series.Series{Key: ingest.JoinKey(fmt.Sprintf("FLP-ITEM-%04d", k), "ashby")})
	}
	var want []string
	for _, i := range design.Sample(all, limit) {
		want = append(want, all[i].Key)
	}
	sort.Strings(want)
	if len(got) != limit || peak != limit {
		t.Fatalf("%d series, peak %d; want %d", len(got), peak, limit)
	}
	for i, sr := range got {
		if sr.Key != want[i] || sr.Len() != days {
			t.Errorf("series %d: %s with %d days; want %s with all %d", i, sr.Key, sr.Len(), want[i], days)
		}
	}
	again, _, _ := draw([]int{2, 0, 1}, -1)
	for i := range again {
		if again[i].Key != got[i].Key || !slices.Equal(again[i].Values, got[i].Values) {
			t.Errorf("objects in another order: series %d is %s, was %s", i, again[i].Key, got[i].Key)
		}
	}
	// Object 1 breaks halfway: the kept keys it had rows of leave; the others stay whole.
	part, s, _ := draw([]int{0, 1, 2}, 1)
	if len(s.excluded) == 0 || len(part) >= limit {
		t.Fatalf("after a broken object: %d series, %d excluded", len(part), len(s.excluded))
	}
	for _, sr := range part {
		if s.excluded[sr.Key] || sr.Len() != days || !slices.Contains(want, sr.Key) {
			t.Errorf("after a broken object: %s (%d days) in the sample", sr.Key, sr.Len())
		}
	}
}

// The design sample and its choice travel from plan to train: plan decides once on at most
// Env.DesignSample series and writes the choice into plan.json; every shard applies it to the
// segments it holds (design_chosen_by plan), and chooses by itself, marked as such, only for a
// segment the sample did not hold. Here the sample (8 of 16 series, by rank) holds only
// smooth series: the 4 intermittent ones, ranked last, are chosen by their shards.
func TestUnseenSegmentIsChosenByTheShard(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	st := mustOpen(t, "file://"+dir)
	var items []string
	for i := 0; i < 16; i++ {
		items = append(items, fmt.Sprintf("FLP-ITEM-%02d", i))
	}
	// The 4 items whose keys rank last are intermittent (a sale of 5 every fourth day).
	sort.Slice(items, func(a, b int) bool {
		ka, kb := ingest.JoinKey(items[a], "ashby"), ingest.JoinKey(items[b], "ashby")
		return design.SampleLess(ka, design.SampleHash(ka), kb, design.SampleHash(kb))
	})
	sparse := map[string]bool{}
	for _, it := range items[12:] {
		sparse[it] = true
	}
	csv := depotRows("ashby", items, 60, func(item string, n, d int, day time.Time) string {
		if sparse[item] {
			if d%4 == 0 {
				return "5"
			}
			return "0"
		}
		return fmt.Sprintf("%d", 10+n+3*int(day.Weekday())+(d%5))
	})
	if err := st.Put(ctx, "in/ashby.csv", csv); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig("flp-sample-1", "file://"+dir+"/in/", "file://"+dir+"/out")
	cfg.Selection.Design = runconfig.DesignAuto
	cfg.Models = []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}}
	cfg.Sharding.TargetSeriesPerShard = 4
	env := testEnv()
	env.DesignSample = 8
	var log bytes.Buffer
	env.Log = &log
	ps, err := RunPlan(ctx, cfg, env)
	if err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	p, err := ReadPlan(ctx, out, cfg.Run)
	if err != nil {
		t.Fatal(err)
	}
	if p.Design == nil || p.Design.SampleSeries != 8 || p.Design.SampleLimit != 8 || len(p.Design.Segments) != 1 ||
		p.Design.Segments[0].Segment != "daily/smooth/long" || p.Design.Segments[0].Design != design.NamePerSeries {
		t.Fatalf("plan.json design %+v", p.Design)
	}
	if ps.Shards < 2 {
		t.Fatalf("%d shards, want several", ps.Shards)
	}
	byShard := map[string]int{}
	for i := 0; i < ps.Shards; i++ {
		sum, err := RunTrain(ctx, cfg, i, env)
		if err != nil {
			t.Fatal(err)
		}
		for d, n := range sum.DesignsByShard {
			byShard[d] += n
		}
	}
	if _, err := RunPublish(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	if byShard[design.NamePerSeries] != 4 {
		t.Errorf("summaries: %v chosen by the shards, want the 4 intermittent series", byShard)
	}
	n := 0
	for _, u := range checkPublished(t, out, cfg.Run).Units {
		for _, r := range unitModels(t, out, u, "csv") {
			n++
			item, _ := ingest.SplitKey(r.Key, 2)
			want, seg := design.FromPlan, "daily/smooth/long"
			if sparse[item[0]] {
				want, seg = design.FromShard, "daily/intermittent/long"
			}
			if r.DesignBy != want || r.Segment != seg || r.Design != design.NamePerSeries {
				t.Errorf("%s: design %s of %s chosen by %q; want %s chosen by %s", r.Key, r.Design, r.Segment, r.DesignBy, seg, want)
			}
		}
	}
	if n != 16 {
		t.Errorf("%d models rows, want 16", n)
	}
	var insp bytes.Buffer
	if err := Inspect(ctx, cfg.Output.URI, "", &insp); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(insp.String(), "\ndesigns: per-series 16 (4 chosen by their shard)\n") {
		t.Errorf("inspect:\n%s", insp.String())
	}
	// A plan.json whose design names a design this run does not have is refused at train, as
	// any plan.json that does not validate.
	p.Design.Segments[0].Design = "ets-theta"
	b, _ := EncodePlan(p)
	if err := out.Put(ctx, store.RunKey(cfg.Run, store.PlanName), b); err != nil {
		t.Fatal(err)
	}
	if _, err := RunTrain(ctx, cfg, 0, env); err == nil || !strings.Contains(err.Error(), `plan.json: design: segments[0].design: "ets-theta" is not one of the candidates`) {
		t.Errorf("train with a damaged plan design: %v", err)
	}
	// A plan.json that does not parse is damaged run state: permanent (exit 3), not retried.
	if err := out.Put(ctx, store.RunKey(cfg.Run, store.PlanName), b[:len(b)/2]); err != nil {
		t.Fatal(err)
	}
	if _, err := RunTrain(ctx, cfg, 0, env); ExitCode(err) != exitcode.Data || !strings.Contains(err.Error(), "plan.json") {
		t.Errorf("train with a truncated plan.json: exit %d, %v; want exit %d naming plan.json", ExitCode(err), err, exitcode.Data)
	}
}

// A run's plan passes the previous published run's cost verdict to the design
// (previousVerdict, design.Options.Before), and the design holds it for a member near the
// budget. At designCostPercent 100 the budget is the ETS, Theta and DOTM costs (about 6 ms per
// series here), so Naive (0.2 to 0.4 ms) cannot fit beside them by the plain rule, which the
// first run applies; told that the previous run kept Naive, the next run keeps it (the costs
// fit 1.2 times the budget), says so in its log and records it in plan.json. A first run has
// no verdict, and a previous plan that cannot be read leaves the plain rule with a line in the
// log, not a failed plan.
func TestPlanTakesThePreviousCostVerdict(t *testing.T) {
	dir, cfg := objectRun(t)
	ctx := context.Background()
	cfg.Selection.Design = runconfig.DesignAuto
	cfg.Models = []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilyETS}, {Family: models.FamilyTheta}, {Family: models.FamilyDOTM}}
	cfg.Selection.DesignCostPercent = 100
	out := mustOpen(t, cfg.Output.URI)
	if prev, err := previous(ctx, out, cfg); prev != nil || err != nil || previousVerdict(ctx, out, prev, testEnv()) != nil {
		t.Fatalf("first run: previous run %+v, %v; want none and no verdict", prev, err)
	}
	if _, errs := runAll(t, cfg); slices.ContainsFunc(errs, func(err error) bool { return err != nil }) {
		t.Fatalf("first run: %v", errs)
	}
	first, err := ReadPlan(ctx, out, cfg.Run)
	if err != nil || first.Design == nil || len(first.Design.MemberCostMillis) != len(cfg.Models) ||
		!slices.Equal(first.Design.DroppedMembers, []string{models.FamilyNaive}) {
		t.Fatalf("first run's plan: design %+v, %v; want every member measured and Naive dropped", first.Design, err)
	}
	next := *cfg
	next.Run = "flp-0002"
	prev, err := previous(ctx, out, &next)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := previousVerdict(ctx, out, prev, testEnv()), first.Design.Before(); got == nil || !reflect.DeepEqual(got, want) {
		t.Errorf("second run: verdict %+v; want %+v from the first run's plan", got, want)
	}
	// The first run's plan, as if it had kept Naive.
	first.Design.DroppedMembers = nil
	b, err := EncodePlan(first)
	if err != nil {
		t.Fatal(err)
	}
	if err := out.Put(ctx, store.RunKey(cfg.Run, store.PlanName), b); err != nil {
		t.Fatal(err)
	}
	plan := func() (*Plan, string, summary.Summary) {
		t.Helper()
		env := testEnv()
		var log bytes.Buffer
		env.Log = &log
		sum, err := RunPlan(ctx, &next, env)
		if err != nil {
			t.Fatalf("second plan: %v", err)
		}
		p, err := ReadPlan(ctx, out, next.Run)
		if err != nil {
			t.Fatal(err)
		}
		return p, log.String(), sum
	}
	p, log, sum := plan()
	if !slices.Equal(p.Design.HeldMembers, []string{models.FamilyNaive}) || len(p.Design.DroppedMembers) != 0 ||
		!strings.Contains(log, "; kept the previous run's verdict: "+models.FamilyNaive+" (member costs") {
		t.Errorf("previous run kept Naive: held %v, dropped %v (costs %v, budget %v); log:\n%s",
			p.Design.HeldMembers, p.Design.DroppedMembers, p.Design.MemberCostMillis, p.Design.BudgetMillis, log)
	}
	// The summary carries the verdict to the controller (the run's status).
	if !slices.Equal(sum.HeldMembers, p.Design.HeldMembers) || len(sum.DroppedMembers) != 0 {
		t.Errorf("summary: held %v, dropped %v; want the plan's %v and none", sum.HeldMembers, sum.DroppedMembers, p.Design.HeldMembers)
	}
	// A damaged plan of the previous run: no verdict, the plain rule, and the plan goes on.
	if err := os.WriteFile(filepath.Join(dir, "out", "runs", cfg.Run, "plan.json"), []byte("{"), 0o644); err != nil {
		t.Fatal(err)
	}
	p, log, sum = plan()
	if want := "plan: the previous run " + cfg.Run + "'s plan cannot be read, so its cost verdict is not kept"; !strings.Contains(log, want) ||
		len(p.Design.HeldMembers) != 0 || !slices.Equal(p.Design.DroppedMembers, []string{models.FamilyNaive}) {
		t.Errorf("previous plan damaged: held %v, dropped %v; log:\n%s", p.Design.HeldMembers, p.Design.DroppedMembers, log)
	}
	if !slices.Equal(sum.DroppedMembers, []string{models.FamilyNaive}) || len(sum.HeldMembers) != 0 {
		t.Errorf("summary: dropped %v, held %v; want Naive and none", sum.DroppedMembers, sum.HeldMembers)
	}
}
