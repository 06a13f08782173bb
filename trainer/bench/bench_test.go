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
	entries := sample(all, 300, 0) // 11 series over all categories
	refs, err := ReferenceR(context.Background(), entries, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	ours, _, err := Run(context.Background(), entries, Options{Families: []string{"Theta"}, Workers: 1})
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

// The lean candidates are InnerDesigns without any ARIMA fit: no design may name the ARIMA or
// ETS+ARIMA+Theta families or leave its zoo to "every registered family".
func TestLeanDesignsHaveNoARIMA(t *testing.T) {
	ds := LeanDesigns(Options{})
	if len(ds) != 3 {
		t.Fatalf("%d lean designs, want 3", len(ds))
	}
	for _, d := range ds {
		if len(d.Opts.Families) == 0 {
			t.Errorf("%s: zoo is every registered family", d.Name)
		}
		for _, f := range d.Opts.Families {
			if f == models.FamilyARIMA || f == models.FamilyETSARIMATheta {
				t.Errorf("%s: zoo has %s", d.Name, f)
			}
		}
	}
}

// The inner holdout chooses from training data only: with every test value NaN it must still
// score each design, and with --inner-every 3 it uses every 3rd eligible series of a category
// (series too short to lose h points are not eligible). Made-up yearly demand of Fenwick Lane
// Provisions' stores: store k sells 100 + k + t in year t, with a wobble.
func TestChooseByInnerHoldoutUsesTrainingOnly(t *testing.T) {
	var es []Entry
	for k := 0; k < 10; k++ {
		n := 20
		if k == 0 {
			n = 9 // 9 - 4 < 4 + 2 + 2: not eligible
		}
		tr := make([]float64, n)
		for i := range tr {
			tr[i] = 100 + float64(k+i) + float64((i*7+k)%3)
		}
		es = append(es, Entry{ID: fmt.Sprintf("store-%d", k), Category: "YEARLY", Frequency: 1, Horizon: 4,
			Start: time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC), Train: tr, Test: []float64{math.NaN(), math.NaN(), math.NaN(), math.NaN()}})
	}
	ds := []Design{
		{"naive", Options{Families: []string{models.FamilyNaive}, Workers: 1}},
		{"drift", Options{Families: []string{models.FamilyDrift}, Workers: 1}},
	}
	var out bytes.Buffer
	chosen, err := ChooseByInnerHoldout(context.Background(), es, ds, 3, ChooseOneSE, &out)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out.String(), "(last h training points, 3 series)") {
		t.Errorf("want 3 of the 9 eligible series in the inner holdout:\n%s", out.String())
	}
	if strings.Contains(out.String(), "NaN") {
		t.Errorf("an inner score is NaN (test data read?):\n%s", out.String())
	}
	if chosen["YEARLY"].Name != "drift" {
		t.Errorf("chose %q for trending series, want drift:\n%s", chosen["YEARLY"].Name, out.String())
	}
}

// CombinationDesigns keeps exactly the two fixed means of InnerDesigns.
func TestCombinationDesigns(t *testing.T) {
	ds := CombinationDesigns(Options{})
	if len(ds) != 2 || ds[0].Name != "ets-theta" || ds[1].Name != "ets-arima-theta" {
		t.Fatalf("designs %v, want ets-theta and ets-arima-theta (simplest first)", ds)
	}
	if f := ds[1].Opts.Families; len(f) != 1 || f[0] != models.FamilyETSARIMATheta {
		t.Errorf("ets-arima-theta zoo %v", f)
	}
}

// The one-standard-error rule (Hastie, Tibshirani & Friedman 2009, section 7.10) on hand
// numbers: the lowest mean is 1.00 with standard error 0.05, so every design up to 1.05 is
// within reach and the first of them (the simplest) wins; "lowest" takes 1.00 itself.
func TestChoiceRulePick(t *testing.T) {
	nan := math.NaN()
	for _, c := range []struct {
		rule       ChoiceRule
		means, ses []float64
		want       int
	}{
		{ChooseOneSE, []float64{1.04, 1.00, 0.98 + 0.03}, []float64{0.02, 0.05, 0.01}, 0},
		{ChooseOneSE, []float64{1.06, 1.04, 1.00}, []float64{0.02, 0.01, 0.05}, 1}, // 1.06 is past 1.05
		{ChooseOneSE, []float64{1.0500, 1.00}, []float64{0.2, 0.05}, 0},            // the bound is inclusive
		{ChooseOneSE, []float64{nan, 1.2, 1.1}, []float64{nan, 0.01, 0.2}, 1},      // a design without a score is skipped
		{ChooseOneSE, []float64{1.2, 1.1}, []float64{0.3, nan}, 1},                 // one series: no standard error, the lowest
		{ChooseLowest, []float64{1.04, 1.00, 1.01}, []float64{0.02, 0.05, 0.01}, 1},
		{ChooseOneSE, []float64{nan, nan}, []float64{nan, nan}, -1},
	} {
		if got := c.rule.pick(c.means, c.ses); got != c.want {
			t.Errorf("%s %v %v: picked %d, want %d", c.rule, c.means, c.ses, got, c.want)
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
