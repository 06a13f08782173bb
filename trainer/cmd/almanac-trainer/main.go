// Command almanac-trainer is the trainer the almanac Jobs run: plan, train and publish, one
// command per Job, plus local (all three in one process), inspect (read a published run),
// generate (a synthetic dataset), report (an HTML page of a published run) and bench (the
// accuracy benchmark). The usage text lists the flags and the exit codes, which are a stable
// contract with the controller.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"runtime/debug"
	"strconv"
	"strings"
	"syscall"
	"time"

	"almanac.dev/almanac/trainer/bench"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/report"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/synth"
)

// version and commit are set at link time (see GO_BUILD_FLAGS in the Makefile).
var (
	version = "dev"
	commit  = "unknown"
)

// clock is the commands' clock (a variable so that the process-level tests can break it).
var clock = time.Now

// defaultTerminationLog is where Kubernetes reads a container's termination message.
const defaultTerminationLog = "/dev/termination-log"

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr, os.Getenv)
	stop()
	os.Exit(code)
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer, getenv func(string) string) int {
	if len(args) == 0 {
		usage(stderr)
		return exitcode.Config
	}
	env := pipeline.Env{Now: clock, Log: stderr}
	switch args[0] {
	case "plan", "publish", "train":
		return step(ctx, args[0], args[1:], stdout, stderr, getenv, env)
	case "local":
		return local(ctx, args[1:], stdout, stderr, env)
	case "inspect":
		return inspect(ctx, args[1:], stdout, stderr)
	case "validate":
		return validate(args[1:], os.Stdin, stdout, stderr)
	case "generate":
		return synth.Main(ctx, args[1:], stdout, stderr)
	case "bench":
		return bench.Main(args[1:], stdout, stderr)
	case "report":
		return report.Main(args[1:])
	case "version", "--version":
		fmt.Fprintf(stdout, "almanac-trainer %s (%s)\n", version, commit)
		return exitcode.OK
	case "help", "-h", "--help":
		usage(stdout)
		return exitcode.OK
	}
	fmt.Fprintf(stderr, "almanac-trainer: unknown command %q\n", args[0])
	usage(stderr)
	return exitcode.Config
}

// step runs plan, train or publish with a configuration file.
func step(ctx context.Context, name string, args []string, stdout, stderr io.Writer, getenv func(string) string, env pipeline.Env) int {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	cfgPath := fs.String("config", "", "run configuration `file` (config.json)")
	termLog := fs.String("termination-log", defaultTerminationLog, "`file` the summary JSON is written to")
	shardFlag := fs.String("shard", "", "shard `index` (train; default $JOB_COMPLETION_INDEX)")
	if err := fs.Parse(args); err != nil {
		return exitcode.Config
	}
	kind := map[string]string{"plan": summary.KindPlan, "train": summary.KindTrain, "publish": summary.KindPublish}[name]
	fail := func(err error) int {
		code := pipeline.ExitCode(err)
		s := summary.Summary{Kind: kind, Error: err.Error()}
		finish(s, code, *termLog, stdout, stderr)
		return code
	}
	if *cfgPath == "" {
		return fail(fmt.Errorf("--config is required: %w", pipeline.ErrConfig))
	}
	cfg, err := runconfig.Load(*cfgPath)
	if err != nil {
		return fail(fmt.Errorf("%w: %w", pipeline.ErrConfig, err))
	}
	var s summary.Summary
	switch name {
	case "plan":
		s, err = recovered(summary.KindPlan, stderr, func() (summary.Summary, error) { return pipeline.RunPlan(ctx, cfg, env) })
	case "publish":
		s, err = recovered(summary.KindPublish, stderr, func() (summary.Summary, error) { return pipeline.RunPublish(ctx, cfg, env) })
	case "train":
		idx := *shardFlag
		if idx == "" {
			idx = getenv("JOB_COMPLETION_INDEX")
		}
		shard, perr := strconv.Atoi(idx)
		if perr != nil || shard < 0 {
			return fail(fmt.Errorf("train needs --shard or JOB_COMPLETION_INDEX (got %q): %w", idx, pipeline.ErrConfig))
		}
		s, err = recovered(summary.KindTrain, stderr, func() (summary.Summary, error) { return pipeline.RunTrain(ctx, cfg, shard, env) })
	}
	code := pipeline.ExitCode(err)
	if err != nil {
		s.Error = err.Error()
	}
	finish(s, code, *termLog, stdout, stderr)
	return code
}

// recovered runs a step and turns a panic on this goroutine into an error, so the process
// exits 1 (internal) with a summary instead of the runtime's exit 2, which the Jobs read as a
// permanent configuration error. The stack goes to stderr; the summary keeps the panic value.
// Panics of the forecasting workers are already caught per series (selection.protect). Fatal
// runtime errors (out of memory, stack exhaustion) cannot be recovered and still exit 2; the
// Jobs' FallbackToLogsOnError then hands the controller the log's tail.
func recovered(kind string, stderr io.Writer, fn func() (summary.Summary, error)) (s summary.Summary, err error) {
	defer func() {
		if r := recover(); r != nil {
			fmt.Fprintf(stderr, "almanac-trainer: panic: %v\n%s", r, debug.Stack())
			s, err = summary.Summary{Kind: kind}, fmt.Errorf("internal error (a bug): panic: %v", r)
		}
	}()
	return fn()
}

