package bench

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/series"
)

func seq(from, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		out[i] = float64(from + i)
	}
	return out
}

func TestEarlierOrigin(t *testing.T) {
	start := time.Date(1990, 1, 1, 0, 0, 0, 0, time.UTC)
	es := []Entry{
		{ID: "m", Frequency: 12, Horizon: 3, Start: start, Train: seq(1, 20), Test: seq(21, 3)},
		// k = 1 leaves 15 points; k = 2 leaves 12, under one season and two (14): left out.
		{ID: "short", Frequency: 12, Horizon: 3, Start: start, Train: seq(1, 18), Test: seq(19, 3)},
	}
	got, dropped, err := EarlierOrigin(es, 1)
	if err != nil || dropped != 0 || len(got) != 2 {
		t.Fatalf("k=1: %d entries, %d dropped, %v", len(got), dropped, err)
	}
	// The test is the last h training points; the competition's test is not used.
	if !slices.Equal(got[0].Train, seq(1, 17)) || !slices.Equal(got[0].Test, seq(18, 3)) || !got[0].Start.Equal(start) {
		t.Errorf("k=1: train %v test %v start %v", got[0].Train, got[0].Test, got[0].Start)
	}
	got, dropped, err = EarlierOrigin(es, 2)
	if err != nil || dropped != 1 || len(got) != 1 || got[0].ID != "m" {
		t.Fatalf("k=2: %v dropped %d err %v", got, dropped, err)
	}
	if !slices.Equal(got[0].Train, seq(1, 14)) || !slices.Equal(got[0].Test, seq(15, 3)) {
		t.Errorf("k=2: train %v test %v", got[0].Train, got[0].Test)
	}
	// The input is not changed.
	if !slices.Equal(es[0].Train, seq(1, 20)) || !slices.Equal(es[0].Test, seq(21, 3)) {
		t.Errorf("input changed: %v %v", es[0].Train, es[0].Test)
	}
	if _, _, err := EarlierOrigin(es, -1); err == nil {
		t.Error("k=-1: no error")
	}
}

