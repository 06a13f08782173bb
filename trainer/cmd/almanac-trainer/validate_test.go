package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/exitcode"
)

func TestValidateAcceptsTheSamples(t *testing.T) {
	files, err := filepath.Glob(filepath.Join("..", "..", "..", "config", "samples", "forecasting_*.yaml"))
	if err != nil || len(files) < 3 {
		t.Fatalf("samples: %v %v", files, err)
	}
	args := []string{"validate"}
	for _, f := range files {
		args = append(args, "-f", f)
	}
	var out, errb bytes.Buffer
	if code := run(context.Background(), args, &out, &errb, noenv); code != exitcode.OK {
		t.Fatalf("exit %d, stderr:\n%s", code, errb.String())
	}
	for _, want := range []string{"forecasting_v1alpha1_forecastportfolio.yaml: ForecastPortfolio fenwick-weekly-demand valid\n",
		"forecasting_v1alpha1_forecastrun.yaml: ForecastRun fenwick-weekly-demand-manual-1 valid\n"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("stdout lacks %q:\n%s", want, out.String())
		}
	}
}

// The refused files of api/offline/testdata: exit 2 (configuration), every field named.
func TestValidateRefusesNamingEveryField(t *testing.T) {
	dir := filepath.Join("..", "..", "..", "api", "offline", "testdata")
	want := map[string]string{
		"unknown-field.yaml":            "spec.quantilesPercent: Forbidden: unknown field",
		"wrong-enum.yaml":               `spec.source.frequency: Unsupported value: "Fortnightly"`,
		"quantile-width.yaml":           `quantile-width.yaml:23: ForecastPortfolio "fenwick-daily-width" spec.quantileWidth: Unsupported value: "Wide"`,
		"bad-cron.yaml":                 `spec.schedule: Invalid value: "15 2 * *"`,
		"non-increasing-quantiles.yaml": "spec.quantilePercents: Invalid value: quantilePercents must be strictly increasing",
		"boosting-shrinkage.yaml":       `boosting-shrinkage.yaml:30: ForecastPortfolio "fenwick-daily-trees" spec.models[1].regression.boosting.shrinkage: Invalid value: "1.5": shrinkage must be greater than 0 and at most 1`,
	}
	args := []string{"validate"}
	for f := range want {
		args = append(args, "-f", filepath.Join(dir, f))
	}
	var out, errb bytes.Buffer
	if code := run(context.Background(), args, &out, &errb, noenv); code != exitcode.Config {
		t.Fatalf("exit %d, want %d", code, exitcode.Config)
	}
	if out.Len() != 0 {
		t.Errorf("stdout %q", out.String())
	}
	for f, msg := range want {
		if !strings.Contains(errb.String(), f) || !strings.Contains(errb.String(), msg) {
			t.Errorf("stderr does not name %s and %q:\n%s", f, msg, errb.String())
		}
	}
}

func TestValidateCommandLine(t *testing.T) {
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"validate", "-h"}, &out, &errb, noenv); code != exitcode.OK || !strings.HasPrefix(out.String(), "usage: almanac-trainer validate -f FILE") {
		t.Errorf("-h: exit %d, stdout %q", code, out.String())
	}
	for _, args := range [][]string{
		{"validate"},
		{"validate", "manifest.yaml"},
		{"validate", "--frobnicate"},
		{"validate", "-f", filepath.Join(t.TempDir(), "missing.yaml")},
	} {
		errb.Reset()
		if code := run(ctx, args, &out, &errb, noenv); code != exitcode.Config || errb.Len() == 0 {
			t.Errorf("%q: exit %d, stderr %q", args, code, errb.String())
		}
	}
	// - reads stdin.
	sample, err := os.ReadFile(filepath.Join("..", "..", "..", "config", "samples", "forecasting_v1alpha1_forecastrun.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	out.Reset()
	if code := validate([]string{"-f", "-"}, bytes.NewReader(sample), &out, &errb); code != exitcode.OK || out.String() != "<stdin>: ForecastRun fenwick-weekly-demand-manual-1 valid\n" {
		t.Errorf("stdin: exit %d, stdout %q", code, out.String())
	}
}
