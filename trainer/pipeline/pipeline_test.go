package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
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
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
	"almanac.dev/almanac/trainer/tables"
)

// anchor is the fixed clock of these tests: the morning after the last day of history.
var anchor = time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)

func testEnv() Env { return Env{Now: func() time.Time { return anchor }, Workers: 2} }

// testKeys are the test portfolio's key columns.
var testKeys = []string{"item", "depot"}

// testConfig is a daily run over Fenwick Lane Provisions' depots (invented data).
func testConfig(run, in, out string) *runconfig.Config {
	return &runconfig.Config{
		APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
		Portfolio: "flp-daily", Namespace: "planning", Run: run, Trigger: "Manual",
		Source: runconfig.Source{URI: in, Format: "csv", Frequency: "Daily", NonNegative: true, Partitioning: runconfig.PartitionHashBuckets,
			Columns: runconfig.Columns{Series: testKeys, Date: "date", Value: "units", Covariates: []string{"promo_flag"}}},
		Output:           runconfig.Output{URI: out, Format: "csv"},
		Horizon:          7,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    runconfig.QuantileWidthBacktest,
		Models:           []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 2, BacktestStep: 1, BacktestRefit: runconfig.RefitEveryOrigin,
			Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding: runconfig.Sharding{TargetSeriesPerShard: 3},
		Drift:    runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 3},
	}
}

// depotCSV is one depot's history: items x days of weekly-seasonal demand ending the day
// before anchor. bad names an item whose third row has an unparsable value.
func depotCSV(depot string, items []string, days int, bad string) []byte {
	return depotRows(depot, items, days, func(item string, n, d int, day time.Time) string {
		if item == bad && d == days-3 {
			return "n/a"
		}
		return fmt.Sprintf("%d", 10+n+3*int(day.Weekday())+(d%5))
	})
}

// depotRows writes one depot's daily history of items, ending the day before anchor: units
// is units(item, its index n, d days before the end, the day); promo_flag is set every ninth day.
func depotRows(depot string, items []string, days int, units func(item string, n, d int, day time.Time) string) []byte {
	var b bytes.Buffer
	b.WriteString("item,depot,date,units,promo_flag\n")
	end := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	for n, item := range items {
		for d := days - 1; d >= 0; d-- {
			day := end.AddDate(0, 0, -d)
			fmt.Fprintf(&b, "%s,%s,%s,%s,%d\n", item, depot, day.Format("2006-01-02"), units(item, n, d, day), d%9/8)
		}
	}
	return b.Bytes()
}

// unitModels reads a published unit's models table.
func unitModels(t *testing.T, out *store.Store, u ManifestUnit, format string) []tables.ModelRow {
	t.Helper()
	f, _ := u.file(TableModels)
	b, err := out.Get(context.Background(), f.Key)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := tables.ReadModels(bytes.NewReader(b), format, testKeys)
	if err != nil {
		t.Fatal(err)
	}
	return rows
}

// putParquet writes o's depot objects into st as Parquet (synth.Options.WriteParquet), with
// rowsPerGroup rows in each row group.
func putParquet(t *testing.T, st *store.Store, o synth.Options, rowsPerGroup int) {
	t.Helper()
	for d := 0; d < o.Depots; d++ {
		if err := st.Write(context.Background(), synth.ObjectKey(d, synth.Parquet), func(w io.Writer) error { return o.WriteParquet(w, d, rowsPerGroup) }); err != nil {
			t.Fatal(err)
		}
	}
}

// putInput writes three depot objects (7 series, one of them bad) through st.
func putInput(t *testing.T, st *store.Store) {
	t.Helper()
	ctx := context.Background()
	for _, o := range []struct {
		key   string
		items []string
		bad   string
	}{
		{"in/depot-ashby.csv", []string{"FLP-OATS-1KG", "FLP-TEA-80"}, ""},
		{"in/depot-brill.csv", []string{"FLP-OATS-1KG", "FLP-JAM-340", "FLP-HONEY-454"}, "FLP-JAM-340"},
		{"in/depot-corrie.csv", []string{"FLP-TEA-80", "FLP-FLOUR-1500"}, ""},
	} {
		if err := st.Put(ctx, o.key, depotCSV(strings.TrimSuffix(strings.TrimPrefix(o.key, "in/depot-"), ".csv"), o.items, 42, o.bad)); err != nil {
			t.Fatal(err)
		}
	}
}

func mustOpen(t testing.TB, uri string) *store.Store {
	t.Helper()
	st, err := store.Open(context.Background(), uri)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	return st
}

// objectRun writes the input under a temporary directory and returns it with the first run's
// configuration, one unit per object.
func objectRun(t *testing.T) (string, *runconfig.Config) {
	dir := t.TempDir()
	putInput(t, mustOpen(t, "file://"+dir))
	cfg := testConfig("flp-0001", "file://"+dir+"/in/", "file://"+dir+"/out")
	cfg.Source.Partitioning = runconfig.PartitionObjects
	return dir, cfg
}