func TestKeepLast(t *testing.T) {
	start := time.Date(1990, 1, 1, 0, 0, 0, 0, time.UTC)
	es := []Entry{
		{ID: "m", Frequency: 12, Horizon: 8, Start: start, Train: seq(1, 40), Test: seq(41, 8)},
		{ID: "q", Frequency: 4, Horizon: 8, Start: start, Train: seq(1, 10), Test: seq(11, 8)},
		// Horizon 1, season 12: at least one season and two points (14) are kept.
		{ID: "floor", Frequency: 12, Horizon: 1, Start: start, Train: seq(1, 30), Test: seq(31, 1)},
		{ID: "hourly", Frequency: 24, Freq: series.Hourly, Horizon: 48, Start: start, Train: seq(1, 700), Test: seq(701, 48)},
	}
	got, err := KeepLast(es, 2)
	if err != nil {
		t.Fatal(err)
	}
	// Monthly, 40 points, h = 8: the last 16; the start moves 24 months on.
	if !slices.Equal(got[0].Train, seq(25, 16)) || !slices.Equal(got[0].Test, seq(41, 8)) ||
		!got[0].Start.Equal(time.Date(1992, 1, 1, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("monthly: train %v test %v start %v", got[0].Train, got[0].Test, got[0].Start)
	}
	// Already shorter than 2h = 16: kept whole.
	if !slices.Equal(got[1].Train, seq(1, 10)) || !got[1].Start.Equal(start) {
		t.Errorf("quarterly: %v %v", got[1].Train, got[1].Start)
	}
	if !slices.Equal(got[2].Train, seq(17, 14)) {
		t.Errorf("floor: %v", got[2].Train)
	}
	// Hourly (the long layout's engine frequency): 96 points kept, the start 604 hours on.
	if len(got[3].Train) != 96 || got[3].Train[0] != 605 || !got[3].Start.Equal(start.Add(604*time.Hour)) {
		t.Errorf("hourly: %d points from %v, start %v", len(got[3].Train), got[3].Train[0], got[3].Start)
	}
	if !slices.Equal(es[0].Train, seq(1, 40)) || !es[0].Start.Equal(start) {
		t.Error("input changed")
	}
	if _, err := KeepLast(es, -1); err == nil {
		t.Error("k=-1: no error")
	}
}

// The reshaping flags: refused beside the competition's published forecasts (they forecast
// the competition's own test data) and when negative; with a Naive member on the long layout
// the run reports the series it kept and the test it scored.
func TestMainReshapingFlags(t *testing.T) {
	dir := lineAndJump(t)
	for _, args := range [][]string{{"--keep-last", "-1"}, {"--origin-back", "-1"}, {"--score-published", "--origin-back", "1"}, {"--score-published", "--keep-last", "2"}} {
		var out, errb bytes.Buffer
		if code := Main(append([]string{"--data", dir, "--frequency", "weekly"}, args...), &out, &errb); code != 2 {
			t.Errorf("%v: exit %d, want 2 (%s)", args, code, errb.String())
		}
	}
	// One horizon back the test is weeks 57 to 60 (values 57..60), which the naive forecast
	// from 56 misses by 1, 2, 3, 4: sMAPE = mean of 200|e|/(|y|+|f|) over the four weeks.
	var out, errb bytes.Buffer
	if code := Main([]string{"--data", dir, "--frequency", "weekly", "--origin-back", "1", "--design", "fixed", "--zoo", "Naive", "--workers", "1", "--json"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	// One series: every bootstrap draw is that series, so the OWA interval is the point OWA
	// (naive against Naive2 at m = 1, which is naive: 1).
	for _, line := range strings.Split(out.String(), "\n") {
		if strings.HasPrefix(line, "{") {
			type scores struct {
				Series []struct {
					ID    string
					SMAPE float64
					MASE  *float64
				}
			}
			var doc struct {
				OWAInterval90 []float64
				Ours, Naive2  scores
			}
			if err := json.Unmarshal([]byte(line), &doc); err != nil {
				t.Fatal(err)
			}
			if len(doc.OWAInterval90) != 2 || doc.OWAInterval90[0] != 1 || doc.OWAInterval90[1] != 1 {
				t.Errorf("owaInterval90 %v, want [1 1]", doc.OWAInterval90)
			}
			// The per-series scores, for paired comparisons of two runs: naive and Naive2
			// agree here (no seasonality at m = 1).
			for name, r := range map[string]scores{"ours": doc.Ours, "naive2": doc.Naive2} {
				if len(r.Series) != 1 || r.Series[0].ID != "A" || math.Abs(r.Series[0].SMAPE-sMAPEOneBack()) > 1e-9 || r.Series[0].MASE == nil {
					t.Errorf("%s series %+v, want one entry A with sMAPE %.6f and a MASE", name, r.Series, sMAPEOneBack())
				}
			}
		}
	}
	if !strings.Contains(out.String(), "OWA over the series, 90% bootstrap interval (1000 resamples): 1.000 to 1.000") {
		t.Errorf("no interval line:\n%s", out.String())
	}
	want := sMAPEOneBack()
	if !strings.Contains(out.String(), "origin 1 horizons back: 1 series, 0 too short left out") ||
		!strings.Contains(out.String(), fmt.Sprintf("smape=%.3f", want)) {
		t.Errorf("want the origin line and smape=%.3f in:\n%s", want, out.String())
	}

	// --against: the drift method is exact on this straight line (OWA 0) and naive is Naive2
	// (OWA 1), so against the naive run the difference is -1 on every bootstrap draw of the one
	// series. Against a run at another window, or a file without a JSON line, it refuses.
	earlier := filepath.Join(dir, "naive.out")
	writeFile(t, dir, "naive.out", out.String())
	out.Reset()
	base := []string{"--data", dir, "--frequency", "weekly", "--design", "fixed", "--zoo", "Drift", "--workers", "1", "--against"}
	if code := Main(append(base, earlier, "--origin-back", "1"), &out, &errb); code != 0 {
		t.Fatalf("--against: exit %d: %s", code, errb.String())
	}
	if line := "OWA against " + earlier + " (almanac design=fixed zoo=Naive"; !strings.Contains(out.String(), line) ||
		!strings.Contains(out.String(), "): -1.0000, paired 90% bootstrap interval (2000 resamples) -1.0000 to -1.0000; this run lower in 100% of draws") {
		t.Errorf("no difference line of -1 in:\n%s", out.String())
	}
	writeFile(t, dir, "empty.out", "all: smape=1\n")
	for _, c := range []struct{ file, msg string }{{earlier, "another window?"}, {filepath.Join(dir, "empty.out"), "no JSON line"}} {
		errb.Reset()
		if code := Main(append(base, c.file), &out, &errb); code != 1 || !strings.Contains(errb.String(), c.msg) {
			t.Errorf("--against %s: exit %d, %q; want 1 and %q", c.file, code, errb.String(), c.msg)
		}
	}
}

// sMAPEOneBack is the naive forecast's sMAPE on weeks 57 to 60 of the window test's series.
func sMAPEOneBack() float64 {
	want := 0.0
	for k := 1; k <= 4; k++ {
		want += 200 * float64(k) / float64(56+k+56) / 4
	}
	return want
}

// lineAndJump writes one weekly series in the long layout into a new directory: 60 training
// weeks 1, 2, ..., 60 from 2026-01-05 and 4 test weeks of 1000.
func lineAndJump(t *testing.T) string {
	t.Helper()
	dir := t.TempDir()
	var train, test strings.Builder
	train.WriteString("series,date,value\n")
	test.WriteString("series,date,value\n")
	t0 := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	for i := range 60 {
		fmt.Fprintf(&train, "A,%s,%d\n", t0.AddDate(0, 0, 7*i).Format(time.RFC3339), i+1)
	}
	for i := range 4 {
		fmt.Fprintf(&test, "A,%s,%d\n", t0.AddDate(0, 0, 7*(60+i)).Format(time.RFC3339), 1000)
	}
	writeFile(t, dir, "train.csv", train.String())
	writeFile(t, dir, "test.csv", test.String())
	return dir
}
