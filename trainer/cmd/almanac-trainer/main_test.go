package main

import (
	"bytes"
	"context"
	"maps"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/summary"
)

func noenv(string) string { return "" }

// generateAndRunLocal writes `generate`'s data (with genArgs) under dir/in/, runs `local -f
// portfolio` on it as run runName with output under dir/out/, and returns local's stdout and
// stderr; a command that exits non-zero ends the test.
func generateAndRunLocal(t *testing.T, dir, portfolio, runName string, genArgs ...string) (stdout, stderr string) {
	t.Helper()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, append([]string{"generate", "--output", "file://" + dir + "/in/"}, genArgs...), &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: exit %d: %s", code, errb.String())
	}
	out.Reset()
	errb.Reset()
	if code := run(ctx, []string{"local", "-f", portfolio, "--input", "file://" + dir + "/in/", "--output", "file://" + dir + "/out/", "--run", runName},
		&out, &errb, noenv); code != 0 {
		t.Fatalf("local -f: exit %d: %s", code, errb.String())
	}
	return out.String(), errb.String()
}

func TestRunExitCodes(t *testing.T) {
	ctx := context.Background()
	var out, errb bytes.Buffer
	if got := run(ctx, nil, &out, &errb, noenv); got != exitcode.Config {
		t.Errorf("no command: exit %d, want %d", got, exitcode.Config)
	}
	if got := run(ctx, []string{"frobnicate"}, &out, &errb, noenv); got != exitcode.Config || !strings.Contains(errb.String(), `unknown command "frobnicate"`) {
		t.Errorf("unknown command: exit %d, stderr %q", got, errb.String())
	}
	out.Reset()
	if got := run(ctx, []string{"version"}, &out, &errb, noenv); got != exitcode.OK || !strings.HasPrefix(out.String(), "almanac-trainer dev") {
		t.Errorf("version: exit %d, stdout %q", got, out.String())
	}
	out.Reset()
	if got := run(ctx, []string{"help"}, &out, &errb, noenv); got != exitcode.OK || !strings.Contains(out.String(), "3  broken data") {
		t.Errorf("help must document the exit codes: %q", out.String())
	}
}

func TestStepWritesSummaryOnConfigError(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "config.json")
	os.WriteFile(cfg, []byte(`{"apiVersion":"trainer.almanac.dev/v1alpha1","kind":"ForecastRunConfig","run":"flp-1"}`), 0o644)
	term := filepath.Join(dir, "termination-log")
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"plan", "--config", cfg, "--termination-log", term}, &out, &errb, noenv)
	if code != exitcode.Config {
		t.Fatalf("exit %d, want %d; stderr %s", code, exitcode.Config, errb.String())
	}
	b, err := os.ReadFile(term)
	if err != nil {
		t.Fatal(err)
	}
	s, err := summary.Decode(b)
	if err != nil || s.Kind != summary.KindPlan || !strings.Contains(s.Error, "source.uri") {
		t.Fatalf("termination message %s: %+v %v", b, s, err)
	}
	// An unwritable termination log is a warning, not a failure of its own.
	code = run(context.Background(), []string{"train", "--config", cfg, "--termination-log", filepath.Join(dir, "no", "such", "dir")}, &out, &errb, noenv)
	if code != exitcode.Config || !strings.Contains(errb.String(), "warning: termination log") {
		t.Fatalf("exit %d, stderr %s", code, errb.String())
	}
}