// runAll plans, trains every shard and publishes; it returns the shard count and each
// shard's error.
func runAll(t *testing.T, cfg *runconfig.Config) (int, []error) {
	t.Helper()
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg, testEnv())
	if err != nil {
		t.Fatalf("plan: %v", err)
	}
	errs := make([]error, ps.Shards)
	for i := range errs {
		_, errs[i] = RunTrain(ctx, cfg, i, testEnv())
	}
	if _, err := RunPublish(ctx, cfg, testEnv()); err != nil {
		t.Fatalf("publish: %v", err)
	}
	return ps.Shards, errs
}

// checkPublished follows latest.json and checks the run it names is complete and verified.
func checkPublished(t *testing.T, out *store.Store, run string) *Manifest {
	t.Helper()
	ctx := context.Background()
	p, ok, err := out.ReadLatest(ctx)
	if err != nil || !ok || p.Run != run {
		t.Fatalf("latest = %+v %v %v, want run %s", p, ok, err, run)
	}
	m, err := readManifest(ctx, out, run)
	if err != nil {
		t.Fatal(err)
	}
	for _, u := range m.Units {
		if u.State == StateMissing {
			continue
		}
		if bad, err := verifyFiles(ctx, out, u.Files); err != nil || bad != "" {
			t.Fatalf("unit %s: %s %v", u.ID, bad, err)
		}
	}
	return m
}

func TestEndToEndObjectsOnFile(t *testing.T) {
	dir, cfg := objectRun(t)
	shards, errs := runAll(t, cfg)
	if shards != 3 { // 7 series / 3 per shard -> 3 shards of the 3 objects
		t.Fatalf("%d shards, want 3", shards)
	}
	for i, err := range errs {
		if err != nil {
			t.Fatalf("shard %d: %v", i, err)
		}
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0001")
	if !m.Complete || m.Totals.Trained != 3 || m.Totals.Series.Series != 7 || m.Totals.Series.Trained != 6 || m.Totals.Series.Rejected != 1 {
		t.Fatalf("totals = %+v complete %v", m.Totals, m.Complete)
	}
	// The bad series is rejected with a reason naming the object and line.
	unit := ObjectID("depot-brill.csv", nil)
	b, err := out.Get(context.Background(), store.UnitKey("flp-0001", unit, store.RejectedName))
	if err != nil {
		t.Fatal(err)
	}
	rej, err := tables.ReadRejected(bytes.NewReader(b), tables.CSV, testKeys)
	if err != nil || len(rej) != 1 || rej[0].Key != ingest.JoinKey("FLP-JAM-340", "brill") ||
		!strings.Contains(rej[0].Reason, "depot-brill.csv line") || !strings.Contains(rej[0].Reason, `"n/a"`) {
		t.Fatalf("rejected = %+v, %v", rej, err)
	}
	// Forecasts: 7 steps per trained series, starting the day after the last actual.
	fb, _ := out.Get(context.Background(), store.UnitKey("flp-0001", unit, "forecasts.csv"))
	h, fc, err := tables.ReadForecasts(bytes.NewReader(fb), tables.CSV, testKeys)
	if err != nil || len(fc) != 2*7 || len(h.Quantiles) != 3 {
		t.Fatalf("forecasts: %d rows, header %+v, %v", len(fc), h, err)
	}
	if first := fc[0]; !first.Period.Equal(time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)) || first.Step != 1 {
		t.Fatalf("first forecast row %+v", first)
	}
	for _, r := range fc {
		if !(r.Quantiles[0] <= r.Quantiles[1] && r.Quantiles[1] <= r.Quantiles[2]) || r.Quantiles[0] < 0 {
			t.Fatalf("quantiles out of order or negative: %+v", r)
		}
	}

	// Idempotence: rerunning a shard rewrites identical bytes.
	before := snapshot(t, dir+"/out/runs/flp-0001/units")
	if _, err := RunTrain(context.Background(), cfg, 1, testEnv()); err != nil {
		t.Fatal(err)
	}
	if after := snapshot(t, dir+"/out/runs/flp-0001/units"); !equalFiles(before, after) {
		t.Fatal("rerunning shard 1 changed its outputs")
	}
	var sb strings.Builder
	if err := Inspect(context.Background(), cfg.Output.URI, "", &sb); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"run flp-0001 (complete)", "units: 3 (3 trained, 0 carried forward, 0 missing)", "series: 7 (6 forecast, 1 rejected)"} {
		if !strings.Contains(sb.String(), want) {
			t.Errorf("inspect output lacks %q:\n%s", want, sb.String())
		}
	}
}

