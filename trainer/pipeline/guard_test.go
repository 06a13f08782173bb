package pipeline

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// runToPublish plans and trains every shard of cfg (shard errors are ignored: the tests
// break shards on purpose) and returns publish's summary and error.
func runToPublish(t *testing.T, cfg *runconfig.Config, beforeTrain func()) (int, error) {
	t.Helper()
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg, testEnv())
	if err != nil {
		t.Fatalf("plan: %v", err)
	}
	if beforeTrain != nil {
		beforeTrain()
	}
	for i := 0; i < ps.Shards; i++ {
		RunTrain(ctx, cfg, i, testEnv())
	}
	s, err := RunPublish(ctx, cfg, testEnv())
	if err != nil && (!s.Refused || s.Series == 0 && s.Units == 0) {
		t.Logf("publish summary %+v", s)
	}
	return s.Trained, err
}

// publishedObjectRun publishes objectRun's first run flp-0001 and returns the directory, its
// configuration and that of a second run flp-0002 on the same input and output.
func publishedObjectRun(t *testing.T) (string, *runconfig.Config, *runconfig.Config) {
	t.Helper()
	dir, cfg := objectRun(t)
	if _, errs := runAll(t, cfg); errs[0] != nil {
		t.Fatal(errs)
	}
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Source.Partitioning = runconfig.PartitionObjects
	return dir, cfg, cfg2
}

// refusedLeavesLatest checks a refused publish: exit 5, no manifest for the run, latest.json
// still on good, and the error text holding each of want.
func refusedLeavesLatest(t *testing.T, cfg *runconfig.Config, good string, err error, want ...string) {
	t.Helper()
	if ExitCode(err) != exitcode.Refused || !errors.Is(err, ErrRefused) {
		t.Fatalf("publish: exit %d, %v; want exit %d", ExitCode(err), err, exitcode.Refused)
	}
	for _, w := range want {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("refusal lacks %q:\n%v", w, err)
		}
	}
	out := mustOpen(t, cfg.Output.URI)
	checkPublished(t, out, good)
	if ok, err := out.Exists(context.Background(), store.RunKey(cfg.Run, store.ManifestName)); ok || err != nil {
		t.Fatalf("refused run %s has a manifest (%v)", cfg.Run, err)
	}
}

// Issue 18 case 1: daily data read as monthly rejects every series; before the guard such a
// run published 0 forecasts, said complete and moved latest.json off the good run.
func TestGuardRefusesRunThatLostItsSeries(t *testing.T) {
	_, _, cfg2 := publishedObjectRun(t)
	cfg2.Source.Frequency = "Monthly"
	trained, err := runToPublish(t, cfg2, nil)
	if trained != 0 {
		t.Fatalf("%d series trained as monthly, want 0", trained)
	}
	refusedLeavesLatest(t, cfg2, "flp-0001", err,
		"0 of 7 planned series forecast, the guard needs 80%",
		"0 series forecast against 6 published by flp-0001",
		"top rejection reasons: ", " series: ")
	s, _ := RunPublish(context.Background(), cfg2, testEnv())
	if !s.Refused || s.Series != 7 || s.Rejected != 7 || s.Units != 3 {
		t.Fatalf("refused summary %+v", s)
	}
	// With the guard off the same run publishes, as every run did before the guard.
	cfg2.Publish = &runconfig.Publish{MaxCarriedForwardPercent: 100}
	if _, err := RunPublish(context.Background(), cfg2, testEnv()); err != nil {
		t.Fatal(err)
	}
	checkPublished(t, mustOpen(t, cfg2.Output.URI), "flp-0002")
}

// Two of three units fail: more than the default cap of 50% would be carried forward.
func TestGuardCapsCarriedForwardUnits(t *testing.T) {
	dir, _, cfg2 := publishedObjectRun(t)
	_, err := runToPublish(t, cfg2, func() {
		for _, f := range []string{"depot-ashby.csv", "depot-corrie.csv"} {
			if err := os.Remove(filepath.Join(dir, "in", f)); err != nil {
				t.Fatal(err)
			}
		}
	})
	refusedLeavesLatest(t, cfg2, "flp-0001", err,
		"2 of 3 units carried forward or missing, the guard allows 50%", "units not trained: ", "no unit.json")
}

func TestGuardValidation(t *testing.T) {
	cfg := testConfig("flp-0001", "mem://in/", "mem://out/")
	if g := cfg.PublishGuard(); g != runconfig.DefaultPublish {
		t.Fatalf("no publish section: guard %+v, want the defaults", g)
	}
	cfg.Publish = &runconfig.Publish{MinForecastPercent: 101}
	if err := cfg.Validate(); err == nil || !strings.Contains(err.Error(), "publish.minForecastPercent") {
		t.Fatalf("101%%: %v", err)
	}
}