func TestLocalGenerateInspect(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"generate", "--output", "file://" + dir + "/in", "--items", "6", "--depots", "2", "--periods", "120", "--bad", "1"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: exit %d: %s", code, errb.String())
	}
	args := []string{"local", "--input", "file://" + dir + "/in/", "--output", "file://" + dir + "/out", "--series", "item,depot",
		"--value", "units", "--covariates", "promo_flag", "--models", "Naive,SeasonalNaive", "--horizon", "7", "--target-series-per-shard", "4",
		"--partitioning", "Objects", "--run", "flp-local-1"}
	out.Reset()
	if code := run(ctx, args, &out, &errb, noenv); code != 0 {
		t.Fatalf("local: exit %d: %s", code, errb.String())
	}
	if !strings.Contains(out.String(), "publish: 2 units (0 carried forward, 0 missing), 11 series forecast") {
		t.Fatalf("local stdout: %s", out.String())
	}
	out.Reset()
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out"}, &out, &errb, noenv); code != 0 ||
		!strings.Contains(out.String(), "series: 12 (11 forecast, 1 rejected)") {
		t.Fatalf("inspect: exit %d: %s %s", code, out.String(), errb.String())
	}
	// One series by its key columns: the models row and forecast rows, item and depot in columns.
	out.Reset()
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out", "--series", "depot=brill,item=FLP-TEA-00001"}, &out, &errb, noenv); code != 0 ||
		!strings.Contains(out.String(), "series item=FLP-TEA-00001,depot=brill: unit ") ||
		!strings.Contains(out.String(), "forecasts:\nitem,depot,period,step,model,mean") ||
		strings.Count(out.String(), "\nFLP-TEA-00001,brill,") != 8 { // the models row and 7 forecast rows
		t.Fatalf("inspect --series: exit %d: %s %s", code, out.String(), errb.String())
	}
	out.Reset()
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out", "--series", "item=FLP-OATS-00000,depot=ashby"}, &out, &errb, noenv); code != 0 ||
		!strings.Contains(out.String(), "rejected, no forecast: ") {
		t.Fatalf("inspect --series of the defective series: exit %d: %s %s", code, out.String(), errb.String())
	}
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out", "--series", "sku=FLP-TEA-00001"}, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("inspect --series with an unknown column: exit %d", code)
	}
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out", "--run", "flp-nope"}, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("inspect of an unknown run: exit %d", code)
	}
	if code := run(ctx, []string{"train", "--config", "/nonexistent.json"}, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("train without a config file: exit %d", code)
	}
}

// TestJobSteps runs the three Job steps as the pods do: config file, termination log, and the
// shard index from JOB_COMPLETION_INDEX.
func TestJobSteps(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"generate", "--output", "mem://flp-job-in/", "--items", "4", "--depots", "2", "--periods", "60", "--end", "2026-11-01"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: %s", errb.String())
	}
	cfg := filepath.Join(dir, "config.json")
	os.WriteFile(cfg, []byte(`{"apiVersion":"trainer.almanac.dev/v1alpha1","kind":"ForecastRunConfig",
		"run":"flp-job-1","trigger":"Manual","scheduledTime":"2026-11-02T00:00:00Z",
		"source":{"uri":"mem://flp-job-in/","format":"csv","frequency":"Daily","nonNegative":true,"partitioning":"Objects",
			"columns":{"series":["item","depot"],"date":"date","value":"units","covariates":["promo_flag"]}},
		"output":{"uri":"mem://flp-job-out/","format":"parquet"},"horizon":7,"quantilePercents":[10,90],"quantileWidth":"Backtest",
		"models":[{"family":"Naive"},{"family":"SeasonalNaive"}],
		"selection":{"metric":"MASE","backtestOrigins":2,"backtestStep":1,"backtestRefit":"Once","design":"Fixed","designCostPercent":500},
		"sharding":{"targetSeriesPerShard":4},"drift":{"metric":"MASE","thresholdPercent":130,"minEvaluatedPoints":3}}`), 0o644)
	term := filepath.Join(dir, "term")
	step := func(getenv func(string) string, args ...string) summary.Summary {
		t.Helper()
		if code := run(ctx, append(args, "--config", cfg, "--termination-log", term), &out, &errb, getenv); code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, errb.String())
		}
		b, _ := os.ReadFile(term)
		s, err := summary.Decode(b)
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	if s := step(noenv, "plan"); s.Kind != summary.KindPlan || s.Units != 2 || s.Shards != 2 || s.Series != 8 || s.Bytes == 0 {
		t.Fatalf("plan summary %+v", s)
	}
	for _, idx := range []string{"0", "1"} {
		s := step(func(k string) string {
			if k == "JOB_COMPLETION_INDEX" {
				return idx
			}
			return ""
		}, "train")
		if s.Kind != summary.KindTrain || strconv.Itoa(s.Shard) != idx || s.Series != 4 || s.Trained != 4 || len(s.Models) == 0 {
			t.Fatalf("train %s summary %+v", idx, s)
		}
	}
	if s := step(noenv, "publish"); s.Kind != summary.KindPublish || s.Manifest != "runs/flp-job-1/MANIFEST.json" || s.Units != 2 {
		t.Fatalf("publish summary %+v", s)
	}
	if code := run(ctx, []string{"train", "--config", cfg, "--termination-log", ""}, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("train without a shard: exit %d", code)
	}
}

