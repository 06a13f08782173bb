// Package crash kills the trainer binary with SIGKILL at random points of plan, train,
// publish and republish (TestKillAndRerun*) and after every committed storage write
// (TestCrashPoints*), on file:// and on the S3 test server, reruns the killed step, and checks
// after every kill and at the end that latest.json always points at a complete, verified run
// and that the outputs equal those of an uninterrupted run byte for byte.
package crash

import (
	"context"
	"encoding/json"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"almanac.dev/almanac/test/s3test"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
)

// defaultKills is the length of each kill loop in `make test`; ALMANAC_CRASH_KILLS sets
// another (`make test-crash`: 60 per store). The seed fixes the kill points.
const (
	defaultKills = 10
	seed         = 20261202
)

// killCount is ALMANAC_CRASH_KILLS, else defaultKills.
func killCount(t *testing.T) int {
	v := os.Getenv("ALMANAC_CRASH_KILLS")
	if v == "" {
		return defaultKills
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < 1 {
		t.Fatalf("ALMANAC_CRASH_KILLS=%q is not a count", v)
	}
	return n
}

// build compiles the trainer with the given build tags (test builds only: `crashpoints`).
func build(t *testing.T, tags ...string) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "almanac-trainer")
	cmd := exec.Command("go", "build", "-tags", strings.Join(tags, ","), "-o", bin, "almanac.dev/almanac/trainer/cmd/almanac-trainer")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// dataset writes Fenwick Lane Provisions data: 4 depots x 150 items, extra days of history.
func dataset(t *testing.T, dir string, extra int) {
	t.Helper()
	st, err := store.Open(context.Background(), "file://"+dir)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	o := synth.Options{Items: 150, Depots: 4, Periods: 400 + extra, End: dataEnd(extra), Bad: 2}
	if _, err := o.Write(context.Background(), st, "", synth.CSV); err != nil {
		t.Fatal(err)
	}
}

// dataEnd is the last day of a dataset with extra days (dataset, smallDataset).
func dataEnd(extra int) time.Time {
	return time.Date(2026, 11, 1, 0, 0, 0, 0, time.UTC).AddDate(0, 0, extra)
}

// writeConfig writes a run configuration file for data with extra days and returns its path.
// The run's cutoff is the morning after the data's last day (a cutoff past the whole horizon
// would reject every series as stale).
func writeConfig(t *testing.T, dir, run, in, out string, extra int) string {
	t.Helper()
	c := runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind, Run: run, Trigger: "Manual", ScheduledTime: dataEnd(extra).Add(30 * time.Hour),
		Source: runconfig.Source{URI: in, Format: "csv", Frequency: "Daily", NonNegative: true, Partitioning: runconfig.PartitionObjects,
			Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: "date", Value: "units", Covariates: []string{"promo_flag"}}},
		Output:           runconfig.Output{URI: out, Format: "parquet"},
		Horizon:          14,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    runconfig.QuantileWidthBacktest,
		Models:           []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}, {Family: models.FamilyTheta}},
		Selection:        runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 7, BacktestRefit: runconfig.RefitEveryOrigin, Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:         runconfig.Sharding{TargetSeriesPerShard: 150},
		Drift:            runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 5},
	}
	b, _ := json.Marshal(c)
	p := dir + run + ".json"
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// trainer runs one step to completion and returns its wall time.
func trainer(t *testing.T, bin string, args ...string) time.Duration {
	t.Helper()
	start := time.Now()
	cmd := exec.Command(bin, append(args, "--termination-log", "")...)
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("%v: %v\n%s", args, err, out)
	}
	return time.Since(start)
}

// killed starts a step and kills it after delay; it reports whether the kill came first.
func killed(t *testing.T, bin string, delay time.Duration, args ...string) bool {
	t.Helper()
	cmd := exec.Command(bin, append(args, "--termination-log", "")...)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- cmd.Wait() }()
	select {
	case <-done:
		return false
	case <-time.After(delay):
		_ = cmd.Process.Signal(syscall.SIGKILL)
		<-done
		return true
	}
}

// steps runs a whole run: plan, every train shard, publish; it returns each step's time.
func steps(t *testing.T, bin, cfg string, shards int) map[string]time.Duration {
	d := map[string]time.Duration{"plan": trainer(t, bin, "plan", "--config", cfg)}
	for i := 0; i < shards; i++ {
		d["train-"+itoa(i)] = trainer(t, bin, "train", "--config", cfg, "--shard", itoa(i))
	}
	d["publish"] = trainer(t, bin, "publish", "--config", cfg)
	return d
}

func itoa(i int) string { return strconv.Itoa(i) }

// checkLatest follows latest.json (if any) and verifies the run it names is complete.
func checkLatest(t *testing.T, out string, when string) string {
	t.Helper()
	ctx := context.Background()
	st := openTree(t, out)
	p, ok, err := st.ReadLatest(ctx)
	if err != nil || !ok {
		t.Fatalf("%s: latest.json: ok %v, %v", when, ok, err)
	}
	var m pipeline.Manifest
	if err := st.GetJSON(ctx, p.Manifest, &m); err != nil {
		t.Fatalf("%s: %v", when, err)
	}
	if !m.Complete || m.Totals.Missing != 0 {
		t.Fatalf("%s: latest points at %s, which is incomplete", when, p.Run)
	}
	for _, u := range m.Units {
		for _, f := range u.Files {
			b, err := st.Get(ctx, f.Key)
			if err != nil || store.SHA256(b) != f.SHA256 {
				t.Fatalf("%s: latest run %s: %s: %v (checksum mismatch or missing)", when, p.Run, f.Key, err)
			}
		}
	}
	return p.Run
}