func TestEndToEndBucketsOnMem(t *testing.T) {
	in := mustOpen(t, "mem://flp-buckets-in/")
	putInput(t, in)
	cfg := testConfig("flp-0001", "mem://flp-buckets-in/in/", "mem://flp-buckets-out/")
	s, err := RunLocal(context.Background(), cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0001")
	// 7 series, target 3 -> 3 shards -> 16 buckets (ChooseBuckets); every series in one bucket.
	if m.Buckets != 16 || !m.Complete || m.Totals.Series.Series != 7 || m.Totals.Series.Rejected != 1 || s.Shards != 3 {
		t.Fatalf("manifest buckets %d complete %v totals %+v, summary %+v", m.Buckets, m.Complete, m.Totals, s)
	}
	// A second run keeps the bucket count, so unit ids stay stable.
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Sharding.TargetSeriesPerShard = 1
	if _, err := RunLocal(context.Background(), cfg2, testEnv()); err != nil {
		t.Fatal(err)
	}
	m2 := checkPublished(t, out, "flp-0002")
	if m2.Buckets != 16 || m2.PreviousRun != "flp-0001" {
		t.Fatalf("second run: buckets %d previous %q", m2.Buckets, m2.PreviousRun)
	}
}

func TestVanishedObjectIsCarriedForward(t *testing.T) {
	dir, cfg := objectRun(t)
	if _, errs := runAll(t, cfg); errs[0] != nil || errs[1] != nil || errs[2] != nil {
		t.Fatalf("first run: %v", errs)
	}
	// Second run: plan sees all three objects, then depot-corrie vanishes before train.
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Source.Partitioning = runconfig.PartitionObjects
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg2, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(filepath.Join(dir, "in", "depot-corrie.csv")); err != nil {
		t.Fatal(err)
	}
	failed := 0
	for i := 0; i < ps.Shards; i++ {
		_, err := RunTrain(ctx, cfg2, i, testEnv())
		if err != nil {
			failed++
			if ExitCode(err) != exitcode.Data || !strings.Contains(err.Error(), "depot-corrie.csv") {
				t.Fatalf("shard %d: exit %d, %v; want exit 3 naming the object", i, ExitCode(err), err)
			}
		}
	}
	if failed != 1 {
		t.Fatalf("%d shards failed, want 1", failed)
	}
	ss, err := RunPublish(ctx, cfg2, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0002")
	e, _ := m.unit(ObjectID("depot-corrie.csv", nil))
	if ss.CarriedForward != 1 || ss.Missing != 0 || !m.Complete || e.State != StateCarried || e.Source != "flp-0001" ||
		!strings.HasPrefix(e.Files[0].Key, "runs/flp-0001/") {
		t.Fatalf("summary %+v, entry %+v", ss, e)
	}
	// A third run with the object still gone at plan time forecasts 4 series against the 6
	// flp-0002 published: the default publish guard (80% of the previous run) refuses it.
	cfg3 := testConfig("flp-0003", cfg.Source.URI, cfg.Output.URI)
	cfg3.Source.Partitioning = runconfig.PartitionObjects
	if _, err := RunLocal(ctx, cfg3, testEnv()); ExitCode(err) != exitcode.Refused ||
		!strings.Contains(err.Error(), "4 series forecast against 6 published by flp-0002") {
		t.Fatalf("third run: exit %d, %v; want the guard's refusal", ExitCode(err), err)
	}
	checkPublished(t, out, "flp-0002")
	// Declared smaller, the portfolio publishes it.
	cfg3.Publish = &runconfig.Publish{MinForecastPercent: 50, MinPreviousPercent: 50, MaxCarriedForwardPercent: 50}
	if _, err := RunPublish(ctx, cfg3, testEnv()); err != nil {
		t.Fatal(err)
	}
	m3 := checkPublished(t, out, "flp-0003")
	if len(m3.Units) != 2 {
		t.Fatalf("run 3 planned %d units, want 2 (the object is gone at plan time)", len(m3.Units))
	}
}

func TestFailedShardOnFirstRunIsMissing(t *testing.T) {
	dir, cfg := objectRun(t)
	// 4 of 7 series forecast: below the default publish guard, which this test turns off.
	cfg.Publish = &runconfig.Publish{MaxCarriedForwardPercent: 100}
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "in", "depot-ashby.csv"), []byte("item,depot\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < ps.Shards; i++ {
		RunTrain(ctx, cfg, i, testEnv())
	}
	s, err := RunPublish(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0001")
	e, _ := m.unit(ObjectID("depot-ashby.csv", nil))
	if s.Missing != 1 || m.Complete || e.State != StateMissing || !strings.Contains(e.Reason, "no unit.json") {
		t.Fatalf("summary %+v complete %v entry %+v", s, m.Complete, e)
	}
}

func TestBadURIAndPermission(t *testing.T) {
	ctx := context.Background()
	cfg := testConfig("flp-0001", "ftp://depot.example/in/", "mem://flp-perm-out/")
	if _, err := RunPlan(ctx, cfg, testEnv()); ExitCode(err) != exitcode.Config || !strings.Contains(err.Error(), `scheme "ftp"`) {
		t.Fatalf("bad source scheme: exit %d, %v", ExitCode(err), err)
	}
	cfg = testConfig("flp-0001", "mem://x/in/", "gopher://x/out")
	if _, err := RunPlan(ctx, cfg, testEnv()); ExitCode(err) != exitcode.Config || !strings.Contains(err.Error(), "output.uri") {
		t.Fatalf("bad output scheme: exit %d, %v", ExitCode(err), err)
	}

	dir := t.TempDir()
	in := mustOpen(t, "file://"+dir)
	putInput(t, in)
	locked := filepath.Join(dir, "in", "depot-brill.csv")
	if err := os.Chmod(locked, 0); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.Chmod(locked, 0o644) })
	if f, err := os.Open(locked); err == nil { // root ignores file modes
		f.Close()
		t.Skip("running with privileges that ignore chmod 000")
	}
	cfg = testConfig("flp-0001", "file://"+dir+"/in/", "file://"+dir+"/out")
	_, err := RunPlan(ctx, cfg, testEnv())
	if ExitCode(err) != exitcode.Config || !strings.Contains(err.Error(), "depot-brill.csv") || !strings.Contains(err.Error(), "permission denied") {
		t.Fatalf("unreadable object: exit %d, %v", ExitCode(err), err)
	}
}