// TestLocalRunsThePromotionSample: the promotion sample runs with no edits on the data
// `generate --scenario promotions` writes, only the storage overridden; render prints the run
// configuration the controller would write for it, strict and round-tripping.
func TestLocalRunsThePromotionSample(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	sample := filepath.Join("..", "..", "..", "config", "samples", "forecasting_v1alpha1_forecastportfolio_promotions.yaml")
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"generate", "--output", "file://" + dir + "/in/", "--scenario", "promotions", "--frequency", "Weekly",
		"--items", "4", "--depots", "2", "--future", "8"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: exit %d: %s", code, errb.String())
	}
	out.Reset()
	if code := run(ctx, []string{"local", "-f", sample, "--input", "file://" + dir + "/in/", "--output", "file://" + dir + "/out/", "--run", "flp-promo-1"},
		&out, &errb, noenv); code != 0 {
		t.Fatalf("local -f: exit %d: %s", code, errb.String())
	}
	if !strings.Contains(out.String(), "8 series forecast") {
		t.Fatalf("local -f stdout: %s", out.String())
	}
	out.Reset()
	if code := run(ctx, []string{"render", "-f", sample, "--run", "flp-promo-2"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("render: exit %d: %s", code, errb.String())
	}
	c, err := runconfig.Parse(out.Bytes(), "render output")
	if err != nil {
		t.Fatal(err)
	}
	again, _ := runconfig.Encode(c)
	if string(again) != out.String() || c.Run != "flp-promo-2" || c.Source.Columns.Date != "week_start" || c.Features == nil || c.Selection.BacktestStep != 2 {
		t.Fatalf("render printed %s", out.String())
	}
}

// TestLocalRunsTheHierarchySample: the hierarchy sample runs with no edits on `generate`'s
// weekly data across several shards (depots hashed apart), and inspect reports the published
// run coherent: every depot total, item total and the grand total equals the sum of its item x
// depot forecasts to 1e-9 relative (pipeline.CoherenceTolerance).
func TestLocalRunsTheHierarchySample(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	sample := filepath.Join("..", "..", "..", "config", "samples", "forecasting_v1alpha1_forecastportfolio_hierarchy.yaml")
	stdout, stderr := generateAndRunLocal(t, dir, sample, "flp-hier-1", "--frequency", "Weekly", "--items", "6", "--depots", "4")
	if !strings.Contains(stdout, "24 series forecast") || !strings.Contains(stderr, "reconcile: flp-hier-1: 35 nodes (7 spanning)") {
		t.Fatalf("local -f stdout: %s\nstderr: %s", stdout, stderr)
	}
	if m := regexp.MustCompile(`(\d+) shards`).FindStringSubmatch(stdout); m == nil || len(m[1]) == 1 && m[1] < "2" {
		t.Errorf("local -f ran %v shards, want several: %s", m, stdout)
	}
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out/"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("inspect: exit %d: %s", code, errb.String())
	}
	if !strings.Contains(out.String(), "hierarchy: coherent: 11 aggregates over 24 bottom series, 12 periods") {
		t.Fatalf("inspect: %s", out.String())
	}
	out.Reset()
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out/", "--series", "item=,depot=brill"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("inspect --series of a depot total: exit %d: %s", code, errb.String())
	}
	if !strings.Contains(out.String(), ",brill,depot,") {
		t.Errorf("inspect --series item=,depot=brill: %s", out.String())
	}
}

