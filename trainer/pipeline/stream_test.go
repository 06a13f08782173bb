package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"runtime"
	"testing"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/synth"
)

// weeklyConfig is a weekly run over synth's item x depot series written under dir/in/ with o:
// the naive, seasonal naive, ETS and Theta zoo, the automatic design, a 3-origin backtest,
// Parquet out under out, 13 weeks ahead. Callers change what their case needs.
func weeklyConfig(dir string, o synth.Options, run, out, partitioning string) *runconfig.Config {
	return &runconfig.Config{
		APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
		Portfolio: "flp-weekly", Namespace: "planning", Run: run, Trigger: "Manual",
		Source: runconfig.Source{URI: "file://" + dir + "/in/", Format: runconfig.FormatParquet, Frequency: "Weekly", WeekAnchor: "Monday",
			NonNegative: true, Partitioning: partitioning,
			Columns: runconfig.Columns{Series: []string{synth.ColItem, synth.ColDepot}, Date: o.DateColumn(), Value: synth.ColUnits}},
		Output:           runconfig.Output{URI: "file://" + dir + "/" + out, Format: runconfig.FormatParquet},
		Horizon:          13,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    runconfig.QuantileWidthBacktest,
		Models: []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive},
			{Family: models.FamilyETS}, {Family: models.FamilyTheta}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 1, BacktestRefit: runconfig.RefitOnce,
			Design: runconfig.DesignAuto, DesignCostPercent: 500},
		Sharding: runconfig.Sharding{TargetSeriesPerShard: 500},
		Drift:    runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 3},
	}
}

// streamRun is a weekly run over synth's item x depot series, one Parquet object (one unit)
// per depot, every unit in one shard.
func streamRun(t *testing.T, design string) (string, *runconfig.Config) {
	t.Helper()
	dir := t.TempDir()
	o := synth.Options{Items: 30, Depots: 5, Frequency: synth.Weekly, Seed: 11, Periods: 160, End: anchor.AddDate(0, 0, -7), SpareShare: 0.3, Bad: 2}
	if _, err := o.Write(context.Background(), mustOpen(t, "file://"+dir), "in/", synth.Parquet); err != nil {
		t.Fatal(err)
	}
	cfg := weeklyConfig(dir, o, "flp-stream", "out", runconfig.PartitionObjects)
	cfg.Horizon = 8
	cfg.Selection.BacktestOrigins = 2
	// A budget no member can exceed: the fallback's choice measures CPU time, and the test
	// compares two runs' choices.
	cfg.Selection.Design, cfg.Selection.DesignCostPercent = design, 1000000
	cfg.Sharding.TargetSeriesPerShard = 1000
	return dir, cfg
}

// TestStreamingWritesWhatTheWholeShardWrites: a shard of five units fitted as each unit is read
// writes byte for byte what reading the whole shard first and fitting it in one call writes,
// under Fixed, PerSeries, Auto with every segment decided by the plan, and Auto with a plan
// sample too small to hold every segment (the shard chooses the rest at the end).
func TestStreamingWritesWhatTheWholeShardWrites(t *testing.T) {
	ctx := context.Background()
	for _, c := range []struct {
		design string
		sample int
	}{{runconfig.DesignFixed, 0}, {runconfig.DesignPerSeries, 0}, {runconfig.DesignAuto, 0}, {runconfig.DesignAuto, 1}} {
		t.Run(fmt.Sprintf("%s-sample%d", c.design, c.sample), func(t *testing.T) {
			dir, cfg := streamRun(t, c.design)
			env := testEnv()
			env.DesignSample = c.sample
			if _, err := RunPlan(ctx, cfg, env); err != nil {
				t.Fatal(err)
			}
			out := mustOpen(t, cfg.Output.URI)
			p, err := ReadPlan(ctx, out, cfg.Run)
			if err != nil {
				t.Fatal(err)
			}
			st, err := Check(cfg)
			if err != nil {
				t.Fatal(err)
			}
			opts, err := designOptions(st, p, 2)
			if err != nil {
				t.Fatal(err)
			}
			if len(p.Shards) != 1 || len(p.Shards[0].Units) != 5 || opts.Standalone() == nil {
				t.Fatalf("plan: %d shards, %d units, standalone %v; the test needs one shard of 5 units that streams",
					len(p.Shards), len(p.Shards[0].Units), opts.Standalone() != nil)
			}
			var snaps []map[string][]byte
			var logs []string
			for _, whole := range []bool{true, false} {
				if err := os.RemoveAll(dir + "/out/runs/" + cfg.Run + "/units"); err != nil {
					t.Fatal(err)
				}
				var log bytes.Buffer
				env := testEnv()
				env.wholeShard, env.Log, env.ProgressEvery = whole, &log, -1
				env.Workers = runtime.GOMAXPROCS(0) // streaming runs fitAhead calls at once
				sum, err := RunTrain(ctx, cfg, 0, env)
				if err != nil {
					t.Fatal(err)
				}
				if sum.Trained < 140 || sum.Rejected < 1 {
					t.Fatalf("trained %d, rejected %d: want about 150 trained and a bad series rejected", sum.Trained, sum.Rejected)
				}
				if c.sample > 0 && len(sum.DesignsByShard) == 0 {
					t.Fatalf("designs %v, none chosen by the shard: the test needs a segment the plan's sample missed", sum.Designs)
				}
				snaps = append(snaps, snapshot(t, dir+"/out"))
				logs = append(logs, designLine(log.String()))
			}
			if len(snaps[0]) < 20 || !equalFiles(snaps[0], snaps[1]) {
				for name, b := range snaps[0] {
					if !bytes.Equal(b, snaps[1][name]) {
						t.Errorf("%s differs between the whole shard and streaming", name)
					}
				}
				t.Fatalf("whole shard wrote %d files, streaming %d", len(snaps[0]), len(snaps[1]))
			}
			if logs[0] == "" || logs[0] != logs[1] {
				t.Errorf("design line:\nwhole shard: %s\nstreaming:   %s", logs[0], logs[1])
			}
		})
	}
}