func TestUnknownModelIsConfigError(t *testing.T) {
	cfg := testConfig("flp-0001", "mem://x/in/", "mem://flp-model-out/")
	cfg.Models = []runconfig.Model{{Family: "Prophecy"}}
	_, err := RunTrain(context.Background(), cfg, 0, testEnv())
	if ExitCode(err) != exitcode.Config || !strings.Contains(err.Error(), "Prophecy") {
		t.Fatalf("exit %d, %v", ExitCode(err), err)
	}
}

// TestSecondRunEvaluatesFirst checks the accuracy sums on a dataset small enough to work by
// hand. Two daily series, Naive only, horizon 3, one backtest origin, MASE with the weekly
// seasonal-naive scale (m = 7; Hyndman & Koehler 2006, eq. (5)-(6)):
//
//	run 1, 14 days: A_t = t, B_t = 2t (t = 0..13)
//	  backtest origin at 11: Naive repeats y_10; A errors 1,2,3 -> MAE 2, scale |x_t - x_{t-7}| = 7
//	  -> expected MASE_A = 2/7; B errors 2,4,6 -> MAE 4, scale 14 -> expected MASE_B = 2/7
//	  forecasts for days 14..16: A 13,13,13; B 26,26,26
//	run 2 adds days 14..16: A 20,20,20; B 28,30,32
//	  realized A: errors 7,7,7 -> MAE 7 / scale 7 (history days 0..13) = 1 -> 1/(2/7) = 3.5 > 1.3: drifted
//	  realized B: errors 2,4,6 -> MAE 4 / scale 14 = 2/7 -> ratio 1: not drifted
//	sums: evaluated 2, points 6, expected 4/7, realized 9/7, drifted 1
func TestSecondRunEvaluatesFirst(t *testing.T) {
	cases := map[string]struct {
		name          string
		first, second int
		seriesColumn  bool
	}{
		"buckets chosen and kept": {"kept", 0, 0, false},
		// A bucket-count change maps the buckets (previousUnits), so the sums are the same.
		"buckets 4 then 16": {"grow", 4, 16, false},
		"buckets 16 then 2": {"shrink", 16, 2, false},
		// The first run published by a release that joined the key cells into one series
		// column (PROJECT-NOTES, sixth session: key columns): evaluated all the same.
		"first run's tables with a series column": {"legacy", 0, 0, true},
	}
	for name, tc := range cases {
		t.Run(name, func(t *testing.T) { secondRunEvaluatesFirst(t, tc.name, tc.first, tc.second, tc.seriesColumn) })
	}
}