// TestHierarchyStepsAsJobs: the commands the run's Jobs execute, with their termination
// messages (the controller's contract): plan says reconcile, each train shard reports the levels
// it holds, reconcile reports the spanning levels and the coherence it checked, publish the run.
func TestHierarchyStepsAsJobs(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"generate", "--output", "file://" + dir + "/in/", "--frequency", "Weekly", "--items", "5", "--depots", "4"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: exit %d: %s", code, errb.String())
	}
	cfg := filepath.Join(dir, "config.json")
	os.WriteFile(cfg, []byte(`{"apiVersion":"trainer.almanac.dev/v1alpha1","kind":"ForecastRunConfig",
		"run":"flp-tree-1","trigger":"Manual",
		"source":{"uri":"file://`+dir+`/in/","format":"csv","frequency":"Weekly","weekAnchor":"Monday","nonNegative":true,"partitioning":"HashBuckets",
			"columns":{"series":["item","depot"],"date":"week_start","value":"units"}},
		"output":{"uri":"file://`+dir+`/out/","format":"csv"},"horizon":6,"quantilePercents":[10,90],"quantileWidth":"Backtest",
		"models":[{"family":"Naive"},{"family":"Theta"}],
		"selection":{"metric":"MASE","backtestOrigins":2,"backtestStep":1,"backtestRefit":"Once","design":"Fixed","designCostPercent":500},
		"sharding":{"targetSeriesPerShard":5,"buckets":64},"drift":{"metric":"MASE","thresholdPercent":130,"minEvaluatedPoints":3},
		"hierarchy":{"levels":[["depot"],["item"],[]],"shardBy":["depot"],"method":"OLS","nonNegative":true}}`), 0o644)
	term := filepath.Join(dir, "term")
	step := func(getenv func(string) string, args ...string) summary.Summary {
		t.Helper()
		if code := run(ctx, append(args, "--config", cfg, "--termination-log", term), &out, &errb, getenv); code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, errb.String())
		}
		b, _ := os.ReadFile(term)
		s, err := summary.Decode(b)
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	ps := step(noenv, "plan")
	if !ps.Reconcile || ps.Shards < 3 {
		t.Fatalf("plan summary %+v: want reconcile and 3 or more shards", ps)
	}
	nodes := map[string]int{}
	for i := 0; i < ps.Shards; i++ {
		s := step(noenv, "train", "--shard", strconv.Itoa(i))
		for _, l := range s.Levels {
			nodes[l.Name] += l.Nodes
		}
	}
	rs := step(noenv, "reconcile")
	if rs.Kind != summary.KindReconcile || rs.MaxDeviation > 1e-9 || rs.Trained != 6 {
		t.Fatalf("reconcile summary %+v", rs)
	}
	for _, l := range rs.Levels {
		nodes[l.Name] += l.Nodes
	}
	if want := map[string]int{"item+depot": 20, "depot": 4, "item": 5, "total": 1}; !maps.Equal(nodes, want) {
		t.Errorf("nodes by level over every summary %v, want %v", nodes, want)
	}
	if s := step(noenv, "publish"); s.Kind != summary.KindPublish || s.Trained != 20 || s.Units != ps.Units+1 {
		t.Fatalf("publish summary %+v", s)
	}
}

