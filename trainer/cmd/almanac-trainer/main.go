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
	"almanac.dev/almanac/trainer/cli"
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
	case "plan", "publish", "train", "reconcile":
		return step(ctx, args[0], args[1:], stdout, stderr, getenv, env)
	case "local":
		return local(ctx, args[1:], stdout, stderr, env)
	case "inspect":
		return inspect(ctx, args[1:], stdout, stderr)
	case "render":
		return renderCmd(args[1:], stdout, stderr)
	case "validate":
		return validate(args[1:], os.Stdin, stdout, stderr)
	case "generate":
		return synth.Main(ctx, args[1:], stdout, stderr, clock)
	case "bench":
		return bench.Main(args[1:], stdout, stderr)
	case "report":
		return report.Main(args[1:], stdout, stderr)
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
	cfgPath := fs.String("config", "", "run configuration `file` (config.json)")
	termLog := fs.String("termination-log", defaultTerminationLog, "`file` the summary JSON is written to")
	var bounds timeoutFlags
	bounds.register(fs)
	var shardFlag *string
	use := fmt.Sprintf("usage: almanac-trainer %s --config FILE [--termination-log FILE] [--request-timeout D] [--step-timeout D] [--step-deadline T]", name)
	if name == "train" {
		shardFlag = fs.String("shard", "", "shard `index` (default $JOB_COMPLETION_INDEX)")
		use = "usage: almanac-trainer train --config FILE [--shard N] [--termination-log FILE] [--request-timeout D] [--step-timeout D] [--step-deadline T]"
	}
	if code, ok := cli.Parse(fs, use, args, stdout, stderr); !ok {
		return code
	}
	kind := map[string]string{"plan": summary.KindPlan, "train": summary.KindTrain, "publish": summary.KindPublish, "reconcile": summary.KindReconcile}[name]
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
		s, err = bounds.bounded(ctx, summary.KindPlan, stderr, func(ctx context.Context) (summary.Summary, error) { return pipeline.RunPlan(ctx, cfg, env) })
	case "publish":
		s, err = bounds.bounded(ctx, summary.KindPublish, stderr, func(ctx context.Context) (summary.Summary, error) { return pipeline.RunPublish(ctx, cfg, env) })
	case "reconcile":
		s, err = bounds.bounded(ctx, summary.KindReconcile, stderr, func(ctx context.Context) (summary.Summary, error) { return pipeline.RunReconcile(ctx, cfg, env) })
	case "train":
		idx := *shardFlag
		if idx == "" {
			idx = getenv("JOB_COMPLETION_INDEX")
		}
		shard, perr := strconv.Atoi(idx)
		if perr != nil || shard < 0 {
			return fail(fmt.Errorf("train needs --shard or JOB_COMPLETION_INDEX (got %q): %w", idx, pipeline.ErrConfig))
		}
		s, err = bounds.bounded(ctx, summary.KindTrain, stderr, func(ctx context.Context) (summary.Summary, error) {
			return pipeline.RunTrain(ctx, cfg, shard, env)
		})
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
		if s.Reconcile {
			b.WriteString("; the hierarchy spans units: reconcile step needed")
		}
	case summary.KindTrain:
		fmt.Fprintf(&b, "train shard %d: %d series, %d forecast, %d rejected in %.1fs (%.1f series/s)",
			s.Shard, s.Series, s.Trained, s.Rejected, s.DurationSeconds, s.SeriesPerSecond)
	case summary.KindReconcile:
		fmt.Fprintf(&b, "reconcile: %d spanning nodes forecast, %d rejected; largest deviation %.3g", s.Trained, s.Rejected, s.MaxDeviation)
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

// inspect prints a published run.
func inspect(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("inspect", flag.ContinueOnError)
	out := fs.String("output", "", "output `URI` of the portfolio")
	run := fs.String("run", "", "run `name` (default: the run latest.json points at)")
	sel := fs.String("series", "", "show one series, by its key columns: `item=X,depot=Y` (fields quoted as in CSV when a value holds a comma or quote)")
	if code, ok := cli.Parse(fs, "usage: almanac-trainer inspect --output URI [--run NAME] [--series item=X,depot=Y]", args, stdout, stderr); !ok {
		return code
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

func usage(w io.Writer) {
	fmt.Fprint(w, `usage: almanac-trainer <command> [flags]

commands (the run's Jobs):
  plan      --config FILE [--termination-log FILE]
            list the input, count series, cut units into shards, (Auto design) decide the
            design per segment on a sample, write runs/<run>/plan.json
  train     --config FILE [--shard N] [--termination-log FILE]
            forecast shard N (default $JOB_COMPLETION_INDEX) and write its units' tables
  reconcile --config FILE [--termination-log FILE]
            (hierarchies whose levels span units, when plan says so) forecast the spanning
            nodes from the units' partial sums and reconcile the whole tree
  publish   --config FILE [--termination-log FILE]
            verify every unit, carry forward failed ones, write MANIFEST.json, then latest.json
  They (and local) also take --request-timeout D (default 2m: a storage request that answers
  nothing, or a read or write that moves no byte, for that long fails with exit 4; 0 turns it
  off), --step-timeout D and --step-deadline T (RFC 3339) (default none: the whole command,
  past the shorter bound exit 4; the controller passes its Job's deadline less a margin).
  The summary JSON (at most 4 KiB) goes to --termination-log (default /dev/termination-log;
  a path that cannot be written gives a warning), one line to stdout, logs to stderr.

commands (people and tests):
  validate  -f FILE: check ForecastPortfolio/ForecastRun manifests offline with the CRDs' schema,
            defaults and CEL rules, as the apiserver would; exit 2 naming every bad field
  render    -f FILE [--run NAME]: print the run configuration (config.json) the controller would
            write for the ForecastPortfolio in FILE
  local     -f FILE [--input URI] [--output URI] [--run NAME]: run that portfolio's plan, train
            and publish in one process; or --config FILE, or --input URI --output URI and the
            portfolio flags listed by 'local -h'
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
     an input folder or prefix that does not exist, a column mapping the input's header lacks,
     refused credentials or permissions; also what the Go runtime exits with on a fatal error
     (out of memory), which the trainer cannot catch
  3  broken data: an input object that cannot be read as a table, changed or vanished after plan,
     an input folder with no objects, a hierarchy's input so old that its whole horizon has
     ended at the run's cutoff (plan); or a damaged manifest of a run named as previousRun (a
     damaged latest.json is not an error: publish rebuilds it from the newest intact manifest)
  4  transient storage error: refused connections, server errors, a storage request with no
     answer within --request-timeout (default 2m) or a command past --step-timeout or
     --step-deadline
  5  publish refused: fewer series forecast than the run's publish guard needs, or too many
     units carried forward; no manifest is written and latest.json stays where it was; also
     reconcile and publish of a hierarchy that spans units when a unit was not trained by
     this run (a hierarchy is published whole or not at all)
`)
}