func secondRunEvaluatesFirst(t *testing.T, name string, buckets1, buckets2 int, seriesColumn bool) {
	ctx := context.Background()
	in := mustOpen(t, "mem://flp-eval-in-"+name+"/")
	write := func(extra bool) {
		var b strings.Builder
		b.WriteString("item,depot,date,units,promo_flag\n")
		start := time.Date(2026, 2, 1, 0, 0, 0, 0, time.UTC)
		for _, s := range []struct {
			item  string
			slope int
			more  []int
		}{{"A", 1, []int{20, 20, 20}}, {"B", 2, []int{28, 30, 32}}} {
			for d := 0; d < 14; d++ {
				fmt.Fprintf(&b, "%s,north,%s,%d,0\n", s.item, start.AddDate(0, 0, d).Format("2006-01-02"), s.slope*d)
			}
			for i, v := range s.more {
				if extra {
					fmt.Fprintf(&b, "%s,north,%s,%d,0\n", s.item, start.AddDate(0, 0, 14+i).Format("2006-01-02"), v)
				}
			}
		}
		if err := in.Put(ctx, "history.csv", []byte(b.String())); err != nil {
			t.Fatal(err)
		}
	}
	cfg := func(run string, buckets int) *runconfig.Config {
		c := testConfig(run, "mem://flp-eval-in-"+name+"/history.csv", "mem://flp-eval-out-"+name+"/")
		c.Horizon = 3
		c.Models = []runconfig.Model{{Family: models.FamilyNaive}}
		c.Selection.BacktestOrigins = 1
		c.Sharding.Buckets = buckets
		return c
	}
	// Each run at its own clock, the morning after its history's last day (a run whose whole
	// forecast were past would reject every series as stale).
	at := func(day int) Env {
		return Env{Now: func() time.Time { return time.Date(2026, 2, day, 6, 0, 0, 0, time.UTC) }, Workers: 2}
	}
	write(false)
	if _, err := RunLocal(ctx, cfg("flp-0001", buckets1), at(15)); err != nil {
		t.Fatal(err)
	}
	if seriesColumn {
		rewriteAsSeriesColumn(t, mustOpen(t, "mem://flp-eval-out-"+name+"/"), "flp-0001")
	}
	write(true)
	s, err := RunLocal(ctx, cfg("flp-0002", buckets2), at(18))
	if err != nil {
		t.Fatal(err)
	}
	a := s.Accuracy
	if a == nil || a.Metric != "MASE" || a.Evaluated != 2 || a.EvaluatedPoints != 6 || a.Drifted != 1 ||
		math.Abs(a.ExpectedSum-4.0/7) > 1e-12 || math.Abs(a.RealizedSum-9.0/7) > 1e-12 {
		t.Fatalf("accuracy = %+v, want evaluated 2, points 6, expected 4/7, realized 9/7, drifted 1", a)
	}
	// The same 6 actuals measure the previous run's quantiles (levels 0.1, 0.5, 0.9 of
	// testConfig): counts at or below each quantile can only grow with the level.
	c := s.Calibration
	if c == nil || c.Series != 2 || c.Points != 6 || len(c.Levels) != 3 || len(c.Below) != 3 ||
		c.Below[0] > c.Below[1] || c.Below[1] > c.Below[2] || c.Below[2] > 6 || math.IsNaN(c.BiasSum) {
		t.Fatalf("calibration = %+v, want 2 series, 6 points, 3 levels with increasing counts", c)
	}
	for j, p := range c.PinballSum {
		if !(p >= 0) {
			t.Errorf("pinball sum of level %v = %v", c.Levels[j], p)
		}
	}
	out := mustOpen(t, "mem://flp-eval-out-"+name+"/")
	m := checkPublished(t, out, "flp-0002")
	var rows []tables.EvaluationRow
	for _, e := range m.Units { // A and B may sit in different buckets
		f, _ := e.file(TableEvaluation)
		b, _ := out.Get(ctx, f.Key)
		r, err := tables.ReadEvaluation(bytes.NewReader(b), tables.CSV, testKeys)
		if err != nil {
			t.Fatal(err)
		}
		rows = append(rows, r...)
	}
	sort.Slice(rows, func(i, j int) bool { return rows[i].Key < rows[j].Key })
	if len(rows) != 2 || !rows[0].Drifted || rows[1].Drifted || rows[0].PreviousRun != "flp-0001" ||
		math.Abs(rows[0].Realized-1) > 1e-12 || math.Abs(rows[1].Expected-2.0/7) > 1e-12 {
		t.Fatalf("evaluation rows %+v", rows)
	}
	// The expectation comes from the first run's models table: Naive's quantiles scored on its
	// own backtest (one origin, 3 steps per series), and each evaluation row says what it
	// promised; the rows' counts add up to the summary's.
	if !c.HasExpectation() || c.BacktestSeries != 2 || c.BacktestPoints != 6 || c.BacktestActuals != 6 || c.Pairs != 2*3*2 {
		t.Fatalf("calibration expectation = %+v, want 2 backtested series over 6 backtest points", c)
	}
	below := make([]int, 3)
	for _, r := range rows {
		rc := r.Calibration
		if rc == nil || rc.PromisedPoints != 3 || len(rc.Promised) != 3 || rc.Points != 3 {
			t.Fatalf("evaluation row %s calibration %+v, want 3 points promised over 3 backtest points", r.Key, rc)
		}
		for j := range below {
			below[j] += rc.Below[j]
		}
	}
	if !slices.Equal(below, c.Below) {
		t.Errorf("rows count %v below, the summary %v", below, c.Below)
	}
	// A third run on the same data forecasts the same 3 periods as the second: Naive does not
	// move, so every series shows 3 movement points and a movement of 0 in the models table.
	s3, err := RunLocal(ctx, cfg("flp-0003", buckets2), at(18))
	if err != nil {
		t.Fatal(err)
	}
	if s3.Stability == nil || s3.Stability.Series != 2 || s3.Stability.Points != 6 || s3.Stability.MovementSum != 0 {
		t.Fatalf("stability = %+v, want 2 series, 6 points, no movement", s3.Stability)
	}
	m3 := checkPublished(t, out, "flp-0003")
	moved := 0
	for _, e := range m3.Units {
		for _, r := range unitModels(t, out, e, tables.CSV) {
			if r.MovementPoints != 3 || r.Movement != 0 {
				t.Errorf("%s: movement %v over %d points, want 0 over 3", r.Key, r.Movement, r.MovementPoints)
			}
			if r.Backtest == nil || r.Backtest.Points != 3 {
				t.Errorf("%s: backtest record %+v, want 3 points", r.Key, r.Backtest)
			}
			moved++
		}
	}
	if moved != 2 {
		t.Errorf("%d models rows, want 2", moved)
	}
}

