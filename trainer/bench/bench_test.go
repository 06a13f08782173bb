package bench

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
)

func m3Dir(t *testing.T) string {
	d := defaultM3Dir()
	if _, err := os.Stat(filepath.Join(d, "published_forecasts.csv")); err != nil {
		t.Skipf("M3 data not found at %s (set %s): %v", d, EnvM3Dir, err)
	}
	return d
}

// Scoring the submitted THETA forecasts (Makridakis & Hibon 2000; data from the Mcomp R
// package's M3Forecast) with the M3 sMAPE and in-sample MASE gives overall 12.76 and 1.395.
// The paper's 13.01 uses the competition's own sMAPE variant. The figures are those the issue
// gives, which this scoring reproduces; NAIVE2 on non-seasonal YEARLY equals the naive
// forecast, a second check of the same path.
func TestScorePublishedTheta(t *testing.T) {
	d := m3Dir(t)
	entries, err := Load(d, 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(entries) != 3003 {
		t.Fatalf("%d series, want 3003", len(entries))
	}
	reps, err := ScorePublished(d, entries)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range reps {
		if r.Method != "THETA" {
			continue
		}
		if r.All.N != 3003 || math.Abs(r.All.MeanSMAPE()-12.76) > 0.005 || math.Abs(r.All.MeanMASE()-1.395) > 0.0005 {
			t.Errorf("THETA: n=%d sMAPE %.4f MASE %.4f, want 3003, 12.76, 1.395", r.All.N, r.All.MeanSMAPE(), r.All.MeanMASE())
		}
		return
	}
	t.Fatal("THETA not in published_forecasts.csv")
}

func TestMainSummaryLine(t *testing.T) {
	d := m3Dir(t)
	var out, errb bytes.Buffer
	if code := Main([]string{"--data", d, "--limit", "30", "--zoo", "Naive", "--design", "fixed", "--json"}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	last := lines[len(lines)-1]
	if !strings.HasPrefix(last, "all: smape=") || !strings.HasSuffix(last, "series=30") {
		t.Errorf("last line %q", last)
	}
	if strings.Count(out.String(), "all: ") != 1 {
		t.Errorf("want exactly one summary line:\n%s", out.String())
	}
}

// Bad input names the file, line and field.
func TestLoadErrors(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	write("series.csv", "series,category,frequency,horizon,n_train,start\nA1,YEARLY,1,2,3,2001-1\n")
	write("train.csv", "series,category,frequency,index,value\nA1,YEARLY,1,1,5\nA1,YEARLY,1,2,x\n")
	write("test.csv", "series,category,frequency,index,value\n")
	_, err := Load(dir, 0)
	if err == nil || !strings.Contains(err.Error(), "train.csv:3: field value") {
		t.Errorf("err %v, want train.csv:3: field value", err)
	}
	var out, errb bytes.Buffer
	if code := Main([]string{"--data", dir}, &out, &errb); code != 1 || !strings.Contains(errb.String(), "train.csv:3") {
		t.Errorf("Main exit %d stderr %q", code, errb.String())
	}
}

// R forecast 8.20's thetaf (Hyndman & Billah 2003 form) and our Theta give the same forecasts,
// so --reference-r must score them alike on the same series; R's ets must come back for every
// series with a CPU time above zero. Skipped without Rscript + forecast or the M3 data.
func TestReferenceRThetaMatches(t *testing.T) {
	entries := m3SampleForR(t)
	refs, err := ReferenceR(context.Background(), entries, nil, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	ours, _, err := Run(context.Background(), entries, Options{Families: []string{"Theta"}, Workers: 1, Mode: design.Fixed})
	if err != nil {
		t.Fatal(err)
	}
	if len(refs) != 2 || refs[1].Method != "R forecast::thetaf" {
		t.Fatalf("references %v", refs)
	}
	th := refs[1].All
	if th.N != len(entries) || math.Abs(th.MeanSMAPE()-ours.All.MeanSMAPE()) > 1e-3 || math.Abs(th.MeanMASE()-ours.All.MeanMASE()) > 1e-4 {
		t.Errorf("thetaf %.4f/%.5f, our Theta %.4f/%.5f over %d series", th.MeanSMAPE(), th.MeanMASE(), ours.All.MeanSMAPE(), ours.All.MeanMASE(), th.N)
	}
	if e := refs[0].All; e.N != len(entries) || !(e.CPUMilliseconds > 0) {
		t.Errorf("ets: n=%d cpu %v", e.N, e.CPUMilliseconds)
	}
}

// The default design (design.Forecast in Auto) chooses from training data only: with every
// test value NaN each candidate still gets an inner score, and the trending series get the
// drift member. Made-up yearly demand of Fenwick Lane Provisions' stores: store k sells
// 100 + k + t in year t, with a wobble; store 0 has 9 years, too few to lose h = 4 points
// (9 < 2h + 2m + 2 = 12), so only the 24 others are in the inner holdout.
func TestAutoDesignUsesTrainingOnly(t *testing.T) {
	var es []Entry
	for k := 0; k < 25; k++ {
		n := 20
		if k == 0 {
			n = 9
		}
		tr := make([]float64, n)
		for i := range tr {
			tr[i] = 100 + float64(k+i) + float64((i*7+k)%3)
		}
		es = append(es, Entry{ID: fmt.Sprintf("store-%d", k), Category: "YEARLY", Frequency: 1, Horizon: 4,
			Start: time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC), Train: tr, Test: []float64{math.NaN(), math.NaN(), math.NaN(), math.NaN()}})
	}
	var out bytes.Buffer
	_, results, err := Run(context.Background(), es, Options{Families: []string{models.FamilyNaive, models.FamilyDrift}, Workers: 1, Log: &out,
		Combinations: []design.Combination{{Name: "naive", Families: []string{models.FamilyNaive}}, {Name: "drift", Families: []string{models.FamilyDrift}}}})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out.String(), "24 inner-holdout series") || strings.Contains(out.String(), "NaN") {
		t.Errorf("want 24 inner series and no NaN score (test data read?):\n%s", out.String())
	}
	for _, r := range results {
		if r.Chosen != models.FamilyDrift {
			t.Errorf("%s: chose %s for a trending series, want Drift:\n%s", r.Key, r.Chosen, out.String())
		}
	}
}

// MASEStdErr by hand: MASE values 1, 2, 3, 6 have mean 3, sample variance
// ((4 + 1 + 0 + 9) / 3) = 14/3, standard error sqrt(14/3 / 4) = 1.0801; a NaN MASE is not counted.
func TestTallyMASEStdErr(t *testing.T) {
	var tl Tally
	for _, m := range []float64{1, 2, math.NaN(), 3, 6} {
		tl.add(10, m)
	}
	if got, want := tl.MASEStdErr(), math.Sqrt(14.0/3/4); math.Abs(got-want) > 1e-12 {
		t.Errorf("standard error %v, want %v", got, want)
	}
	var one Tally
	one.add(1, 2)
	if !math.IsNaN(one.MASEStdErr()) {
		t.Errorf("one series: standard error %v, want NaN", one.MASEStdErr())
	}
}

// --design takes the API's spelling of spec.selection.design in any case, so a value copied
// from a portfolio file works on the command line.
func TestParseModeTakesTheAPISpelling(t *testing.T) {
	for in, want := range map[string]design.Mode{"Auto": design.Auto, "PerSeries": design.PerSeries,
		"Fixed": design.Fixed, "perSeries": design.PerSeries, "fixed": design.Fixed, "AUTO": design.Auto} {
		if got := parseMode(in); got != want {
			t.Errorf("parseMode(%q) = %q, want %q", in, got, want)
		}
	}
	if m := parseMode("Best"); m.Valid() {
		t.Errorf("parseMode(%q) = %q is valid, want refused", "Best", m)
	}
}

// m3SampleForR returns every 300th M3 series (11 over all categories) for the tests that run
// R, skipping under -short, without the M3 data, or without R's forecast package.
func m3SampleForR(t *testing.T) []Entry {
	t.Helper()
	if testing.Short() {
		t.Skip("runs R")
	}
	d := m3Dir(t)
	if !HaveR(context.Background()) {
		t.Skip("Rscript with the forecast package not installed")
	}
	all, err := Load(d, 0)
	if err != nil {
		t.Fatal(err)
	}
	return sample(all, 300, 0)
}