// finish writes the summary to the termination log (a warning when that fails), a one-line
// account to stdout and the error to stderr.
func finish(s summary.Summary, code int, termLog string, stdout, stderr io.Writer) {
	if termLog != "" {
		b, err := summary.Encode(s)
		if err == nil {
			err = os.WriteFile(termLog, b, 0o644)
		}
		if err != nil {
			fmt.Fprintf(stderr, "almanac-trainer: warning: termination log %s: %v\n", termLog, err)
		}
	}
	fmt.Fprintln(stdout, line(s))
	if s.Error != "" {
		fmt.Fprintf(stderr, "almanac-trainer: %s failed (exit %d): %s\n", s.Kind, code, s.Error)
	}
}

// line is the human summary.
func line(s summary.Summary) string {
	var b strings.Builder
	switch s.Kind {
	case summary.KindPlan:
		fmt.Fprintf(&b, "plan: %d series in %d units, %d shards, %d input bytes", s.Series, s.Units, s.Shards, s.Bytes)
	case summary.KindTrain:
		fmt.Fprintf(&b, "train shard %d: %d series, %d forecast, %d rejected in %.1fs (%.1f series/s)",
			s.Shard, s.Series, s.Trained, s.Rejected, s.DurationSeconds, s.SeriesPerSecond)
	case summary.KindPublish:
		fmt.Fprintf(&b, "publish: %d units (%d carried forward, %d missing), %d series forecast, manifest %s",
			s.Units, s.CarriedForward, s.Missing, s.Trained, s.Manifest)
	}
	if a := s.Accuracy; a != nil && a.Evaluated > 0 {
		fmt.Fprintf(&b, "; previous run %s expected %.3f realized %.3f over %d series, %d drifted",
			a.Metric, a.ExpectedSum/float64(a.Evaluated), a.RealizedSum/float64(a.Evaluated), a.Evaluated, a.Drifted)
	}
	if s.Error != "" {
		b.WriteString("; FAILED")
	}
	return b.String()
}

// local runs the whole pipeline in this process, from --config or from flags.
func local(ctx context.Context, args []string, stdout, stderr io.Writer, env pipeline.Env) int {
	fs := flag.NewFlagSet("local", flag.ContinueOnError)
	fs.SetOutput(stderr)
	cfgPath := fs.String("config", "", "run configuration `file`; the flags below are ignored when set")
	termLog := fs.String("termination-log", "", "`file` the summary JSON is written to (default none)")
	in := fs.String("input", "", "input `URI` (an object, or a prefix ending in /)")
	out := fs.String("output", "", "output `URI`")
	format := fs.String("format", "csv", "input format: csv or parquet")
	outFormat := fs.String("output-format", "parquet", "output table format: csv or parquet")
	freq := fs.String("frequency", "Daily", "Hourly, Daily, Weekly, Monthly, Quarterly or Yearly")
	keys := fs.String("series", "series", "comma-separated series key `columns`")
	date := fs.String("date", "date", "date `column`")
	value := fs.String("value", "value", "value `column`")
	covs := fs.String("covariates", "", "comma-separated covariate `columns`")
	partitioning := fs.String("partitioning", runconfig.PartitionHashBuckets, "input layout: HashBuckets, Objects or RowGroups")
	horizon := fs.Int("horizon", 14, "forecast horizon in periods")
	zoo := fs.String("models", "Naive,SeasonalNaive,ETS,Theta", "comma-separated model `families`")
	designFlag := fs.String("design", runconfig.DesignAuto, "how the design is decided, as spec.selection.design: Auto (chosen per segment on an inner holdout), PerSeries or Fixed")
	quantiles := fs.String("quantile-percents", "10,50,90", "comma-separated quantile `percents`")
	perShard := fs.Int("series-per-shard", 2000, "target series per shard")
	runName := fs.String("run", "", "run `name` (default local-<UTC time>)")
	workers := fs.Int("workers", 0, "forecasting goroutines (0: GOMAXPROCS)")
	if err := fs.Parse(args); err != nil {
		return exitcode.Config
	}
	env.Workers = *workers
	var cfg *runconfig.Config
	var err error
	if *cfgPath != "" {
		cfg, err = runconfig.Load(*cfgPath)
	} else {
		name := *runName
		if name == "" {
			name = "local-" + env.Now().UTC().Format("20060102-150405")
		}
		c := runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind, Run: name, Trigger: "Manual",
			Source: runconfig.Source{URI: *in, Format: *format, Frequency: *freq, NonNegative: true, Partitioning: *partitioning,
				Columns: runconfig.Columns{Series: split(*keys), Date: *date, Value: *value, Covariates: split(*covs)}},
			Output:    runconfig.Output{URI: *out, Format: *outFormat},
			Horizon:   *horizon,
			Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 1, BacktestRefit: runconfig.RefitOnce, Design: *designFlag, DesignCostPercent: 500},
			Sharding:  runconfig.Sharding{TargetSeriesPerShard: *perShard},
			Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 7},
		}
		for _, f := range split(*zoo) {
			c.Models = append(c.Models, runconfig.Model{Family: f})
		}
		for _, q := range split(*quantiles) {
			v, perr := strconv.Atoi(q)
			if perr != nil {
				err = fmt.Errorf("--quantile-percents: %q is not an integer percent", q)
			}
			c.QuantilePercents = append(c.QuantilePercents, v)
		}
		if err == nil {
			err = c.Validate()
		}
		cfg = &c
	}
	if err != nil {
		fmt.Fprintf(stderr, "almanac-trainer local: %v\n", err)
		return exitcode.Config
	}
	s, err := recovered(summary.KindPublish, stderr, func() (summary.Summary, error) { return pipeline.RunLocal(ctx, cfg, env) })
	code := pipeline.ExitCode(err)
	if err != nil {
		s.Error = err.Error()
	}
	finish(s, code, *termLog, stdout, stderr)
	if err == nil {
		fmt.Fprintf(stdout, "local: run %s, %d shards in %.1fs, %.1f series/s fitting\n", cfg.Run, s.Shards, s.DurationSeconds, s.SeriesPerSecond)
	}
	return code
}

