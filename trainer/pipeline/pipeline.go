// Package pipeline is the trainer's data work as library functions: Plan lists the input and
// cuts units into shards, Train forecasts one shard, Publish verifies every unit, carries
// forward the previous forecast where a shard failed and moves the latest pointer, Local runs
// all three in one process and Inspect reports a published run. Each takes the run
// configuration and an Env (clock and log) and returns the summary.Summary the command writes
// to its termination message.
//
// Crash safety rests on three rules. Every object is written whole or not at all
// (store.Write). Within a unit, train writes unit.json last, listing the unit's files with
// their SHA-256; publish trusts a unit only when unit.json exists and every checksum
// matches. Publish writes MANIFEST.json only after verifying every unit and moves
// latest.json only after that, so a reader following latest.json always finds a complete
// manifest whose files all exist. Every output is a pure function of the input, the
// configuration and the previous run, so a rerun after a crash writes identical bytes.
package pipeline

import (
	"context"
	"errors"
	"fmt"
	"io"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// Env is what the commands take from the process.
type Env struct {
	// Now is the clock (time.Now in main, fixed in tests). Plan takes the history cutoff from
	// it for manual runs (see Plan.Cutoff); otherwise it only times the commands.
	Now func() time.Time
	// Log receives progress lines (stderr in main); nil discards them.
	Log io.Writer
	// Workers is the number of forecasting goroutines; <= 0 means GOMAXPROCS.
	Workers int
	// ProgressEvery is how often train prints a progress line between phase changes (0:
	// summary.ProgressInterval; below 0: only at phase changes).
	ProgressEvery time.Duration
	// DesignSample is the most series plan decides the run's design on (0:
	// design.DefaultSampleSeries; see designSample).
	DesignSample int
	// wholeShard makes train read every unit before fitting even when it could stream
	// (tests compare the two paths).
	wholeShard bool
}

func (e Env) designSample() int {
	if e.DesignSample <= 0 {
		return design.DefaultSampleSeries
	}
	return e.DesignSample
}

func (e Env) logf(format string, a ...any) {
	if e.Log != nil {
		logMu.Lock()
		defer logMu.Unlock()
		fmt.Fprintf(e.Log, format+"\n", a...)
	}
}

func (e Env) now() time.Time {
	if e.Now == nil {
		return time.Now()
	}
	return e.Now()
}

// ExitCode maps an error from this package to the trainer's exit code: configuration errors
// (ErrConfig, a bad URI or key, refused credentials) 2, broken input or damaged published state
// (store.ErrDamaged) 3, storage failures that
// may pass 4, a run the publish guard refused 5, anything else 1. Refused credentials count as configuration: retrying with the
// same Secret cannot help.
func ExitCode(err error) int {
	switch {
	case err == nil:
		return exitcode.OK
	case errors.Is(err, ErrConfig), errors.Is(err, store.ErrBadURI), errors.Is(err, store.ErrBadKey),
		errors.Is(err, store.ErrPermission), errors.Is(err, ingest.ErrColumns):
		return exitcode.Config
	case errors.Is(err, ErrRefused):
		return exitcode.Refused
	case errors.Is(err, ingest.ErrBrokenInput), errors.Is(err, store.ErrDamaged):
		return exitcode.Data
	case errors.Is(err, ErrStorage), errors.Is(err, context.DeadlineExceeded):
		return exitcode.Transient
	}
	return exitcode.Internal
}

// openOutput checks the run name and the key column names the output tables take
// (tables.CheckKeys: each key column keeps its own name there) and opens the output store.
func openOutput(ctx context.Context, cfg *runconfig.Config) (*store.Store, error) {
	if err := store.CheckName("run", cfg.Run); err != nil {
		return nil, fmt.Errorf("run: %w: %w", ErrConfig, err)
	}
	if err := tables.CheckKeys(cfg.Source.Columns.Series); err != nil {
		return nil, fmt.Errorf("source.columns.series: %w: %w", ErrConfig, err)
	}
	st, err := store.Open(ctx, cfg.Output.URI)
	if err != nil {
		return nil, fmt.Errorf("output.uri: %w", storageErr(err))
	}
	return st, nil
}

// tableFormat is the output table format (parquet unless csv is configured).
func tableFormat(cfg *runconfig.Config) string {
	if cfg.Output.Format == "csv" {
		return "csv"
	}
	return "parquet"
}

// previous finds the run this one follows: cfg.PreviousRun, else the run latest.json points
// at, else none (first run; prev is nil). When latest.json names this run, or a later run
// built on it (a rerun after publish), this run's own manifest says which run it followed. The previous run must be another run with a
// manifest; the one latest.json names is verified against its checksum.
func previous(ctx context.Context, out *store.Store, cfg *runconfig.Config) (*Manifest, error) {
	run := cfg.PreviousRun
	if run == "" {
		p, ok, _, err := latest(ctx, out) // a damaged latest.json is read as rebuilt from the chain
		if err != nil {
			return nil, err
		}
		if !ok {
			return nil, nil
		}
		run = p.Run
		if run != cfg.Run {
			// A rerun of an older run after newer ones were published follows its own record.
			newer, err := descends(ctx, out, run, cfg.Run)
			if err != nil {
				return nil, err
			}
			if newer {
				run = cfg.Run
			}
		}
	}
	if run == cfg.Run {
		// A rerun of a run already published: its own predecessor is recorded in its manifest.
		m, err := readManifest(ctx, out, run)
		if err != nil {
			return nil, err
		}
		if m.PreviousRun == "" {
			return nil, nil
		}
		run = m.PreviousRun
	}
	if err := store.CheckName("run", run); err != nil {
		return nil, fmt.Errorf("previousRun: %w: %w", ErrConfig, err)
	}
	return readManifest(ctx, out, run)
}

// maxChain bounds the walk along previousRun links.
const maxChain = 1000

// descends reports whether run from was built, through previousRun links, on run ancestor.
// A link to a run without a manifest ends the walk.
func descends(ctx context.Context, out *store.Store, from, ancestor string) (bool, error) {
	for i := 0; i < maxChain && from != ""; i++ {
		m, err := readManifest(ctx, out, from)
		if errors.Is(err, store.ErrNotFound) {
			return false, nil
		}
		if err != nil {
			return false, err
		}
		if m.PreviousRun == ancestor {
			return true, nil
		}
		from = m.PreviousRun
	}
	return false, nil
}
