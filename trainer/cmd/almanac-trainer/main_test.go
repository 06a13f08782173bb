package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/summary"
)

func noenv(string) string { return "" }

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
	if got := run(ctx, []string{"help"}, &out, &errb, noenv); got != exitcode.OK || !strings.Contains(out.String(), "3  broken input data") {
		t.Errorf("help must document the exit codes: %q", out.String())
	}
}

func TestStepWritesSummaryOnConfigError(t *testing.T) {
	dir := t.TempDir()
	cfg := filepath.Join(dir, "config.json")
	os.WriteFile(cfg, []byte(`{"run":"flp-1"}`), 0o644)
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
		"--value", "units", "--covariates", "promo", "--models", "Naive,SeasonalNaive", "--horizon", "7", "--series-per-shard", "4",
		"--partitioning", "object", "--run", "flp-local-1"}
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
	if code := run(ctx, []string{"inspect", "--output", "file://" + dir + "/out", "--run", "flp-nope"}, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("inspect of an unknown run: exit %d", code)
	}
	if code := run(ctx, []string{"train", "--config", "/nonexistent.json"}, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("train without a config file: exit %d", code)
	}
}
