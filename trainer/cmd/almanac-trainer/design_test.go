package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/tables"
)

// designPortfolio is a weekly Fenwick Lane Provisions portfolio with the automatic design,
// cut into shards of about 6 series.
const designPortfolio = `apiVersion: forecasting.almanac.dev/v1alpha1
kind: ForecastPortfolio
metadata:
  name: fenwick-weekly-design
  namespace: default
spec:
  schedule: "30 4 * * 1"
  source:
    uri: s3://fenwick-planning/demand/weekly/
    format: csv
    columns:
      series: [item, depot]
      date: week_start
      value: units
    frequency: Weekly
    nonNegative: true
  output:
    uri: s3://fenwick-planning/forecasts/weekly/
    format: csv
  horizon: 8
  quantilePercents: [10, 90]
  models:
    - family: Naive
    - family: SeasonalNaive
    - family: Theta
    - family: ETS
      ets:
        trends: ["N"]
  selection:
    design: Auto
  sharding:
    targetSeriesPerShard: 6
  trainer:
    image: registry.example.com/almanac/almanac-trainer:v0.1.0
`

// TestLocalShardsApplyThePlanDesign: a file-first run across several shards decides the
// design once, in plan, on the whole portfolio (24 series of 160 weeks, under the sample
// limit), writes it
// into plan.json, and every shard forecasts each segment with the plan's design: every models
// row says design_chosen_by plan and carries the plan's design for its segment, also where a
// segment's series are spread over several shards.
func TestLocalShardsApplyThePlanDesign(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "portfolio.yaml")
	if err := os.WriteFile(file, []byte(designPortfolio), 0o644); err != nil {
		t.Fatal(err)
	}
	stdout, stderr := generateAndRunLocal(t, dir, file, "flp-design-1", "--frequency", "Weekly", "--items", "6", "--depots", "4", "--periods", "160")
	m := regexp.MustCompile(`(\d+) shards`).FindStringSubmatch(stdout)
	if m == nil {
		t.Fatalf("local -f stdout: %s", stdout)
	}
	shards, _ := strconv.Atoi(m[1])
	if shards < 3 {
		t.Fatalf("%d shards, want several: %s", shards, stdout)
	}
	if !strings.Contains(stderr, "plan: design chosen once for the run on a sample of 24 series") ||
		strings.Count(stderr, " by this shard") != shards || strings.Contains(stderr, "segments chosen by the plan, 1 by this shard") {
		t.Errorf("local -f stderr: %s", stderr)
	}

	p := planOf(t, dir, "flp-design-1")
	// 160 weeks are enough for the inner holdout (2h + m + 2 = 70, minHoldout): every series scores.
	if p.Design == nil || p.Design.SampleSeries != 24 || p.Design.InnerSeries != 24 || len(p.Design.Segments) == 0 || len(p.Design.Candidates) < 2 {
		t.Fatalf("plan.json design: %+v", p.Design)
	}
	planned := map[string]string{}
	for _, s := range p.Design.Segments {
		planned[s.Segment] = s.Design
	}
	shardOf := map[string]int{}
	for i, s := range p.Shards {
		for _, u := range s.Units {
			shardOf[u] = i
		}
	}
	shardsOfSegment := map[string]map[int]bool{}
	rows := 0
	for _, u := range p.Units {
		f, err := os.Open(filepath.Join(dir, "out", "runs", "flp-design-1", "units", u.ID, "models.csv"))
		if err != nil {
			t.Fatal(err)
		}
		mr, err := tables.ReadModels(f, tables.CSV, []string{"item", "depot"})
		f.Close()
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range mr {
			rows++
			want, ok := planned[r.Segment]
			if !ok || r.Design != want || r.DesignBy != design.FromPlan {
				t.Errorf("unit %s, %s: design %s of segment %s chosen by %q; the plan chose %q", u.ID, r.Key, r.Design, r.Segment, r.DesignBy, want)
			}
			if shardsOfSegment[r.Segment] == nil {
				shardsOfSegment[r.Segment] = map[int]bool{}
			}
			shardsOfSegment[r.Segment][shardOf[u.ID]] = true
		}
	}
	spread := 0
	for _, s := range shardsOfSegment {
		if len(s) > 1 {
			spread++
		}
	}
	if rows != 24 || spread == 0 {
		t.Errorf("%d models rows; %d segments spread over more than one shard (%v), want 24 rows and at least one", rows, spread, shardsOfSegment)
	}
}

// TestLocalDefaultZooLeadsWithTheBenchmarkedDesign runs local without --models: the plan's
// first candidate design is the ETS, Theta and DOTM mean, the default README's M3 and M4
// hourly figures measure (before the eleventh session local's zoo had no DOTM, so its runs
// fell back to the ETS and Theta mean).
func TestLocalDefaultZooLeadsWithTheBenchmarkedDesign(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"generate", "--output", "file://" + dir + "/in/", "--frequency", "Weekly", "--items", "4", "--depots", "2", "--periods", "120"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("generate: exit %d: %s", code, errb.String())
	}
	if code := run(ctx, []string{"local", "--input", "file://" + dir + "/in/", "--output", "file://" + dir + "/out/", "--series", "item,depot",
		"--date", "week_start", "--value", "units", "--frequency", "Weekly", "--horizon", "8", "--run", "flp-default-zoo"}, &out, &errb, noenv); code != 0 {
		t.Fatalf("local: exit %d: %s", code, errb.String())
	}
	if p := planOf(t, dir, "flp-default-zoo"); p.Design == nil || len(p.Design.Candidates) == 0 || p.Design.Candidates[0].Name != design.Combinations[0].Name {
		t.Fatalf("plan.json design %+v: want the first candidate %q", p.Design, design.Combinations[0].Name)
	}
}

// planOf reads the plan.json that local wrote for run under dir/out.
func planOf(t *testing.T, dir, run string) *pipeline.Plan {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, "out", "runs", run, "plan.json"))
	if err != nil {
		t.Fatal(err)
	}
	p, err := pipeline.DecodePlan(b, "plan.json")
	if err != nil {
		t.Fatal(err)
	}
	return p
}
