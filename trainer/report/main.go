package report

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"syscall"

	"almanac.dev/almanac/trainer/cli"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/store"
)

// Main runs the report command with args (without the command name) and returns the exit
// code: exitcode.OK, exitcode.Config for a bad command line, URI or run name, exitcode.Data
// when the run's files cannot be read as tables, exitcode.Transient for storage failures.
// It is meant to be wired as `almanac-trainer report`.
func Main(args []string, stdout, stderr io.Writer) int {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	return run(ctx, args, stdout, stderr)
}

func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("report", flag.ContinueOnError)
	output := fs.String("output", "", "output URI of the portfolio (where runs/ and latest.json are)")
	runName := fs.String("run", "", "run to report (default: the run latest.json points at)")
	dir := fs.String("dir", "report", "directory to write index.html and the plots into")
	largest := fs.Int("largest", DefaultLimits.Largest, "number of largest series (by forecast volume) to draw")
	inter := fs.Int("intermittent", DefaultLimits.Intermittent, "number of intermittent-demand series to draw")
	drifted := fs.Int("drifted", DefaultLimits.Drifted, "most drifted series to draw")
	indexCap := fs.Int("index-cap", 1000, "most rows in the all-series and rejected tables")
	noHistory := fs.Bool("no-history", false, "do not read the input; plot forecasts only")
	if code, ok := cli.Parse(fs, "usage: almanac-trainer report --output URI [--run NAME] [--dir DIR] [flags]\nWrites an HTML report of a published run.", args, stdout, stderr); !ok {
		return code
	}
	if *output == "" || *largest < 0 || *inter < 0 || *drifted < 0 {
		fmt.Fprintln(stderr, "report: usage: report --output URI [--run NAME] [--dir DIR] (counts must be >= 0)")
		return exitcode.Config
	}
	lim := Limits{Largest: *largest, Intermittent: *inter, Drifted: *drifted}
	res, err := Write(ctx, *output, *dir, Options{Run: *runName, Limits: &lim, IndexCap: *indexCap, NoHistory: *noHistory})
	if err != nil {
		fmt.Fprintf(stderr, "report: %v\n", err)
		return code(err)
	}
	if res.HistoryErr != nil {
		fmt.Fprintf(stderr, "report: warning: history not drawn: %v\n", res.HistoryErr)
	}
	fmt.Fprintf(stdout, "report: run %s, %d series drawn, %d files in %s\n", res.Run, res.Series, len(res.Files), filepath.Join(*dir, "index.html"))
	return exitcode.OK
}

// code maps an error to the exit code.
func code(err error) int {
	switch {
	case errors.Is(err, store.ErrBadURI), errors.Is(err, store.ErrBadKey), errors.Is(err, store.ErrNotFound),
		errors.Is(err, store.ErrPermission), errors.Is(err, errNotPublished):
		return exitcode.Config
	case errors.Is(err, errTable):
		return exitcode.Data
	}
	return exitcode.Transient
}