// designLine is the train log's design line without its CPU time.
func designLine(log string) string {
	for _, line := range bytes.Split([]byte(log), []byte("\n")) {
		if i := bytes.Index(line, []byte(": design ")); i >= 0 && bytes.HasPrefix(line, []byte("train: shard")) {
			if j := bytes.Index(line, []byte(" inner-holdout series in ")); j >= 0 {
				if k := bytes.Index(line[j:], []byte(")")); k >= 0 {
					return string(line[:j]) + string(line[j+k:])
				}
			}
			return string(line)
		}
	}
	return ""
}

// TestStreamingHoldsFewUnits: with one reader, a shard of 12 units never holds more than
// readers + readAhead + fitCalls (being fitted) + 2 x unitWriters (queued and being written) units
// collected and not yet written; reading the whole shard first holds all 12.
func TestStreamingHoldsFewUnits(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	o := synth.Options{Items: 4, Depots: 12, Frequency: synth.Weekly, Seed: 3, Periods: 60, End: anchor.AddDate(0, 0, -7)}
	if _, err := o.Write(ctx, mustOpen(t, "file://"+dir), "in/", synth.Parquet); err != nil {
		t.Fatal(err)
	}
	cfg := weeklyConfig(dir, o, "flp-held", "out", runconfig.PartitionObjects)
	cfg.Selection.Design = runconfig.DesignFixed
	cfg.Sharding.TargetSeriesPerShard = 1000
	env := testEnv()
	env.Workers = 1
	if _, err := RunPlan(ctx, cfg, env); err != nil {
		t.Fatal(err)
	}
	st, err := Check(cfg)
	if err != nil {
		t.Fatal(err)
	}
	out, p, prev, err := openRun(ctx, cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer out.Close()
	opts, err := designOptions(st, p, env.Workers)
	if err != nil {
		t.Fatal(err)
	}
	tr := startTracker(Env{ProgressEvery: -1}, 0, len(p.Shards[0].Units))
	defer tr.stopTicker()
	units, fit, err := streamShard(ctx, cfg, st, nil, out, prev, p, 0, opts, opts.Standalone(), tr, env)
	if err != nil {
		t.Fatal(err)
	}
	bound := env.Workers + readAhead + fitCalls(env.Workers) + 2*unitWriters
	if len(units) != 12 || fit.maxHeld < 1 || fit.maxHeld > bound {
		t.Fatalf("%d units, at most %d held at once; want 12 units and 1 to %d held", len(units), fit.maxHeld, bound)
	}
	t.Logf("at most %d of %d units held at once (bound %d)", fit.maxHeld, len(units), bound)
	for k, d := range fit.dones {
		if d.Unit != units[k].unit.ID || d.Counts.Trained != 4 {
			t.Errorf("unit %s: written %q with %d trained, want 4", units[k].unit.ID, d.Unit, d.Counts.Trained)
		}
	}
}
