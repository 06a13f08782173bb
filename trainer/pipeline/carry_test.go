package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/tables"
)

// brillWithBadHoney rewrites depot brill's object so that FLP-HONEY-454, forecast by the
// first run, now has an unparsable value (as FLP-JAM-340 always has).
func brillWithBadHoney(t *testing.T, dir string) {
	t.Helper()
	b := depotRows("brill", []string{"FLP-OATS-1KG", "FLP-JAM-340", "FLP-HONEY-454"}, 42, func(item string, n, d int, day time.Time) string {
		if item != "FLP-OATS-1KG" && d == 42-3 {
			return "n/a"
		}
		return fmt.Sprintf("%d", 10+n+3*int(day.Weekday())+(d%5))
	})
	if err := os.WriteFile(filepath.Join(dir, "in", "depot-brill.csv"), b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// carriedRun publishes run name on the input of dir with a guard that lets a run with two of
// seven series rejected publish, and returns brill's forecasts and rejected rows.
func carriedRun(t *testing.T, dir, name string, guard runconfig.Publish) (*Manifest, []tables.ForecastRow, []tables.RejectedRow, error) {
	t.Helper()
	cfg := testConfig(name, "file://"+dir+"/in/", "file://"+dir+"/out")
	cfg.Source.Partitioning = runconfig.PartitionObjects
	cfg.Publish = &guard
	if _, err := runToPublish(t, cfg, nil); err != nil {
		return nil, nil, nil, err
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, name)
	u, ok := m.unit(ObjectID("depot-brill.csv", nil))
	if !ok || u.State != StateTrained {
		t.Fatalf("%s: brill's unit %+v", name, u)
	}
	var fc []tables.ForecastRow
	var rej []tables.RejectedRow
	for _, f := range u.Files {
		b, err := out.Get(context.Background(), f.Key)
		if err != nil {
			t.Fatal(err)
		}
		switch f.Table {
		case TableForecasts:
			_, fc, err = tables.ReadForecasts(bytes.NewReader(b), "csv", testKeys)
		case TableRejected:
			rej, err = tables.ReadRejected(bytes.NewReader(b), "csv", testKeys)
		}
		if err != nil {
			t.Fatal(err)
		}
	}
	return m, fc, rej, nil
}

// Issue 18 case 1, per series: a series rejected by a run that publishes keeps its previous
// forecast, marked with the runs it was carried and the run that made it, for at most
// publish.maxCarriedRuns runs in a row; rejected.csv says so; a series never forecast gets
// nothing. Before, the series simply vanished from the published forecasts.
func TestRejectedSeriesKeepItsForecast(t *testing.T) {
	dir, _ := objectRun(t)
	guard := runconfig.Publish{MinForecastPercent: 50, MinPreviousPercent: 50, MaxCarriedForwardPercent: 50, MaxCarriedRuns: 3}
	_, fc1, _, err := carriedRun(t, dir, "flp-0001", guard)
	if err != nil {
		t.Fatal(err)
	}
	honey := ingest.JoinKey("FLP-HONEY-454", "brill")
	var first []tables.ForecastRow
	for _, r := range fc1 {
		if r.Key == honey {
			first = append(first, r)
		}
	}
	if len(first) != 7 {
		t.Fatalf("flp-0001 forecast %d periods of honey, want 7", len(first))
	}
	brillWithBadHoney(t, dir)
	for k, run := range []string{"flp-0002", "flp-0003", "flp-0004", "flp-0005"} {
		m, fc, rej, err := carriedRun(t, dir, run, guard)
		if err != nil {
			t.Fatal(err)
		}
		var got []tables.ForecastRow
		for _, r := range fc {
			if r.Key == honey {
				got = append(got, r)
			}
			if r.Key == ingest.JoinKey("FLP-JAM-340", "brill") {
				t.Errorf("%s: jam, never forecast, has a forecast row %+v", run, r)
			}
			if r.Key == ingest.JoinKey("FLP-OATS-1KG", "brill") && r.CarriedRuns != 0 {
				t.Errorf("%s: oats, forecast by this run, is marked carried: %+v", run, r)
			}
		}
		var reason string
		for _, r := range rej {
			if r.Key == honey {
				reason = r.Reason
			}
		}
		if k < 3 { // carried 1, 2, 3 runs
			if len(got) != len(first) || m.Totals.Series.Carried != 1 || m.Totals.Series.Rejected != 2 {
				t.Fatalf("%s: %d honey rows, totals %+v; want %d rows carried", run, len(got), m.Totals.Series, len(first))
			}
			for i, r := range got {
				w := first[i]
				if r.CarriedRuns != k+1 || r.CarriedFrom != "flp-0001" || !r.Period.Equal(w.Period) || r.Step != w.Step || r.Mean != w.Mean || r.Model != w.Model {
					t.Fatalf("%s: row %+v, want %+v carried %d runs from flp-0001", run, r, w, k+1)
				}
			}
			if want := fmt.Sprintf("the forecast from flp-0001 is carried forward (%d of at most 3 runs)", k+1); !strings.Contains(reason, want) {
				t.Errorf("%s: reason %q lacks %q", run, reason, want)
			}
			continue
		}
		if len(got) != 0 || m.Totals.Series.Carried != 0 {
			t.Fatalf("%s: %d honey rows carried past publish.maxCarriedRuns (totals %+v)", run, len(got), m.Totals.Series)
		}
		if want := "not carried forward: it was carried 3 runs in a row already (publish.maxCarriedRuns 3)"; !strings.Contains(reason, want) {
			t.Errorf("%s: reason %q lacks %q", run, reason, want)
		}
	}
}

// The cap on carried-forward units holds for series carried one by one too, and maxCarriedRuns
// 0 turns the carrying off.
func TestCarriedSeriesAreCapped(t *testing.T) {
	dir, _ := objectRun(t)
	guard := runconfig.Publish{MinForecastPercent: 50, MinPreviousPercent: 50, MaxCarriedForwardPercent: 50, MaxCarriedRuns: 3}
	if _, _, _, err := carriedRun(t, dir, "flp-0001", guard); err != nil {
		t.Fatal(err)
	}
	brillWithBadHoney(t, dir)
	capped := guard
	capped.MaxCarriedForwardPercent = 10 // 1 of 7 series is 14%
	_, _, _, err := carriedRun(t, dir, "flp-0002", capped)
	refusedLeavesLatest(t, &runconfig.Config{Run: "flp-0002", Output: runconfig.Output{URI: "file://" + dir + "/out"}}, "flp-0001", err,
		"1 of 7 series carried forward one by one, the guard allows 10% (publish.maxCarriedForwardPercent)")
	off := guard
	off.MaxCarriedRuns = 0
	m, _, _, err := carriedRun(t, dir, "flp-0003", off)
	if err != nil || m.Totals.Series.Carried != 0 {
		t.Fatalf("maxCarriedRuns 0: %v, totals %+v", err, m.Totals.Series)
	}
}