// inspect prints a published run.
func inspect(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("inspect", flag.ContinueOnError)
	fs.SetOutput(stderr)
	out := fs.String("output", "", "output `URI` of the portfolio")
	run := fs.String("run", "", "run `name` (default: the run latest.json points at)")
	sel := fs.String("series", "", "show one series, by its key columns: `item=X,depot=Y` (fields quoted as in CSV when a value holds a comma or quote)")
	if err := fs.Parse(args); err != nil {
		return exitcode.Config
	}
	if *out == "" {
		fmt.Fprintln(stderr, "almanac-trainer inspect: --output is required")
		return exitcode.Config
	}
	var err error
	if *sel != "" {
		err = pipeline.InspectSeries(ctx, *out, *run, *sel, stdout)
	} else {
		err = pipeline.Inspect(ctx, *out, *run, stdout)
	}
	if err != nil {
		fmt.Fprintf(stderr, "almanac-trainer inspect: %s: %v\n", store.Redact(*out), err)
		if errors.Is(err, pipeline.ErrConfig) {
			return exitcode.Config
		}
		return pipeline.ExitCode(err)
	}
	return exitcode.OK
}

func split(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}

func usage(w io.Writer) {
	fmt.Fprint(w, `usage: almanac-trainer <command> [flags]

commands (the run's Jobs):
  plan      --config FILE [--termination-log FILE]
            list the input, count series, cut units into shards, write runs/<run>/plan.json
  train     --config FILE [--shard N] [--termination-log FILE]
            forecast shard N (default $JOB_COMPLETION_INDEX) and write its units' tables
  publish   --config FILE [--termination-log FILE]
            verify every unit, carry forward failed ones, write MANIFEST.json, then latest.json
  The summary JSON (at most 4 KiB) goes to --termination-log (default /dev/termination-log;
  a path that cannot be written gives a warning), one line to stdout, logs to stderr.

commands (people and tests):
  validate  -f FILE: check ForecastPortfolio/ForecastRun manifests offline with the CRDs' schema,
            defaults and CEL rules, as the apiserver would; exit 2 naming every bad field
  local     all three steps in one process: --config FILE, or --input URI --output URI and
            the flags listed by 'local -h'
  inspect   --output URI [--run NAME] [--series item=X,depot=Y]: print a published run's
            manifest, counts and accuracy, or one series' models row and forecast rows
  generate  write a synthetic Fenwick Lane Provisions dataset; 'generate -h' for flags
  report    write an HTML report of a published run (--output URI [--run NAME] [--dir DIR]); --help for flags
  bench     score the model zoo on a dataset in the M3 layout (--data DIR or --m3); --help for flags
  version   print the version

exit codes (stable; the Jobs fail a step or shard at once on 2, 3 and 5 and retry 1 and 4):
  0  ok (publish also exits 0 when units are missing within the publish guard: the manifest
     then says complete: false)
  1  internal error (a bug; a panic is reported with its value in the summary)
  2  configuration error: bad config or flags, unknown model, bad URI (an output URI on a file),
     refused credentials or permissions; also what the Go runtime exits with on a fatal error
     (out of memory), which the trainer cannot catch
  3  broken data: an input object that cannot be read as a table, changed or vanished after plan,
     an input folder that is missing or has no objects; or damaged published state (latest.json
     unreadable, its manifest gone or with another checksum)
  4  transient storage error: timeouts, refused connections, server errors
  5  publish refused: fewer series forecast than the run's publish guard needs, or too many
     units carried forward; no manifest is written and latest.json stays where it was
`)
}
