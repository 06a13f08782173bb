package bench

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/series"
)

func near(a, b, rel float64) bool { return math.Abs(a-b) <= rel*math.Max(1, math.Abs(b)) }

// Naive2 and OWA on a worked example computed independently in R 4.2.2 with forecast 8.20 by
// testdata/naive2_owa.R, which writes out the M4 organisers' Naive2 (their seasonality test and
// naive() on the series divided by stats::decompose's multiplicative indices) and the M4
// sMAPE, MASE and OWA formulas: two quarterly Fenwick Lane Provisions depots, A seasonal (the
// 90% test passes), B not (Naive2 is the naive forecast 52).
func TestNaive2AndOWAWorkedExample(t *testing.T) {
	a := []float64{120, 180, 150, 90, 130, 195, 160, 95, 140, 205, 172, 101, 150, 222, 181, 108}
	b := []float64{50, 52, 49, 53, 51, 50, 54, 52, 51, 53, 50, 52}
	wantA := []float64{155.33051200012682, 227.04808488262390, 185.66928366432333, 108}
	gotA, err := Naive2(a, 4, 4)
	if err != nil {
		t.Fatal(err)
	}
	gotB, err := Naive2(b, 4, 4)
	if err != nil {
		t.Fatal(err)
	}
	for k := range wantA {
		if !near(gotA[k], wantA[k], 1e-12) || gotB[k] != 52 {
			t.Errorf("step %d: Naive2 A %.17g B %.17g, want %.17g and 52 (R)", k+1, gotA[k], gotB[k], wantA[k])
		}
	}
	q := func(id string, train, test []float64) Entry {
		return Entry{ID: id, Category: "QUARTERLY", Frequency: 4, Horizon: 4, Start: time.Date(2022, 1, 1, 0, 0, 0, 0, time.UTC), Train: train, Test: test}
	}
	es := []Entry{q("depot-a", a, []float64{158, 236, 190, 112}), q("depot-b", b, []float64{53, 51, 52, 54})}
	n2, err := Naive2Report(es)
	if err != nil {
		t.Fatal(err)
	}
	method := newReport("method")
	method.add(es[0], []float64{155, 230, 195, 110})
	method.add(es[1], []float64{52, 52, 52, 52})
	// R: Naive2 sMAPE 2.8781060883789271, 1.9050235958094541; MASE 0.49468064759320551, 0.5.
	if s, m := n2.All.MeanSMAPE(), n2.All.MeanMASE(); !near(s, (2.8781060883789271+1.9050235958094541)/2, 1e-12) ||
		!near(m, (0.49468064759320551+0.5)/2, 1e-12) {
		t.Errorf("Naive2 mean sMAPE %.17g MASE %.17g", s, m)
	}
	const wantOWA = 0.88224413267955815 // R
	if got := OWA(method.All, n2.All); !near(got, wantOWA, 1e-12) {
		t.Errorf("OWA %.17g, want %.17g (R)", got, wantOWA)
	}
	if got := owaOf(method, n2, "QUARTERLY"); !near(got, wantOWA, 1e-12) {
		t.Errorf("OWA of the category %.17g, want %.17g", got, wantOWA)
	}
	if got := OWA(n2.All, n2.All); got != 1 {
		t.Errorf("OWA of Naive2 itself %v, want 1", got)
	}
	part := newReport("part")
	part.add(es[0], []float64{155, 230, 195, 110})
	if got := OWA(part.All, n2.All); !math.IsNaN(got) {
		t.Errorf("OWA over a different set of series %v, want NaN", got)
	}
}

// The organisers' code takes autocorrelations from R's acf with its default lag.max,
// ⌊10·log10 n⌋, so an hourly series (m = 24) of 240 points (lag.max 23) is never seasonal and
// one of 264 points (lag.max 24) can be. Forecasts from testdata/naive2_owa.R (R 4.2.2).
func TestNaive2ACFLagMax(t *testing.T) {
	hourly := func(n int) []float64 {
		y := make([]float64, n)
		for i := range y {
			y[i] = 100 + 30*math.Sin(2*math.Pi*float64(i)/24) + float64(i%5)
		}
		return y
	}
	for _, c := range []struct {
		n    int
		want []float64
	}{
		{240, []float64{96.235428646924262, 96.235428646924262, 96.235428646924262}},
		{264, []float64{103.08242947412695, 110.92943030132972, 118.24167098994059}},
	} {
		got, err := Naive2(hourly(c.n), 24, 3)
		if err != nil {
			t.Fatal(err)
		}
		for k := range c.want {
			if !near(got[k], c.want[k], 1e-10) {
				t.Errorf("n=%d step %d: %.17g, want %.17g (R)", c.n, k+1, got[k], c.want[k])
			}
		}
	}
	if acfDefaultLagMax(240) != 23 || acfDefaultLagMax(264) != 24 || acfDefaultLagMax(5) != 4 {
		t.Errorf("lag.max %d %d %d, want 23 24 4", acfDefaultLagMax(240), acfDefaultLagMax(264), acfDefaultLagMax(5))
	}
}