// Issue 18 case 1: an object rewritten between plan and train. Before, train read the new
// rows, forecast fewer series than planned and publish called the run complete; now the
// object counts as broken (exit 3, naming it) and its unit is carried forward.
func TestObjectChangedSincePlanIsBroken(t *testing.T) {
	dir, _, cfg2 := publishedObjectRun(t)
	corrie := filepath.Join(dir, "in", "depot-corrie.csv")
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg2, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(corrie, depotCSV("corrie", []string{"FLP-TEA-80"}, 42, ""), 0o644); err != nil {
		t.Fatal(err)
	}
	failed := 0
	for i := 0; i < ps.Shards; i++ {
		if _, err := RunTrain(ctx, cfg2, i, testEnv()); err != nil {
			failed++
			if ExitCode(err) != exitcode.Data || !strings.Contains(err.Error(), "depot-corrie.csv changed since plan") {
				t.Fatalf("shard %d: exit %d, %v; want exit 3 naming the changed object", i, ExitCode(err), err)
			}
		}
	}
	s, err := RunPublish(ctx, cfg2, testEnv())
	if failed != 1 || err != nil || s.CarriedForward != 1 || s.Trained != 6 {
		t.Fatalf("%d shards failed; publish %+v, %v", failed, s, err)
	}
}

// The same on hash buckets, where every shard reads every object, and with a rewrite of the
// same size: the version tag tells it apart. Each shard goes on without the object (issue 18
// case 4: it used to fail every shard) and names it in its summary.
func TestSameSizeRewriteSincePlanIsBroken(t *testing.T) {
	in := mustOpen(t, "mem://flp-rewrite-in/")
	putInput(t, in)
	cfg := testConfig("flp-0001", "mem://flp-rewrite-in/in/", "mem://flp-rewrite-out/")
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	b, err := in.Get(ctx, "in/depot-ashby.csv")
	if err != nil {
		t.Fatal(err)
	}
	i := bytes.LastIndexByte(b[:len(b)-1], '\n') + 1 // the last row: change one digit of it
	b[i+len("FLP-TEA-80,ashby,2026-03-01,")] ^= 1
	if err := in.Put(ctx, "in/depot-ashby.csv", b); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < ps.Shards; i++ {
		s, err := RunTrain(ctx, cfg, i, testEnv())
		if err != nil || !strings.Contains(s.Broken, "depot-ashby.csv (at train: ") || !strings.Contains(s.Broken, "changed since plan") {
			t.Fatalf("shard %d: %v, broken %q; want exit 0 naming the changed object", i, err, s.Broken)
		}
	}
}

// Issue 18 case 6: values alternating 1 and 1e155 overflow the bands (squares pass the
// float64 range). Before, such a series published NaN or infinite quantiles; now it is
// rejected with the reason, and the other series publish.
func TestNonFiniteForecastIsRejected(t *testing.T) {
	dir := t.TempDir()
	in := mustOpen(t, "file://"+dir)
	huge := depotRows("ashby", []string{"FLP-SALT-1KG"}, 42, func(_ string, _, d int, _ time.Time) string {
		if d%2 == 0 {
			return "1e155"
		}
		return "1"
	})
	if err := in.Put(context.Background(), "in/depot-ashby.csv", huge); err != nil {
		t.Fatal(err)
	}
	if err := in.Put(context.Background(), "in/depot-brill.csv", depotCSV("brill", []string{"FLP-OATS-1KG", "FLP-TEA-80", "FLP-JAM-340", "FLP-HONEY-454"}, 42, "")); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig("flp-0001", "file://"+dir+"/in/", "file://"+dir+"/out")
	cfg.Source.Partitioning = runconfig.PartitionObjects
	if _, errs := runAll(t, cfg); errs[0] != nil || errs[1] != nil {
		t.Fatal(errs)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0001")
	if m.Totals.Series.Trained != 4 || m.Totals.Series.Rejected != 1 {
		t.Fatalf("totals %+v", m.Totals.Series)
	}
	b, err := out.Get(context.Background(), store.UnitKey("flp-0001", ObjectID("depot-ashby.csv", nil), store.RejectedName))
	if err != nil {
		t.Fatal(err)
	}
	rej, err := tables.ReadRejected(bytes.NewReader(b), tables.CSV, cfg.Source.Columns.Series)
	if err != nil || len(rej) != 1 || !strings.Contains(rej[0].Reason, "at step 1 is") {
		t.Fatalf("rejected %+v, %v", rej, err)
	}
}

func TestUnpublishable(t *testing.T) {
	levels := []float64{0.1, 0.5, 0.9}
	for _, c := range []struct {
		mean []float64
		q    [][]float64
		want string
	}{
		{[]float64{5, 6}, [][]float64{{4, 5}, {5, 6}, {6, 7}}, ""},
		{[]float64{5, 6}, [][]float64{{4, 5}, {5, 6}, {6, 6}}, ""}, // equal quantiles are allowed
		{[]float64{5, math.NaN()}, [][]float64{{4, 5}, {5, 6}, {6, 7}}, "mean at step 2 is NaN"},
		{[]float64{5, 6}, [][]float64{{4, 5}, {5, 6}, {math.Inf(1), 7}}, "quantile 0.9 at step 1 is +Inf"},
		{[]float64{5, 6}, [][]float64{{4, 5}, {5, 6}, {6, 5.5}}, "quantiles decrease at step 2: 6 at level 0.5, 5.5 at level 0.9"},
	} {
		if got := unpublishable(c.mean, levels, c.q); got != c.want {
			t.Errorf("unpublishable(%v, %v) = %q, want %q", c.mean, c.q, got, c.want)
		}
	}
}
