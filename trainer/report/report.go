// Package report turns a published forecast run into a readable HTML page for demand
// planners: a portfolio overview (counts, chosen models, accuracy by model family, how the
// previous run's forecasts did), plots of a selection of series (history, forecast mean, its
// quantile band and the forecast origin), the rejected series with their reasons and an index
// of every series. The page is one self-contained index.html (inline CSS, no scripts, no
// external fonts) beside SVG plots drawn with gonum.org/v1/plot.
//
// The report reads only the run's stable outputs: runs/<run>/config.json, the per-unit tables
// (trainer/tables) and, when present, MANIFEST.json, which says which units were carried
// forward from an earlier run and where their files are. History comes from the input the
// run's configuration names, read with trainer/ingest.
package report

import (
	"context"
	"fmt"
	"os"
	"time"

	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
)

// Options configure Write. The zero value reports the latest run with DefaultLimits.
type Options struct {
	// Run names the run; "" means the run latest.json points at.
	Run string
	// Limits caps the per-series section; nil means DefaultLimits.
	Limits *Limits
	// IndexCap caps the rows of the all-series and rejected tables (0: 1000).
	IndexCap int
	// NoHistory skips reading the input (the plots then show forecasts only).
	NoHistory bool
}

// Result says what Write produced.
type Result struct {
	Run string
	// Series is the number of series drawn; Files the files written to the directory.
	Series int
	Files  []string
	// HistoryErr is the reason the history could not be read (nil when it was, or skipped).
	HistoryErr error
}

// Write reads the run from the output URI outputURI and writes index.html and its plots into
// dir (created if absent). It reads the run's tables once for the counts and each series'
// volume, the input once for every series' demand class (a few numbers per series), then the
// forecasts tables and the input again for the series it draws only. A history that cannot be
// read is not fatal: the page says so and Result.HistoryErr carries the reason.
func Write(ctx context.Context, outputURI, dir string, o Options) (*Result, error) {
	lim := DefaultLimits
	if o.Limits != nil {
		lim = *o.Limits
	}
	if o.IndexCap <= 0 {
		o.IndexCap = 1000
	}
	st, err := store.Open(ctx, outputURI)
	if err != nil {
		return nil, err
	}
	defer st.Close()
	r, err := LoadRun(ctx, st, o.Run)
	if err != nil {
		return nil, err
	}
	res := &Result{Run: r.Name}
	var classes map[string]string
	if !o.NoHistory {
		if classes, err = DemandClasses(ctx, r.Config.Source, r.Origin); err != nil {
			res.HistoryErr = fmt.Errorf("%s: %w", store.Redact(r.Config.Source.URI), err)
		}
	}
	picks := choose(r, lim, classes)
	res.Series = len(picks)
	keys := make(map[string]time.Time, len(picks))
	want := make(map[string]bool, len(picks))
	for _, p := range picks {
		keys[p.Key], want[p.Key] = r.Origin[p.Key], true
	}
	if err := r.LoadForecasts(ctx, st, want); err != nil {
		return nil, err
	}
	var h map[string]series.Series
	if !o.NoHistory && res.HistoryErr == nil {
		if h, err = LoadHistory(ctx, r.Config.Source, keys); err != nil {
			res.HistoryErr = fmt.Errorf("%s: %w", store.Redact(r.Config.Source.URI), err)
		}
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("report: %w", err)
	}
	if res.Files, err = render(dir, r, picks, h, res.HistoryErr, o); err != nil {
		return nil, err
	}
	return res, nil
}