var summaryRE = regexp.MustCompile(`^all: smape=[0-9]+\.[0-9]{3} mase=[0-9]+\.[0-9]{4} owa=[0-9]+\.[0-9]{3} cpu_ms_per_series=[0-9]+\.[0-9]{2} series=[0-9]+$`)

// The bench ends with exactly one line "all: smape=S mase=M owa=O cpu_ms_per_series=C
// series=N" (issue 16), here on a long-layout directory of three made-up hourly Fenwick Lane
// Provisions depot series with a daily cycle, forecast by Naive; the owa field is then the
// naive forecast's against Naive2, > 1 on a daily cycle.
func TestMainSummaryLineLong(t *testing.T) {
	dir := t.TempDir()
	var train, test strings.Builder
	train.WriteString("series,date,value\n")
	test.WriteString("series,date,value\n")
	start := time.Date(2026, 11, 1, 0, 0, 0, 0, time.UTC)
	for d := 0; d < 3; d++ {
		for i := 0; i < 24*14+48; i++ {
			v := 50 + 10*float64(d) + 20*math.Sin(2*math.Pi*float64(i)/24) + float64((i*7+d)%4)
			w := &train
			if i >= 24*14 {
				w = &test
			}
			fmt.Fprintf(w, "depot-%d,%s,%g\n", d, start.Add(time.Duration(i)*time.Hour).Format(time.RFC3339), v)
		}
	}
	writeFile(t, dir, "train.csv", train.String())
	writeFile(t, dir, "test.csv", test.String())
	var out, errb bytes.Buffer
	if code := Main([]string{"--data", dir, "--frequency", "Hourly", "--zoo", "Naive", "--design", "fixed", "--workers", "1"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	last := lines[len(lines)-1]
	if !summaryRE.MatchString(last) || !strings.HasSuffix(last, " series=3") {
		t.Errorf("last line %q does not match %s", last, summaryRE)
	}
	if strings.Count(out.String(), "all: ") != 1 {
		t.Errorf("want exactly one summary line:\n%s", out.String())
	}
	var owa float64
	if _, err := fmt.Sscanf(last[strings.Index(last, "owa="):], "owa=%g", &owa); err != nil || !(owa > 1) {
		t.Errorf("owa %v (%v): the naive forecast of a daily cycle should be worse than Naive2", owa, err)
	}
	if !strings.Contains(out.String(), "  Hourly          3 ") {
		t.Errorf("want a table row for the frequency Hourly:\n%s", out.String())
	}
}

func writeFile(t *testing.T, dir, name, body string) {
	t.Helper()
	if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o600); err != nil {
		t.Fatal(err)
	}
}

// EnvM4HourlyDevDir names the environment variable the tests read the M4 hourly dev half's
// directory from (default ../shared/datasets/m4-hourly-dev beside the repository root).
const EnvM4HourlyDevDir = "ALMANAC_M4_HOURLY_DEV_DIR"

func m4HourlyDevDir(t *testing.T) string {
	root, err := repoRoot()
	if err != nil {
		t.Skip(err)
	}
	d := filepath.Join(root, "..", "shared", "datasets", "m4-hourly-dev")
	if v := os.Getenv(EnvM4HourlyDevDir); v != "" {
		d = v
	}
	if _, err := os.Stat(filepath.Join(d, "train.csv")); err != nil {
		t.Skipf("M4 hourly dev half not found at %s (set %s): %v", d, EnvM4HourlyDevDir, err)
	}
	return d
}

// On the M4 hourly dev half (207 series, h = 48, m = 24): our SeasonalNaive through the bench
// equals R forecast 8.20's snaive and our Naive2 equals the organisers' Naive2 written out in R
// (rScript's naive2: R 4.2.2 stats::acf and stats::decompose, forecast::naive), series by
// series and step by step. Skipped without Rscript + forecast or the data.
func TestM4HourlyDevAgainstR(t *testing.T) {
	if testing.Short() {
		t.Skip("runs R")
	}
	d := m4HourlyDevDir(t)
	if !HaveR(context.Background()) {
		t.Skip("Rscript with the forecast package not installed")
	}
	entries, err := LoadDir(d, series.Hourly)
	if err != nil {
		t.Fatal(err)
	}
	if len(entries) != 207 || entries[0].Horizon != 48 || entries[0].Frequency != 24 {
		t.Fatalf("%d series, horizon %d, m %d; want 207, 48, 24 (dataset README)", len(entries), entries[0].Horizon, entries[0].Frequency)
	}
	refs, err := ReferenceR(context.Background(), entries, []string{"snaive", "naive2"}, &bytes.Buffer{})
	if err != nil {
		t.Fatal(err)
	}
	_, ours, err := Run(context.Background(), entries, Options{Families: []string{"SeasonalNaive"}, Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	seasonal := 0
	for i, e := range entries {
		n2, err := Naive2(e.Train, e.Frequency, e.Horizon)
		if err != nil {
			t.Fatal(err)
		}
		if n2[0] != e.Train[len(e.Train)-1] {
			seasonal++
		}
		for k := 0; k < e.Horizon; k++ {
			if sn, r := ours[i].Mean[k], refs[0].Forecasts[i][k]; !near(sn, r, 1e-12) {
				t.Fatalf("%s step %d: SeasonalNaive %.17g, R snaive %.17g", e.ID, k+1, sn, r)
			}
			if r := refs[1].Forecasts[i][k]; !near(n2[k], r, 1e-9) {
				t.Fatalf("%s step %d: Naive2 %.17g, R %.17g", e.ID, k+1, n2[k], r)
			}
		}
	}
	if seasonal < 100 {
		t.Errorf("Naive2 seasonally adjusted only %d of 207 hourly series; the check would not exercise the decomposition", seasonal)
	}
}

// With two series the bootstrap has three outcomes (both draws the first series, one of each,
// both the second), so with 1000 resamples the 90% percentile interval runs exactly from the
// lower to the higher of the two one-series OWAs; with identical series it is a point; reports
// of different series give no interval.
func TestOWAInterval(t *testing.T) {
	ours := &Report{Scores: []SeriesScore{{ID: "a", SMAPE: 10, MASE: 1}, {ID: "b", SMAPE: 30, MASE: math.NaN()}}}
	n2 := &Report{Scores: []SeriesScore{{ID: "b", SMAPE: 20, MASE: math.NaN()}, {ID: "a", SMAPE: 20, MASE: 2}}}
	// Series a alone: (10/20 + 1/2)/2 = 0.5. Series b alone: its MASE is undefined, so that draw
	// has no OWA and is left out; draw {a, b}: ((10+30)/(20+20) + 1/2)/2 = 0.75.
	lo, hi, ok := OWAInterval(ours, n2, 0.9, 1000, 7)
	if !ok || lo != 0.5 || hi != 0.75 {
		t.Errorf("interval %v to %v (ok %v), want 0.5 to 0.75", lo, hi, ok)
	}
	ours.Scores[1].MASE, n2.Scores[0].MASE = 3, 2
	// b alone: (30/20 + 3/2)/2 = 1.5; a alone 0.5.
	if lo, hi, ok = OWAInterval(ours, n2, 0.9, 1000, 7); !ok || lo != 0.5 || hi != 1.5 {
		t.Errorf("interval %v to %v (ok %v), want 0.5 to 1.5", lo, hi, ok)
	}
	same := &Report{Scores: []SeriesScore{{ID: "a", SMAPE: 10, MASE: 1}, {ID: "b", SMAPE: 10, MASE: 1}}}
	if lo, hi, ok = OWAInterval(same, n2, 0.9, 200, 1); !ok || lo != hi {
		t.Errorf("identical series: %v to %v", lo, hi)
	}
	other := &Report{Scores: []SeriesScore{{ID: "a", SMAPE: 10, MASE: 1}, {ID: "c", SMAPE: 10, MASE: 1}}}
	if _, _, ok = OWAInterval(other, n2, 0.9, 200, 1); ok {
		t.Error("different series: want no interval")
	}
}

// Two series again: Naive2 scores 20 sMAPE and MASE 2 on both. Report r scores a at 10 / 1
// and b at 30 / 3, report other 20 / 2 on both (OWA 1 on every draw). Whole sample: OWA(r) =
// ((10+30)/40 + (1+3)/4)/2 = 1, difference 0. Draw {a, a}: 0.5 - 1 = -0.5; {a, b}: 0;
// {b, b}: 1.5 - 1 = +0.5, with chances 1/4, 1/2, 1/4, so with 1000 resamples the 90% interval
// runs from -0.5 to +0.5 and r wins about a quarter of the draws (hand-computed).
func TestPairedOWADifference(t *testing.T) {
	n2 := &Report{Scores: []SeriesScore{{ID: "a", SMAPE: 20, MASE: 2}, {ID: "b", SMAPE: 20, MASE: 2}}}
	r := &Report{Scores: []SeriesScore{{ID: "a", SMAPE: 10, MASE: 1}, {ID: "b", SMAPE: 30, MASE: 3}}}
	other := &Report{Scores: []SeriesScore{{ID: "b", SMAPE: 20, MASE: 2}, {ID: "a", SMAPE: 20, MASE: 2}}}
	diff, lo, hi, gain, ok := PairedOWADifference(r, other, n2, 0.9, 1000, 3)
	if !ok || diff != 0 || lo != -0.5 || hi != 0.5 || math.Abs(gain-0.25) > 0.05 {
		t.Errorf("diff %v, interval %v to %v, gain %v (ok %v); want 0, -0.5 to 0.5, about 0.25", diff, lo, hi, gain, ok)
	}
	// A report against itself: every draw's difference is 0.
	if diff, lo, hi, gain, ok = PairedOWADifference(r, r, n2, 0.9, 200, 1); !ok || diff != 0 || lo != 0 || hi != 0 || gain != 0 {
		t.Errorf("r against r: %v, %v to %v, gain %v (ok %v)", diff, lo, hi, gain, ok)
	}
	// Other series, or a MASE defined in one report and not in the other: no comparison.
	for name, o := range map[string]*Report{
		"other series": {Scores: []SeriesScore{{ID: "a", SMAPE: 1, MASE: 1}, {ID: "c", SMAPE: 1, MASE: 1}}},
		"one series":   {Scores: []SeriesScore{{ID: "a", SMAPE: 1, MASE: 1}}},
		"twice a":      {Scores: []SeriesScore{{ID: "a", SMAPE: 1, MASE: 1}, {ID: "a", SMAPE: 1, MASE: 1}}},
		"NaN MASE":     {Scores: []SeriesScore{{ID: "a", SMAPE: 1, MASE: math.NaN()}, {ID: "b", SMAPE: 1, MASE: 1}}},
	} {
		if _, _, _, _, ok := PairedOWADifference(r, o, n2, 0.9, 200, 1); ok {
			t.Errorf("%s: want no comparison", name)
		}
	}
}

// TestZeroActualsNote: the bench warns when test actuals are zero, with the counts, and the
// claim it makes holds for backtest.SymmetricMAPE: a zero actual costs 200 against a forecast
// of 1e-100 and 0 against an exact 0 (the M4 formula, 2|y − f| / (|y| + |f|) in percent).
func TestZeroActualsNote(t *testing.T) {
	entries := []Entry{{ID: "a", Test: []float64{3, 0, 0}}, {ID: "b", Test: []float64{1, 2}}, {ID: "c", Test: []float64{0}}}
	want := "note: 2 of 3 series have zero actuals in their test data (3 of 6 points): sMAPE counts each such point as 200% unless the forecast is exactly 0, so sMAPE and OWA rank those series by exact zeros; compare MASE there (Hyndman & Koehler 2006)"
	if got := zeroActualsNote(entries); got != want {
		t.Errorf("note\n got %s\nwant %s", got, want)
	}
	if got := zeroActualsNote(entries[1:2]); got != "" {
		t.Errorf("no zero actuals: %q", got)
	}
	if tiny, exact := backtest.SymmetricMAPE([]float64{0}, []float64{1e-100}), backtest.SymmetricMAPE([]float64{0}, []float64{0}); math.Abs(tiny-200) > 1e-9 || exact != 0 {
		t.Errorf("sMAPE of a zero actual: %v against 1e-100, %v against 0; want 200 and 0", tiny, exact)
	}
}

// TestSideBySideCPURatio: the ratio line gives ours/R's CPU and its inverse, and no ratio for a
// reference whose CPU reads 0 (ReferenceR: not above R's start-up run), where a division would
// print +Inf or a negative figure.
func TestSideBySideCPURatio(t *testing.T) {
	rep := func(name string, cpu float64) *Report {
		r := newReport(name)
		r.add(Entry{ID: "s", Category: "Weekly", Frequency: 1, Horizon: 2, Train: []float64{1, 2, 3, 4}, Test: []float64{5, 6}}, []float64{5, 5})
		r.All.CPUMilliseconds = cpu
		return r
	}
	ours := rep("almanac", 4)
	var b bytes.Buffer
	writeSideBySide(&b, ours, []*Report{rep("R forecast::ets", 8), rep("R forecast::thetaf", 0)}, ours)
	out := b.String()
	for _, want := range []string{
		"ratio ours/R forecast::ets: sMAPE 1.0000 MASE 1.0000 cpu 0.5000 (R 2x ours)\n",
		"ratio ours/R forecast::thetaf: sMAPE 1.0000 MASE 1.0000 cpu n/a (R's CPU is within its start-up's)\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("missing %q in\n%s", want, out)
		}
	}
}
