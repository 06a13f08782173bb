package pipeline

import (
	"context"
	"fmt"
	"io"
	"math"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/synth"
	"almanac.dev/almanac/trainer/tables"

	"github.com/google/go-cmp/cmp"
)

// hierarchyRun writes Fenwick Lane Provisions' weekly demand (invented: 5 items at 4 depots,
// two years ending the Monday before anchor) to mem:// and returns a run configuration over it
// with the given levels, sharded by depot.
func hierarchyRun(t *testing.T, name string, levels [][]string, method string) *runconfig.Config {
	t.Helper()
	ctx := context.Background()
	in := "mem://" + name + "-in/"
	st := mustOpen(t, in)
	o := synth.Options{Items: 5, Depots: 4, Frequency: synth.Weekly, Periods: 104, End: time.Date(2026, 2, 23, 0, 0, 0, 0, time.UTC), SpareShare: -1}
	if _, err := o.Write(ctx, st, "", synth.CSV); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig(name+"-1", in, "mem://"+name+"-out/")
	cfg.Source.Frequency, cfg.Source.WeekAnchor = "Weekly", "Monday"
	cfg.Source.Columns = runconfig.Columns{Series: []string{"item", "depot"}, Date: o.DateColumn(), Value: "units"}
	cfg.Horizon = 8
	cfg.Models = []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilyETS}}
	cfg.Sharding = runconfig.Sharding{TargetSeriesPerShard: 5, Buckets: 64}
	cfg.Hierarchy = &runconfig.Hierarchy{Levels: levels, ShardBy: []string{"depot"}, Method: method, NonNegative: true}
	if err := cfg.Validate(); err != nil {
		t.Fatal(err)
	}
	return cfg
}

// TestHierarchyAcrossShards runs a hierarchy of depot totals (within a shard), item totals
// across depots and the grand total (spanning shards) through plan, train on every shard,
// reconcile and publish, for each method, and checks that the published run adds up to 1e-9
// relative at every node and period, cross-shard nodes included.
func TestHierarchyAcrossShards(t *testing.T) {
	for _, method := range []string{"BottomUp", "OLS", "StructuralScaling", "MinTShrink"} {
		t.Run(method, func(t *testing.T) {
			cfg := hierarchyRun(t, "flp-hier-"+strings.ToLower(method), [][]string{{"depot"}, {"item"}, {}}, method)
			ctx := context.Background()
			s, err := RunLocal(ctx, cfg, testEnv())
			if err != nil {
				t.Fatal(err)
			}
			if s.Shards < 3 {
				t.Fatalf("%d shards, want at least 3 (one per depot bucket)", s.Shards)
			}
			out := mustOpen(t, cfg.Output.URI)
			m := checkPublished(t, out, cfg.Run)
			p, err := ReadPlan(ctx, out, cfg.Run)
			if err != nil || !p.Reconcile {
				t.Fatalf("plan.reconcile = false (%v), want true: item totals and the grand total span shards", err)
			}
			if _, ok := m.unit(SpanningUnit); !ok {
				t.Fatalf("the manifest has no %s unit", SpanningUnit)
			}
			if m.Totals.Series.Trained != 20 {
				t.Errorf("%d input series forecast, want 20 (aggregates are not counted as input series)", m.Totals.Series.Trained)
			}
			c, err := CheckCoherence(ctx, out, m, cfg)
			if err != nil {
				t.Fatal(err)
			}
			if c.Bottom != 20 || c.Aggregates != 4+5+1 || c.Periods != 8 {
				t.Errorf("coherence over %d bottom, %d aggregates, %d periods; want 20, 10, 8", c.Bottom, c.Aggregates, c.Periods)
			}
			if !c.Coherent() {
				t.Errorf("largest relative deviation %g at %s, want <= %g", c.MaxDeviation, c.Worst, CoherenceTolerance)
			}
			wantOrderedBands(t, out, m, cfg.Source.Columns.Series)
			wantBandRecords(t, out, m, cfg.Source.Columns.Series)
			var b strings.Builder
			if err := Inspect(ctx, cfg.Output.URI, "", &b); err != nil {
				t.Fatal(err)
			}
			if !strings.Contains(b.String(), "hierarchy: coherent: 10 aggregates over 20 bottom series") {
				t.Errorf("inspect does not report the coherence:\n%s", b.String())
			}
		})
	}
}