func TestKillAndRerunFile(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the trainer and runs it about 30 times")
	}
	dir := t.TempDir()
	killAndRerun(t, build(t), dir, func(name string) string { return "file://" + filepath.Join(dir, name) })
}

func TestKillAndRerunS3(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the trainer and runs it about 30 times")
	}
	srv := s3test.Start(t, "fenwick-kills")
	killAndRerun(t, build(t), t.TempDir(), func(name string) string { return srv.URI("fenwick-kills", name+"/") })
}

// killAndRerun: two uninterrupted runs into the reference tree; run 1 uninterrupted into the
// crash tree, then run 2 with killCount kills at random times of random steps: plan, a train
// shard, publish (a republish once run 2 is published: the second half of the kills starts
// after one clean publish). Every killed step is rerun before the next kill except publish,
// whose kill leaves whatever it left for the next step to meet.
func killAndRerun(t *testing.T, bin, dir string, tree func(name string) string) {
	kills := killCount(t)
	in1, in2 := filepath.Join(dir, "in1"), filepath.Join(dir, "in2")
	dataset(t, in1, 0)
	dataset(t, in2, 10) // the second run sees 10 new days and evaluates the first run
	ref, crash := tree("ref"), tree("crash")
	const shards = 4 // 600 series, 150 per shard, one depot object per shard

	// Reference: two uninterrupted runs.
	steps(t, bin, writeConfig(t, dir+"/", "flp-r1", "file://"+in1+"/", ref, 0), shards)
	times := steps(t, bin, writeConfig(t, dir+"/", "flp-r2", "file://"+in2+"/", ref, 10), shards)
	checkLatest(t, ref, "reference")

	// Crash tree: run 1 uninterrupted, then run 2 with kills.
	steps(t, bin, writeConfig(t, dir+"/crash-", "flp-r1", "file://"+in1+"/", crash, 0), shards)
	checkLatest(t, crash, "after run 1")
	cfg2 := writeConfig(t, dir+"/crash-", "flp-r2", "file://"+in2+"/", crash, 10)
	trainer(t, bin, "plan", "--config", cfg2)

	rng := rand.New(rand.NewPCG(seed, 1))
	landed := map[string]int{}
	for k := 0; k < kills; k++ {
		if k == kills/2 {
			// From here on publish is a republish: run 2 is what latest.json names.
			for i := 0; i < shards; i++ {
				trainer(t, bin, "train", "--config", cfg2, "--shard", itoa(i))
			}
			trainer(t, bin, "publish", "--config", cfg2)
			if run := checkLatest(t, crash, "after the clean publish"); run != "flp-r2" {
				t.Fatalf("latest -> %s after a clean publish of flp-r2", run)
			}
		}
		step := rng.IntN(shards + 2) // 0..3 train, 4 publish, 5 plan
		args, name := []string{"publish", "--config", cfg2}, "publish"
		switch {
		case step < shards:
			args, name = []string{"train", "--config", cfg2, "--shard", itoa(step)}, "train-"+itoa(step)
		case step == shards+1:
			args, name = []string{"plan", "--config", cfg2}, "plan"
		}
		kind := name
		if name == "publish" && k >= kills/2 {
			kind = "republish"
		}
		delay := time.Duration(rng.Float64() * 0.9 * float64(times[name]))
		if killed(t, bin, delay, args...) {
			landed[strings.SplitN(kind, "-", 2)[0]]++
		}
		run := checkLatest(t, crash, "after kill "+itoa(k)+" of "+kind)
		t.Logf("kill %d: %s after %v (step takes %v); latest -> %s", k, kind, delay.Round(time.Millisecond), times[name].Round(time.Millisecond), run)
		if name != "publish" { // rerun the killed step so that the next kills hit later steps too
			trainer(t, bin, args...)
		}
	}
	total := 0
	for _, n := range landed {
		total += n
	}
	t.Logf("%d of %d kills landed before the step ended: %v", total, kills, landed)
	if total < kills/2 {
		t.Fatalf("only %d of %d kills landed before the step ended; the delays are too long", total, kills)
	}
	if kills >= 40 {
		for _, kind := range []string{"plan", "train", "publish", "republish"} {
			if landed[kind] == 0 {
				t.Errorf("no kill landed in %s", kind)
			}
		}
	}
	// Finish: every shard and publish, as the Job controller's retries would.
	for i := 0; i < shards; i++ {
		trainer(t, bin, "train", "--config", cfg2, "--shard", itoa(i))
	}
	trainer(t, bin, "publish", "--config", cfg2)
	if run := checkLatest(t, crash, "final"); run != "flp-r2" {
		t.Fatalf("latest -> %s, want flp-r2", run)
	}
	// Run 2 saw 10 new days, so it evaluated run 1's Parquet forecasts.
	var m pipeline.Manifest
	st, err := store.Open(context.Background(), crash)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if err := st.GetJSON(context.Background(), "runs/flp-r2/MANIFEST.json", &m); err != nil {
		t.Fatal(err)
	}
	if a := m.Totals.Accuracy; a == nil || a.Evaluated < 500 || a.EvaluatedPoints != 10*a.Evaluated {
		t.Fatalf("run 2 accuracy %+v, want about 600 series evaluated on 10 points each", a)
	}
	for _, d := range diffTrees(storeFiles(t, ref), storeFiles(t, crash)) {
		t.Error(d)
	}
}