// snapshot reads every file under dir.
func snapshot(t *testing.T, dir string) map[string][]byte {
	t.Helper()
	files := map[string][]byte{}
	err := filepath.Walk(dir, func(p string, info os.FileInfo, err error) error {
		if err != nil || info.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		files[strings.TrimPrefix(p, dir)] = b
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	return files
}

func equalFiles(a, b map[string][]byte) bool {
	if len(a) != len(b) {
		return false
	}
	for k, v := range a {
		if !bytes.Equal(v, b[k]) {
			return false
		}
	}
	return true
}

// TestScoreMetricFollowsSelection: a series that repeats one week exactly has a zero
// seasonal-naive scale, so MASE is undefined for every member (Hyndman & Koehler 2006: the
// scale is the in-sample seasonal-naive MAE) and selection ranks by MAE; the models table
// must then label the score MAE.
func TestScoreMetricFollowsSelection(t *testing.T) {
	var v []float64
	for w := 0; w < 5; w++ {
		v = append(v, 1, 2, 3, 4, 5, 6, 7)
	}
	cfg := testConfig("flp-0001", "mem://x/", "mem://y/")
	st, err := Check(cfg)
	if err != nil {
		t.Fatal(err)
	}
	sc := st.Selection
	s := series.Series{Key: "FLP-TEA-80/ashby", Start: time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC), Freq: series.Daily, Values: v}
	r, err := selection.Forecast(s, sc)
	if err != nil {
		t.Fatal(err)
	}
	if got := r.Metric; got != "MAE" {
		t.Fatalf("score metric = %s (notes %q), want MAE", got, r.Notes)
	}
	v[3] = 9 // breaks the exact repeat: MASE is defined again
	if r, _ = selection.Forecast(s, sc); r.Metric != "MASE" {
		t.Fatalf("score metric = %s, want MASE (notes %q)", r.Metric, r.Notes)
	}
}

func TestEndToEndRowGroupsOnMem(t *testing.T) {
	ctx := context.Background()
	in := mustOpen(t, "mem://flp-rowgroups-in/")
	putParquet(t, in, synth.Options{Items: 10, Depots: 2, Periods: 90, SpareShare: 0.2, End: anchor.Truncate(24*time.Hour).AddDate(0, 0, -1)}, 4*90)
	cfg := testConfig("flp-0001", "mem://flp-rowgroups-in/", "mem://flp-rowgroups-out/")
	cfg.Source.Format, cfg.Source.Partitioning = "parquet", runconfig.PartitionRowGroups
	cfg.Output.Format = "parquet"
	cfg.Sharding.TargetSeriesPerShard = 4
	s, err := RunLocal(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	m := checkPublished(t, mustOpen(t, cfg.Output.URI), "flp-0001")
	// 10 items in groups of 4 series -> 3 row groups (4, 4, 2) per depot -> 6 units, 5 shards.
	if len(m.Units) != 6 || s.Shards != 5 || m.Totals.Series.Trained != 20 || !strings.HasSuffix(m.Units[0].ID, "-g0") {
		t.Fatalf("units %d shards %d totals %+v first %s", len(m.Units), s.Shards, m.Totals, m.Units[0].ID)
	}
	if f, _ := m.Units[0].file(TableForecasts); !strings.HasSuffix(f.Key, "forecasts.parquet") {
		t.Fatalf("forecasts file %s", f.Key)
	}
}

func TestTamperedUnitIsNotTrusted(t *testing.T) {
	dir, cfg := objectRun(t)
	runAll(t, cfg)
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Source.Partitioning = runconfig.PartitionObjects
	ctx := context.Background()
	planAndTrain(t, cfg2)
	unit := ObjectID("depot-ashby.csv", nil)
	f := filepath.Join(dir, "out", store.UnitKey("flp-0002", unit, "forecasts.csv"))
	b, _ := os.ReadFile(f)
	if err := os.WriteFile(f, bytes.Replace(b, []byte("FLP-TEA-80"), []byte("FLP-TEA-81"), 1), 0o644); err != nil {
		t.Fatal(err)
	}
	s, err := RunPublish(ctx, cfg2, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	m := checkPublished(t, mustOpen(t, cfg.Output.URI), "flp-0002")
	e, _ := m.unit(unit)
	if s.CarriedForward != 1 || e.State != StateCarried || e.Source != "flp-0001" || !strings.Contains(e.Reason, "does not match its checksum") {
		t.Fatalf("summary %+v entry %+v", s, e)
	}
}

func TestPreviousUnitsAcrossBucketCounts(t *testing.T) {
	prev := &Manifest{Partitioning: runconfig.PartitionHashBuckets, Buckets: 4}
	for b := 0; b < 4; b++ {
		prev.Units = append(prev.Units, ManifestUnit{ID: BucketID(b, 4)})
	}
	ids := func(es []ManifestUnit) []string {
		var out []string
		for _, e := range es {
			out = append(out, e.ID)
		}
		return out
	}
	// Growing 4 -> 16: bucket 13 of 16 holds keys with hash = 13 (mod 16), so hash = 1 (mod 4).
	if got := ids(previousUnits(prev, Unit{ID: BucketID(13, 16), Bucket: 13}, 16)); !reflect.DeepEqual(got, []string{"b00001-of-00004"}) {
		t.Errorf("4 -> 16: %v", got)
	}
	// Shrinking 4 -> 2: bucket 1 of 2 gathers buckets 1 and 3 of 4.
	if got := ids(previousUnits(prev, Unit{ID: BucketID(1, 2), Bucket: 1}, 2)); !reflect.DeepEqual(got, []string{"b00001-of-00004", "b00003-of-00004"}) {
		t.Errorf("4 -> 2: %v", got)
	}
	// The bucket arithmetic agrees with BucketOf for real keys.
	for _, k := range []string{"FLP-OATS-00001/ashby", "FLP-SP-00042/brill", "FLP-TEA-00007/corrie"} {
		if BucketOf(k, 16)%4 != BucketOf(k, 4) {
			t.Errorf("%s: bucket of 16 mod 4 != bucket of 4", k)
		}
	}
	if got := previousUnits(prev, Unit{ID: ObjectID("a.csv", nil), Object: "a.csv"}, 0); got != nil {
		t.Errorf("object unit matched buckets: %v", ids(got))
	}
}

func TestStaleRerunLeavesLatest(t *testing.T) {
	dir, cfg := objectRun(t)
	runAll(t, cfg)
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Source.Partitioning = runconfig.PartitionObjects
	ctx := context.Background()
	if _, err := RunLocal(ctx, cfg2, testEnv()); err != nil {
		t.Fatal(err)
	}
	before := snapshot(t, dir+"/out/runs/flp-0001")
	// Run 1's Jobs rerun late (a retried pod): same bytes, and latest stays on run 2.
	if _, err := RunTrain(ctx, cfg, 0, testEnv()); err != nil {
		t.Fatal(err)
	}
	if _, err := RunPublish(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	checkPublished(t, mustOpen(t, cfg.Output.URI), "flp-0002")
	if !equalFiles(before, snapshot(t, dir+"/out/runs/flp-0001")) {
		t.Fatal("a stale rerun of run 1 changed its files")
	}
}

// TestRepublishAfterLateShard: publish ran while a shard was still failing (latest names the
// run, with that unit carried forward); the shard then succeeds and publish reruns. The new
// manifest replaces the old one without latest.json ever naming a manifest it does not match.
func TestRepublishAfterLateShard(t *testing.T) {
	_, cfg := objectRun(t)
	runAll(t, cfg)
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Source.Partitioning = runconfig.PartitionObjects
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg2, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	for i := 1; i < ps.Shards; i++ {
		if _, err := RunTrain(ctx, cfg2, i, testEnv()); err != nil {
			t.Fatal(err)
		}
	}
	if s, err := RunPublish(ctx, cfg2, testEnv()); err != nil || s.CarriedForward != 1 {
		t.Fatalf("first publish: %+v %v", s, err)
	}
	out := mustOpen(t, cfg.Output.URI)
	checkPublished(t, out, "flp-0002")
	if _, err := RunTrain(ctx, cfg2, 0, testEnv()); err != nil {
		t.Fatal(err)
	}
	s, err := RunPublish(ctx, cfg2, testEnv())
	if err != nil || s.CarriedForward != 0 {
		t.Fatalf("second publish: %+v %v", s, err)
	}
	if m := checkPublished(t, out, "flp-0002"); m.Totals.Trained != 3 || m.PreviousRun != "flp-0001" {
		t.Fatalf("manifest %+v", m.Totals)
	}
}

// The run configuration's backtestRefit reaches selection: Once carries fits forward between
// backtest origins (selection.Config.BacktestUpdate), EveryOrigin re-estimates at each.
func TestCheckBacktestRefit(t *testing.T) {
	for refit, on := range map[string]bool{runconfig.RefitOnce: true, runconfig.RefitEveryOrigin: false} {
		cfg := testConfig("flp-0001", "mem://x/", "mem://y/")
		cfg.Selection.BacktestRefit = refit
		st, err := Check(cfg)
		if err != nil {
			t.Fatal(err)
		}
		if st.Selection.BacktestUpdate != on {
			t.Errorf("backtestRefit %s: selection BacktestUpdate %v", refit, st.Selection.BacktestUpdate)
		}
	}
}

// weekendCSV is one depot's daily history of items whose demand steps up by 25 units on
// Saturdays and Sundays, with a small four-day wiggle ((3d) mod 4) on top (invented Fenwick
// Lane Provisions data).
func weekendCSV(depot string, items []string, days int) []byte {
	return depotRows(depot, items, days, func(_ string, n, d int, day time.Time) string {
		v := 40 + 5*n + (3*d)%4
		if wd := day.Weekday(); wd == time.Saturday || wd == time.Sunday {
			v += 25
		}
		return fmt.Sprintf("%d", v)
	})
}

// The run configuration's selection.combine.marginPercent reaches selection as a fraction. On weekend-stepped demand the seasonal naive member
// misses only the wiggle, while the mean of it and the naive member also carries half of
// each weekend step, so without a margin every series publishes SeasonalNaive; with margin
// percent 10000 (a fraction of 100) every series publishes the combination, whose published backtest
// score is the higher one.
func TestCombineMarginChoosesTheCombination(t *testing.T) {
	ctx := context.Background()
	in := mustOpen(t, "mem://flp-margin-in/")
	if err := in.Put(ctx, "in/depot-ashby.csv", weekendCSV("ashby", []string{"FLP-OATS-1KG", "FLP-TEA-80"}, 42)); err != nil {
		t.Fatal(err)
	}
	chosen := func(run string, marginPercent int) map[string]tables.ModelRow {
		cfg := testConfig(run, "mem://flp-margin-in/in/", "mem://flp-margin-"+run+"/")
		cfg.Selection.Combine = &runconfig.Combine{Top: 2, Method: "Mean", MarginPercent: marginPercent}
		if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
			t.Fatal(err)
		}
		out := mustOpen(t, cfg.Output.URI)
		rows := map[string]tables.ModelRow{}
		for _, u := range checkPublished(t, out, run).Units {
			for _, r := range unitModels(t, out, u, "csv") {
				rows[r.Key] = r
			}
		}
		if len(rows) != 2 {
			t.Fatalf("run %s: %d series in the models table, want 2", run, len(rows))
		}
		return rows
	}
	single, combined := chosen("flp-0001", 0), chosen("flp-0002", 10000)
	const combo = "Combination(mean: Naive, SeasonalNaive)"
	for key, s := range single {
		c := combined[key]
		if s.Model != models.FamilySeasonalNaive {
			t.Errorf("%s without a margin: chose %s (score %v), want SeasonalNaive", key, s.Model, s.Score)
		}
		if c.Model != combo {
			t.Errorf("%s with margin 100: chose %s (score %v), want %s", key, c.Model, c.Score, combo)
		}
		if !(c.Score > s.Score) {
			t.Errorf("%s: combination score %v is not above the single member's %v, so the margin was not needed", key, c.Score, s.Score)
		}
	}
}

// selection.design reaches the trainer and its choice the models table and the shard
// summaries. With six
// usable series, fewer than design.DefaultMinSeries, Auto takes its simplest candidate, the
// mean of ETS and Theta (both in the zoo).
func TestDesignReachesModelsAndSummary(t *testing.T) {
	ctx := context.Background()
	for mode, want := range map[string]string{runconfig.DesignFixed: design.NameDeclared,
		runconfig.DesignPerSeries: design.NamePerSeries, runconfig.DesignAuto: "ets-theta"} {
		_, cfg := objectRun(t)
		cfg.Models = []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}, {Family: models.FamilyTheta}, {Family: models.FamilyETS}}
		cfg.Selection.Design = mode
		ps, err := RunPlan(ctx, cfg, testEnv())
		if err != nil {
			t.Fatal(err)
		}
		designs := map[string]int{}
		for i := 0; i < ps.Shards; i++ {
			sum, _ := RunTrain(ctx, cfg, i, testEnv())
			for d, n := range sum.Designs {
				designs[d] += n
			}
		}
		if _, err := RunPublish(ctx, cfg, testEnv()); err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(designs, map[string]int{want: 6}) {
			t.Errorf("design %q: summaries count %v, want %s for the 6 usable series", mode, designs, want)
		}
		out := mustOpen(t, cfg.Output.URI)
		for _, u := range checkPublished(t, out, cfg.Run).Units {
			for _, r := range unitModels(t, out, u, "csv") {
				if r.Design != want || !strings.HasPrefix(r.Segment, "daily/") {
					t.Errorf("design %q: %s has design %q, segment %q; want %s in a daily segment", mode, r.Key, r.Design, r.Segment, want)
				}
				if mode == runconfig.DesignAuto && r.Model != "Combination(mean: ETS, Theta)" {
					t.Errorf("auto: %s published %s", r.Key, r.Model)
				}
			}
		}
	}
}