// TestCommandLineHygiene: every subcommand takes -h (exit 0, usage on stdout), refuses stray
// arguments, empty list items and flags it would ignore (exit 2, naming them).
func TestCommandLineHygiene(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	cfg := filepath.Join(dir, "config.json")
	os.WriteFile(cfg, []byte(`{}`), 0o644)
	for _, cmd := range []string{"plan", "train", "reconcile", "publish", "local", "render", "validate", "inspect", "generate", "report", "bench"} {
		var out, errb bytes.Buffer
		if code := run(ctx, []string{cmd, "-h"}, &out, &errb, noenv); code != exitcode.OK || !strings.Contains(out.String(), "usage: almanac-trainer "+cmd) {
			t.Errorf("%s -h: exit %d, stdout %q", cmd, code, out.String())
		}
	}
	for name, tc := range map[string]struct {
		args []string
		want string
	}{
		"models with a trailing comma":  {[]string{"local", "--input", "file:///x/", "--output", "file:///y/", "--models", "ETS,"}, `--models: item 2 of "ETS," is empty`},
		"stray argument":                {[]string{"local", "--input", "file:///x/", "--output", "file:///y/", "Theta"}, `unexpected argument "Theta"`},
		"config and a portfolio flag":   {[]string{"local", "--config", cfg, "--frequency", "Weekly"}, "--frequency: not allowed with --config"},
		"file and a portfolio flag":     {[]string{"local", "-f", cfg, "--horizon", "8"}, "--horizon: not allowed with -f"},
		"frequency spelled lower case":  {[]string{"local", "--input", "file:///x/", "--output", "file:///y/", "--frequency", "weekly"}, `--frequency: Unsupported value: "weekly"`},
		"partitioning lower case":       {[]string{"local", "--input", "file:///x/", "--output", "file:///y/", "--partitioning", "object"}, `--partitioning: Unsupported value: "object"`},
		"quantile fractions":            {[]string{"local", "--input", "file:///x/", "--output", "file:///y/", "--quantile-percents", "0.1,0.9"}, `--quantile-percents: "0.1" is not an integer`},
		"stray plan argument":           {[]string{"plan", "--config", cfg, "now"}, `unexpected argument "now"`},
		"render without a file":         {[]string{"render"}, "-f FILE is required"},
		"generate stray":                {[]string{"generate", "--output", "mem://x/", "weekly"}, `unexpected argument "weekly"`},
		"generate lower-case frequency": {[]string{"generate", "--output", "mem://x/", "--frequency", "weekly"}, `frequency "weekly"`},
	} {
		t.Run(name, func(t *testing.T) {
			var out, errb bytes.Buffer
			if code := run(ctx, tc.args, &out, &errb, noenv); code != exitcode.Config || !strings.Contains(errb.String(), tc.want) {
				t.Fatalf("exit %d, stderr %q; want exit 2 naming %q", code, errb.String(), tc.want)
			}
		})
	}
}

// TestExitCodesForConfiguration: input that is not there and a column mapping that does not
// match the input are configuration errors (exit 2), not internal errors or broken data.
func TestExitCodesForConfiguration(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"generate", "--output", "file://" + dir + "/in/", "--items", "3", "--depots", "1", "--periods", "60"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: %s", errb.String())
	}
	for name, tc := range map[string]struct {
		args []string
		want string
	}{
		"missing input folder": {[]string{"--input", "file://" + dir + "/nowhere/"}, "source.uri"},
		"wrong date column":    {[]string{"--input", "file://" + dir + "/in/", "--series", "item,depot", "--date", "week_start"}, `missing column "week_start"`},
	} {
		t.Run(name, func(t *testing.T) {
			errb.Reset()
			args := append([]string{"local", "--output", "file://" + dir + "/out-" + strings.ReplaceAll(name, " ", "-") + "/"}, tc.args...)
			if code := run(ctx, args, &out, &errb, noenv); code != exitcode.Config || !strings.Contains(errb.String(), tc.want) {
				t.Fatalf("exit %d, stderr %q; want exit 2 naming %q", code, errb.String(), tc.want)
			}
		})
	}
}