// wantOrderedBands fails unless every published forecast row of every node (bottom series and
// aggregates, their bands from reconciled backtest errors) has finite quantiles, non-decreasing
// in the level and at or above zero (the runs are non-negative).
func wantOrderedBands(t *testing.T, out *store.Store, m *Manifest, keys []string) {
	t.Helper()
	rows := 0
	for _, u := range m.Units {
		f, ok := u.file(TableForecasts)
		if !ok {
			continue
		}
		err := readTable(context.Background(), out, f, func(r io.Reader) error {
			_, fc, err := tables.ReadForecasts(r, formatOf(f), keys)
			for _, row := range fc {
				rows++
				for j, q := range row.Quantiles {
					if math.IsNaN(q) || math.IsInf(q, 0) || q < 0 || (j > 0 && q < row.Quantiles[j-1]) {
						t.Fatalf("%s %s step %d: quantiles %v", u.ID, row.Key, row.Step, row.Quantiles)
					}
				}
			}
			return err
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	if rows == 0 {
		t.Fatal("no forecast rows published")
	}
}

// wantBandRecords fails unless every published models row (bottom series and aggregates,
// within shards and spanning them) carries a band record, the promise of its bands' coverage
// (tables.ModelRow.Backtest): the reconcile step scores the rebuilt bands of every node whose
// selection backtest came through nodes.json, and writes it into the spanning rows and the
// rewritten unit tables.
func wantBandRecords(t *testing.T, out *store.Store, m *Manifest, keys []string) {
	t.Helper()
	rows, with := 0, 0
	for _, u := range m.Units {
		f, ok := u.file(TableModels)
		if !ok {
			continue
		}
		err := readTable(context.Background(), out, f, func(r io.Reader) error {
			mr, err := tables.ReadModels(r, formatOf(f), keys)
			for _, row := range mr {
				rows++
				if row.Backtest != nil && row.Backtest.Points > 0 && len(row.Backtest.Below) == len(row.Backtest.Levels) {
					with++
				} else {
					t.Errorf("%s %s (level %q): no band record", u.ID, row.Key, row.Level)
				}
			}
			return err
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	if rows == 0 || with != rows {
		t.Errorf("%d of %d models rows carry a band record", with, rows)
	}
}

// TestHierarchyWithinShards: depot totals only, sharded by depot, need no reconcile step; train
// reconciles each depot's sub-tree and the published run adds up.
func TestHierarchyWithinShards(t *testing.T) {
	cfg := hierarchyRun(t, "flp-hier-within", [][]string{{"depot"}}, "StructuralScaling")
	ctx := context.Background()
	if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, cfg.Run)
	if p, _ := ReadPlan(ctx, out, cfg.Run); p == nil || p.Reconcile {
		t.Fatal("plan.reconcile is true for levels within shards")
	}
	c, err := CheckCoherence(ctx, out, m, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if c.Aggregates != 4 || !c.Coherent() {
		t.Errorf("%d aggregates, largest deviation %g at %s; want 4 and <= %g", c.Aggregates, c.MaxDeviation, c.Worst, CoherenceTolerance)
	}
	wantOrderedBands(t, out, m, cfg.Source.Columns.Series)
}

// TestHierarchySecondRunEvaluatesEveryLevel: a second run evaluates the first run's published
// forecasts at every level against the new actuals: the shards report the bottom level and
// the depot totals they hold, the reconcile step the item totals and the grand total, each
// node once (summary.Levels, the controller's per-level status).
func TestHierarchySecondRunEvaluatesEveryLevel(t *testing.T) {
	cfg := hierarchyRun(t, "flp-hier-eval", [][]string{{"depot"}, {"item"}, {}}, "StructuralScaling")
	ctx := context.Background()
	first := time.Date(2026, 1, 27, 6, 0, 0, 0, time.UTC) // four weeks before the data ends
	cfg.ScheduledTime = first
	if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	second := *cfg
	second.Run, second.ScheduledTime = "flp-hier-eval-2", anchor
	ps, err := RunPlan(ctx, &second, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	nodes := map[string]int{}
	evaluated := map[string]int{}
	calibrated := map[string]summary.Calibration{}
	add := func(levels []summary.Level) {
		for _, l := range levels {
			nodes[l.Name] += l.Nodes
			if l.Accuracy != nil {
				evaluated[l.Name] += l.Accuracy.Evaluated
			}
			if l.Calibration != nil {
				c := calibrated[l.Name]
				if !c.Add(*l.Calibration) {
					t.Errorf("level %s: calibrations with different quantile levels", l.Name)
				}
				calibrated[l.Name] = c
			}
		}
	}
	for i := 0; i < ps.Shards; i++ {
		ts, err := RunTrain(ctx, &second, i, testEnv())
		if err != nil {
			t.Fatal(err)
		}
		add(ts.Levels)
		for _, l := range ts.Levels {
			if l.Name == "item" || l.Name == "total" {
				t.Errorf("shard %d reports level %s, which spans shards", i, l.Name)
			}
		}
	}
	rs, err := RunReconcile(ctx, &second, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	add(rs.Levels)
	if rs.MaxDeviation > CoherenceTolerance {
		t.Errorf("reconcile summary: largest deviation %g", rs.MaxDeviation)
	}
	want := map[string]int{"item+depot": 20, "depot": 4, "item": 5, "total": 1}
	for l, n := range want {
		if nodes[l] != n || evaluated[l] != n {
			t.Errorf("level %s: %d nodes, %d evaluated; want %d of each", l, nodes[l], evaluated[l], n)
		}
	}
	if _, err := RunPublish(ctx, &second, testEnv()); err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, second.Run)
	if c, err := CheckCoherence(ctx, out, m, &second); err != nil || !c.Coherent() {
		t.Errorf("second run: %+v %v", c, err)
	}
	levels := map[string]int{}
	points, below := map[string]int{}, map[string][]int{}
	for _, u := range m.Units {
		f, _ := u.file(TableEvaluation)
		err := readTable(ctx, out, f, func(r io.Reader) error {
			rows, err := tables.ReadEvaluation(r, formatOf(f), second.Source.Columns.Series)
			for _, row := range rows {
				levels[row.Level]++
				if c := row.Calibration; c != nil {
					points[row.Level] += c.Points
					if below[row.Level] == nil {
						below[row.Level] = make([]int, len(c.Below))
					}
					for j, b := range c.Below {
						below[row.Level][j] += b
					}
				}
			}
			return err
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	if diff := cmp.Diff(want, levels); diff != "" {
		t.Errorf("evaluation rows by hierarchy_level (-want,+got):\n%s", diff)
	}
	// Each level's calibration in the summaries (train's and reconcile's, what the controller
	// folds into status.hierarchy.levels) adds up the evaluation rows of its nodes.
	for l, n := range want {
		c := calibrated[l]
		if c.Series != n || c.Points != points[l] || points[l] == 0 || !cmp.Equal(c.Below, below[l]) {
			t.Errorf("level %s: summary calibration of %d series, %d points, below %v; the evaluation rows: %d series, %d points, below %v",
				l, c.Series, c.Points, c.Below, n, points[l], below[l])
		}
	}
}

// TestHierarchyRefusesAMissingUnit: a shard that did not finish leaves its depots out of the
// tree; reconcile refuses (exit 5) and latest.json stays on the previous run.
func TestHierarchyRefusesAMissingUnit(t *testing.T) {
	cfg := hierarchyRun(t, "flp-hier-missing", [][]string{{"depot"}, {"item"}, {}}, "OLS")
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	for i := 1; i < ps.Shards; i++ { // shard 0 never runs
		if _, err := RunTrain(ctx, cfg, i, testEnv()); err != nil {
			t.Fatal(err)
		}
	}
	_, err = RunReconcile(ctx, cfg, testEnv())
	if ExitCode(err) != exitcode.Refused || !strings.Contains(err.Error(), "published only whole") && !strings.Contains(err.Error(), "every unit trained in this run") {
		t.Fatalf("reconcile with a missing unit: exit %d: %v", ExitCode(err), err)
	}
	_, err = RunPublish(ctx, cfg, testEnv())
	if ExitCode(err) != exitcode.Refused || !strings.Contains(err.Error(), "reconcile step did not finish") {
		t.Fatalf("publish without the reconcile step: exit %d: %v", ExitCode(err), err)
	}
	if _, ok, _ := mustOpen(t, cfg.Output.URI).ReadLatest(ctx); ok {
		t.Error("latest.json was written")
	}
}

// TestHierarchyOnObjects: with Objects input (one object per depot here, but the layout
// promises nothing about sub-trees) every level spans units: train reconciles nothing, the
// reconcile step builds all aggregates from the partial sums, and the published run adds up.
func TestHierarchyOnObjects(t *testing.T) {
	cfg := hierarchyRun(t, "flp-hier-objects", [][]string{{"depot"}, {"item"}, {}}, "StructuralScaling")
	cfg.Source.Partitioning = runconfig.PartitionObjects
	cfg.Sharding.Buckets = 0
	ctx := context.Background()
	s, err := RunLocal(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, cfg.Run)
	c, err := CheckCoherence(ctx, out, m, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if s.Shards < 2 || c.Bottom != 20 || c.Aggregates != 10 || !c.Coherent() {
		t.Errorf("%d shards; coherence %+v", s.Shards, c)
	}
}

// TestHierarchyExtendsShortSeries: an item whose rows stop three days before the others'
// (delisted at one depot) is extended with zeros to the input's last period, so it is
// forecast for the same periods as its depot total and the grand total, and the run adds up.
func TestHierarchyExtendsShortSeries(t *testing.T) {
	ctx := context.Background()
	in, out := "mem://flp-hier-short-in/", "mem://flp-hier-short-out/"
	st := mustOpen(t, in)
	for _, depot := range []string{"brill", "corrie"} {
		rows := depotRows(depot, []string{"P001", "P002"}, 60, func(item string, n, d int, day time.Time) string {
			return fmt.Sprintf("%d", 10+n+3*int(day.Weekday())+(d%5))
		})
		if depot == "corrie" { // P002 at corrie: its last three days are absent
			var kept []string
			for _, line := range strings.Split(strings.TrimSpace(string(rows)), "\n") {
				if !strings.HasPrefix(line, "P002,corrie,2026-02-27") && !strings.HasPrefix(line, "P002,corrie,2026-02-28") && !strings.HasPrefix(line, "P002,corrie,2026-03-01") {
					kept = append(kept, line)
				}
			}
			rows = []byte(strings.Join(kept, "\n") + "\n")
		}
		if err := st.Put(ctx, depot+".csv", rows); err != nil {
			t.Fatal(err)
		}
	}
	cfg := testConfig("flp-hier-short-1", in, out)
	cfg.Source.Columns.Covariates = nil
	cfg.Sharding = runconfig.Sharding{TargetSeriesPerShard: 2, Buckets: 16}
	cfg.Hierarchy = &runconfig.Hierarchy{Levels: [][]string{{"depot"}, {}}, ShardBy: []string{"depot"}, Method: "StructuralScaling", NonNegative: true}
	if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	o := mustOpen(t, out)
	m := checkPublished(t, o, cfg.Run)
	c, err := CheckCoherence(ctx, o, m, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if c.Bottom != 4 || c.Aggregates != 3 || c.Periods != cfg.Horizon || !c.Coherent() {
		t.Fatalf("coherence %+v, want 4 bottom series, 3 aggregates, %d periods, coherent", c, cfg.Horizon)
	}
	var b strings.Builder
	if err := InspectSeries(ctx, out, "", "item=P002,depot=corrie", &b); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "extended with 3 zero periods") || !strings.Contains(b.String(), "2026-03-02T00:00:00Z,1,") {
		t.Errorf("the short series is not extended to the others' last day:\n%s", b.String())
	}
}
