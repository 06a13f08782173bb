package design

import (
	"context"
	"fmt"
	"math"
	"reflect"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// Test-only families, registered under names no real family uses. Each fit adds its cost to
// work, which the tests' CPU clock reads, so costs are exact and the budget test cannot
// depend on the machine.
const (
	famLast   = "design.Last"   // repeats the last value; cost 1
	famLine   = "design.Line"   // straight line through the last two values; cost 1
	famCostly = "design.Costly" // the line, at cost 100
)

var work atomic.Int64

// fakeCPU is the tests' clock: one millisecond per unit of work.
func fakeCPU() time.Duration { return time.Duration(work.Load()) * time.Millisecond }

func init() {
	reg := func(fam string, cost int64, line bool) {
		models.Register(fam, func(models.Spec) (models.Model, error) { return fake{fam, cost, line}, nil })
	}
	reg(famLast, 1, false)
	reg(famLine, 1, true)
	reg(famCostly, 100, true)
}

type fake struct {
	fam  string
	cost int64
	line bool
}

func (f fake) Family() string    { return f.fam }
func (f fake) MinLength(int) int { return 2 }
func (f fake) Fit(y []float64, m int) (models.Fitted, error) {
	work.Add(f.cost)
	last, slope := y[len(y)-1], 0.0
	if f.line {
		slope = y[len(y)-1] - y[len(y)-2]
	}
	return fitted{f.fam, last, slope, len(y)}, nil
}

type fitted struct {
	name        string
	last, slope float64
	n           int
}

func (f fitted) Name() string               { return f.name }
func (f fitted) Params() map[string]float64 { return nil }
func (f fitted) InSample() []float64        { return make([]float64, f.n) }
func (f fitted) Forecast(h int, levels []float64) models.Forecast {
	out := models.Forecast{Mean: make([]float64, h), Levels: levels}
	for k := range out.Mean {
		out.Mean[k] = f.last + f.slope*float64(k+1)
	}
	return out
}

func specs(fams ...string) []models.Spec {
	out := make([]models.Spec, len(fams))
	for i, f := range fams {
		out[i] = models.Spec{Family: f}
	}
	return out
}

func names(cs []Candidate) []string {
	out := make([]string, len(cs))
	for i, c := range cs {
		out[i] = c.Name
	}
	return out
}

func TestCandidatesFromTheZoo(t *testing.T) {
	full := specs(models.FamilyNaive, models.FamilyTheta, models.FamilyETS, models.FamilyARIMA)
	cs := Candidates(selection.Config{Horizon: 3, Zoo: full}, Combinations)
	if got, want := names(cs), []string{"ets-theta", "ets-arima-theta", "top3-mean", "top3-median", NamePerSeries}; !reflect.DeepEqual(got, want) {
		t.Fatalf("candidates %v, want %v", got, want)
	}
	et := cs[0].Config
	if len(et.Zoo) != 2 || et.Zoo[0].Family != models.FamilyETS || et.Zoo[1].Family != models.FamilyTheta ||
		et.CombineTop != 2 || et.CombineMethod != selection.CombineMean || et.CombineMargin != alwaysCombine || et.Horizon != 3 {
		t.Errorf("ets-theta config %+v", et)
	}
	if c := cs[4].Config; c.CombineTop != 0 || len(c.Zoo) != 4 {
		t.Errorf("per-series config %+v", c)
	}
	if c := cs[3].Config; c.CombineTop != 3 || c.CombineMethod != selection.CombineMedian {
		t.Errorf("top3-median config %+v", c)
	}

	// A declared combination is a candidate of its own; fixed combinations need every family.
	decl := selection.Config{Horizon: 3, Zoo: specs(models.FamilyNaive, models.FamilyTheta, models.FamilyETS), CombineTop: 2, CombineMargin: 0.1}
	if got, want := names(Candidates(decl, Combinations)), []string{"ets-theta", NameDeclared, NamePerSeries}; !reflect.DeepEqual(got, want) {
		t.Errorf("declared: candidates %v, want %v", got, want)
	}
	// A single-family entry equal to the per-series design of a one-member zoo is not repeated.
	one := selection.Config{Horizon: 3, Zoo: specs(famLast)}
	if got := names(Candidates(one, []Combination{{Name: "last", Families: []string{famLast}}})); !reflect.DeepEqual(got, []string{"last"}) {
		t.Errorf("one member: candidates %v", got)
	}
	// With DOTM in the zoo the mean of ETS, Theta and DOTM comes first, and ets-theta, whose
	// families are all in it, is left out (it stands in for zoos without DOTM).
	withDOTM := specs(models.FamilyNaive, models.FamilyTheta, models.FamilyDOTM, models.FamilyETS)
	if got, want := names(Candidates(selection.Config{Horizon: 3, Zoo: withDOTM}, Combinations)), []string{"ets-theta-dotm", "top3-mean", "top3-median", NamePerSeries}; !reflect.DeepEqual(got, want) {
		t.Errorf("with DOTM: candidates %v, want %v", got, want)
	}
	if c := Candidates(selection.Config{Horizon: 3, Zoo: withDOTM}, Combinations)[0].Config; len(c.Zoo) != 3 || c.CombineTop != 3 || c.CombineMethod != selection.CombineMean {
		t.Errorf("ets-theta-dotm config %+v", c)
	}
	sub := []Combination{{Name: "ab", Families: []string{famLast, famLine}}, {Name: "a", Families: []string{famLast}}, {Name: "b-first", Families: []string{famLine}}}
	if got := names(Candidates(selection.Config{Horizon: 3, Zoo: specs(famLast)}, sub)); !reflect.DeepEqual(got, []string{"a"}) {
		t.Errorf("subset without the larger entry's members: candidates %v, want [a]", got)
	}
	if got := names(Candidates(selection.Config{Horizon: 3, Zoo: specs(famLast, famLine)}, sub)); !reflect.DeepEqual(got, []string{"ab", NamePerSeries}) {
		t.Errorf("subsets of a kept entry: candidates %v, want [ab per-series]", got)
	}
	// The zoo's own member settings are kept.
	named := []models.Spec{{Family: models.FamilyETS, Name: "ets-additive", ETS: &models.ETSOptions{Errors: []string{"A"}}}, {Family: models.FamilyTheta}}
	if c := Candidates(selection.Config{Horizon: 1, Zoo: named}, Combinations)[0]; c.Config.Zoo[0].Name != "ets-additive" {
		t.Errorf("member settings lost: %+v", c.Config.Zoo)
	}
}

func TestForMode(t *testing.T) {
	base := selection.Config{Horizon: 2, Zoo: specs(famLast, famLine), CombineTop: 2, CombineMargin: 0.5}
	if c := ForMode(Fixed, base); c.Name != NameDeclared || c.Config.CombineTop != 2 || c.Config.CombineMargin != 0.5 {
		t.Errorf("fixed: %+v", c)
	}
	if c := ForMode(PerSeries, base); c.Name != NamePerSeries || c.Config.CombineTop != 0 || c.Config.CombineMargin != 0 {
		t.Errorf("per-series: %+v", c)
	}
}

// Hand-worked: lowest mean 1.00 with standard error 0.10, so the limit is 1.10; the first
// candidate within it is the second (1.05). Lowest takes the third.
func TestRulePick(t *testing.T) {
	nan := math.NaN()
	means := []float64{1.20, 1.05, 1.00, nan}
	ses := []float64{0.05, 0.2, 0.10, nan}
	if got := OneSE.Pick(means, ses); got != 1 {
		t.Errorf("one-se picked %d, want 1", got)
	}
	if got := Lowest.Pick(means, ses); got != 2 {
		t.Errorf("lowest picked %d, want 2", got)
	}
	if got := OneSE.Pick([]float64{nan, 2, 2}, []float64{nan, nan, nan}); got != 1 {
		t.Errorf("tie without standard error: picked %d, want 1", got)
	}
	if got := OneSE.Pick([]float64{nan}, []float64{nan}); got != -1 {
		t.Errorf("no score: picked %d, want -1", got)
	}
}

// Hand-worked log ratios to the first candidate. Candidate 1 is 10% better on every series:
// log ratio log(0.9) with standard error 0, so it wins. Candidate 2 wins the arithmetic mean
// through one series (50 against 10) but is 20% worse on the other four: log ratios
// 4 x log(1.2) = 0.1823 and log(0.2) = -1.6094, mean -0.1760, sample sd 0.8013, standard error
// 0.3584, so the limit is 0.1824 and the first candidate (0) is within it. The mean-of-MASE
// rules take candidate 2 (10.8 against 2.96).
func TestPickRelative(t *testing.T) {
	nan := math.NaN()
	c0 := []float64{1, 1, 1, 1, 50}
	c1 := []float64{0.9, 0.9, 0.9, 0.9, 45}
	c2 := []float64{1.2, 1.2, 1.2, 1.2, 10}
	if got := PickRelative([][]float64{c0, c1}); got != 1 {
		t.Errorf("consistently better: picked %d, want 1", got)
	}
	if got := PickRelative([][]float64{c0, c2}); got != 0 {
		t.Errorf("better on one series only: picked %d, want 0", got)
	}
	means := []float64{10.8, 2.96}
	if got := Lowest.Pick(means, []float64{nan, nan}); got != 1 {
		t.Errorf("lowest mean MASE picked %d, want 1", got)
	}
	// A candidate not scored (NaN) is not eligible; a series with a zero score has no ratio.
	if got := PickRelative([][]float64{c0, {nan}, c1}); got != 2 {
		t.Errorf("with an unscored candidate: picked %d, want 2", got)
	}
	if got := PickRelative([][]float64{{0, 1, 1}, {1, 2, 2}}); got != 0 {
		t.Errorf("zero score: picked %d, want 0 (ratios 2 and 2 on the rows left)", got)
	}
	if got := PickRelative([][]float64{{0}, {1}}); got != 0 {
		t.Errorf("no usable row: picked %d, want 0", got)
	}
	if got := PickRelative([][]float64{{nan}}); got != -1 {
		t.Errorf("nothing scored: picked %d, want -1", got)
	}
}

// Sample standard deviation of {1, 2, 3} is 1, so the standard error is 1/sqrt(3).
func TestMeanSE(t *testing.T) {
	m, se := meanSE([]float64{1, 2, 3})
	if m != 2 || math.Abs(se-1/math.Sqrt(3)) > 1e-15 {
		t.Errorf("meanSE = %v, %v", m, se)
	}
	if _, se := meanSE([]float64{4}); !math.IsNaN(se) {
		t.Errorf("one value: se %v, want NaN", se)
	}
}

// T = 2h + 2m + 2: h = 6, m = 1 gives 16; h = 18, m = 12 gives 62.
func TestBandOf(t *testing.T) {
	for _, c := range []struct {
		n, h, m int
		want    string
	}{{15, 6, 1, BandShort}, {16, 6, 1, BandMedium}, {31, 6, 1, BandMedium}, {32, 6, 1, BandLong},
		{61, 18, 12, BandShort}, {62, 18, 12, BandMedium}, {124, 18, 12, BandLong}, {10, 1, 0, BandMedium}} {
		if got := BandOf(c.n, c.h, c.m); got != c.want {
			t.Errorf("BandOf(%d, %d, %d) = %s, want %s", c.n, c.h, c.m, got, c.want)
		}
	}
}

func start() time.Time { return time.Date(2001, 1, 1, 0, 0, 0, 0, time.UTC) }

// line is a rising straight line: smooth demand (CV² of the values far below 0.49), which
// the line member forecasts exactly and the last-value member does not.
func line(key string, n int, slope float64) series.Series {
	y := make([]float64, n)
	for i := range y {
		y[i] = 1000 + slope*float64(i)
	}
	return series.Series{Key: key, Start: start(), Freq: series.Yearly, Values: y}
}

// lines30 is 30 straight lines of 20 points with slopes 1 to 30: the cost tests' portfolio.
func lines30() []series.Series {
	var in []series.Series
	for i := 0; i < 30; i++ {
		in = append(in, line(fmt.Sprintf("line%d", i), 20, float64(i+1)))
	}
	return in
}

// step alternates 1, 3 in its first half and stays at 20 in its second: erratic (CV² of the
// values above 0.49). Its fourth-last value is 19, so the inner training data (all but the
// last 2 points) ends 20, 19, 20: the last-value member forecasts the inner test (20, 20)
// exactly, the line member extrapolates the rise to 21, 22.
func step(key string, n int) series.Series {
	y := make([]float64, n)
	for i := range y {
		y[i] = 1
		if i%2 == 1 {
			y[i] = 3
		}
		if i >= n/2 {
			y[i] = 20
		}
	}
	y[n-4] = 19 // the inner training data ends with a rise the line member extrapolates
	return series.Series{Key: key, Start: start(), Freq: series.Yearly, Values: y}
}

var combos = []Combination{{Name: "last", Families: []string{famLast}}, {Name: "line", Families: []string{famLine}}}

func run1(t *testing.T, in []series.Series, o Options) (*Outcome, []Result) {
	t.Helper()
	got := make([]Result, len(in))
	seen := make([]bool, len(in))
	out, err := Forecast(context.Background(), in, o, func(i int, r Result, err error) {
		if err != nil {
			t.Errorf("series %d: %v", i, err)
		}
		if seen[i] {
			t.Errorf("series %d emitted twice", i)
		}
		got[i], seen[i] = r, true
	})
	if err != nil {
		t.Fatal(err)
	}
	for i, ok := range seen {
		if !ok {
			t.Errorf("series %d not emitted", i)
		}
	}
	return out, got
}

func choiceOf(t *testing.T, out *Outcome, seg string) Choice {
	t.Helper()
	for _, ch := range out.Choices {
		if ch.Segment.String() == seg {
			return ch
		}
	}
	t.Fatalf("no choice for segment %s in %+v", seg, out.Choices)
	return Choice{}
}

func TestAutoChoosesPerSegment(t *testing.T) {
	// h = 2, m = 1: T = 8. 25 long lines, 25 long steps, 5 medium lines (pooled with the long
	// ones), 3 short lines (too short for the inner holdout).
	var in []series.Series
	for i := 0; i < 25; i++ {
		in = append(in, line(fmt.Sprintf("line%d", i), 20, float64(i+1)), step(fmt.Sprintf("step%d", i), 20))
	}
	for i := 0; i < 5; i++ {
		in = append(in, line(fmt.Sprintf("medium%d", i), 12, 2))
	}
	for i := 0; i < 3; i++ {
		in = append(in, line(fmt.Sprintf("short%d", i), 6, 2))
	}
	o := Options{Base: selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}, Combinations: combos, Workers: 2, CPU: fakeCPU}
	out, got := run1(t, in, o)
	if want := []string{"last", "line", NamePerSeries}; !reflect.DeepEqual(out.Candidates, want) {
		t.Fatalf("candidates %v, want %v", out.Candidates, want)
	}
	if out.InnerSeries != 55 {
		t.Errorf("inner series %d, want 55 (every series but the short ones)", out.InnerSeries)
	}
	long := choiceOf(t, out, "yearly/smooth/long")
	if long.Design != "line" || long.Basis != long.Segment || long.Inner != 25 || long.Series != 25 {
		t.Errorf("long lines: %+v", long)
	}
	if long.Means[1] != 0 || !(long.Means[0] > 0) {
		t.Errorf("long lines: inner MASE %v, want line 0 and last above", long.Means)
	}
	med := choiceOf(t, out, "yearly/smooth/medium")
	if med.Design != "line" || med.Basis.String() != "yearly/smooth/*" || med.Inner != 30 {
		t.Errorf("medium lines: %+v, want the pooled yearly/smooth/* basis of 30", med)
	}
	short := choiceOf(t, out, "yearly/smooth/short")
	if short.Design != "line" || short.Basis.String() != "yearly/smooth/*" || short.Series != 3 {
		t.Errorf("short lines: %+v", short)
	}
	steps := choiceOf(t, out, "yearly/erratic/long")
	if steps.Design != "last" {
		t.Errorf("steps: %+v, want last", steps)
	}
	for i, r := range got {
		want := "line"
		if strings.HasPrefix(in[i].Key, "step") {
			want = "last"
		}
		if r.Design != want || r.Key != in[i].Key {
			t.Errorf("%s: design %s, want %s", in[i].Key, r.Design, want)
		}
	}
	// The final run is exactly the chosen design on the full history.
	c := Candidates(o.Base, combos)[1]
	ref, err := selection.Forecast(in[0], c.Config)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(ref.Mean, got[0].Mean) || ref.Chosen != got[0].Chosen {
		t.Errorf("final forecast %v (%s), selection.Forecast with the design gives %v (%s)", got[0].Mean, got[0].Chosen, ref.Mean, ref.Chosen)
	}
	if cnt := out.Counts(); cnt["line"] != 33 || cnt["last"] != 25 {
		t.Errorf("counts %v", cnt)
	}
	var b strings.Builder
	out.Write(&b)
	if !strings.Contains(b.String(), "yearly/erratic/long") || !strings.Contains(b.String(), "basis yearly/smooth/*") {
		t.Errorf("outcome text:\n%s", b.String())
	}
}

// Below MinSeries everywhere, the simplest candidate is taken without weighing noise.
func TestAutoTooFewSeriesTakesTheSimplest(t *testing.T) {
	var in []series.Series
	for i := 0; i < 10; i++ {
		in = append(in, line(fmt.Sprintf("line%d", i), 20, 1))
	}
	out, got := run1(t, in, Options{Base: selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}, Combinations: combos, CPU: fakeCPU})
	ch := choiceOf(t, out, "yearly/smooth/long")
	if ch.Design != "last" || ch.Inner != 0 || got[0].Design != "last" {
		t.Errorf("choice %+v, design %s; want last with no inner basis", ch, got[0].Design)
	}
}

// The costly member forecasts the lines exactly but costs 100 times the last-value member:
// over the default budget (5x the simplest candidate) it leaves the zoo, so neither its fixed
// design nor the per-series design over both members is weighed; with a budget of 200x it is
// kept and wins.
func TestAutoCostBudget(t *testing.T) {
	in := lines30()
	cc := []Combination{{Name: "last", Families: []string{famLast}}, {Name: "costly", Families: []string{famCostly}}}
	base := selection.Config{Horizon: 2, Zoo: specs(famLast, famCostly)}
	out, got := run1(t, in, Options{Base: base, Combinations: cc, CPU: fakeCPU, Workers: 1})
	// A member alone is fitted at each of the 3 backtest origins and once on the whole inner
	// history: 4 units per series for the last-value member, so the budget is 20.
	if out.MemberCostMillis[famLast] != 4 || out.BudgetMillis != 20 || !(out.MemberCostMillis[famCostly] > 20) {
		t.Errorf("member costs %v, budget %v; want last 4, budget 20, costly above it", out.MemberCostMillis, out.BudgetMillis)
	}
	if !reflect.DeepEqual(out.DroppedMembers, []string{famCostly}) || !reflect.DeepEqual(out.Candidates, []string{"last"}) ||
		out.Choices[0].Design != "last" || got[0].Design != "last" {
		t.Errorf("default budget: dropped %v, candidates %v, choice %+v", out.DroppedMembers, out.Candidates, out.Choices[0])
	}
	// The outcome text lists the member costs, the costliest first; a cost above the budget is
	// where its run stopped, a lower bound.
	var b strings.Builder
	out.Write(&b)
	if want := "  member cost, ms/series, most first: " + famCostly + " at least "; !strings.Contains(b.String(), want) ||
		!strings.Contains(b.String(), " (dropped), "+famLast+" 4.00\n") {
		t.Errorf("outcome text has no member-cost line %q...%q:\n%s", want, " (dropped), "+famLast+" 4.00", b.String())
	}
	out, got = run1(t, in, Options{Base: base, Combinations: cc, CPU: fakeCPU, CostLimit: 200})
	b.Reset()
	out.Write(&b)
	if want := "  member cost, ms/series, most first: " + famCostly + " 400.00, " + famLast + " 4.00\n"; !strings.Contains(b.String(), want) {
		t.Errorf("budget 200x: outcome text has no line %q:\n%s", want, b.String())
	}
	if len(out.DroppedMembers) != 0 || out.Choices[0].Design != "costly" || got[5].Design != "costly" {
		t.Errorf("budget 200x: dropped %v, choice %+v", out.DroppedMembers, out.Choices[0])
	}
	if want := []float64{4, 400, 404}; !reflect.DeepEqual(out.CostMillis, want) {
		t.Errorf("candidate costs %v, want %v (sums of member costs)", out.CostMillis, want)
	}
}

// Dropping for cost goes most expensive first, and never drops the simplest candidate's members.
func TestWithinBudgetDropsTheMostExpensiveFirst(t *testing.T) {
	in := lines30()
	cc := []Combination{{Name: "costly", Families: []string{famCostly}}}
	base := selection.Config{Horizon: 2, Zoo: specs(famLast, famLine, famCostly)}
	// Budget 1.01 x 400 = 404: Last (4) and Line (4) cannot both stay beside Costly (400); of
	// equal costs the later in zoo order (the more complex) goes.
	out, _ := run1(t, in, Options{Base: base, Combinations: cc, CPU: fakeCPU, CostLimit: 1.01})
	if !reflect.DeepEqual(out.DroppedMembers, []string{famLine}) {
		t.Errorf("dropped %v, want [%s]", out.DroppedMembers, famLine)
	}
	if out.Candidates[0] != "costly" {
		t.Errorf("candidates %v: the simplest candidate must survive", out.Candidates)
	}
}

// A load that begins halfway through the pilot must not change which members stay: the
// pilot interleaves the members' runs (pilotCosts), so the load falls on every member alike
// and the ratio of their costs, which is all the budget reads, stays as on a quiet machine.
// Measured one member after the other (the pilot before the fourteenth session), the line
// member ran wholly under the load, read three times its cost (12 ms against a budget of
// 2.5 x 4 = 10) and was dropped.
func TestPilotCostsHoldUnderALoadThatComesMidway(t *testing.T) {
	in := lines30()
	cc := []Combination{{Name: "last", Families: []string{famLast}}}
	base := selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}
	// The pilot is 8 series; each member costs 4 units per series, 64 units in all. The
	// loaded clock charges every unit after the pilot's first 32 three times.
	loaded := func() func() time.Duration {
		w0 := work.Load()
		return func() time.Duration {
			w := work.Load() - w0
			return time.Duration(w+2*max(w-32, 0)) * time.Millisecond
		}
	}
	// With as many workers as pilot series the pilot still goes in rounds (pilotRounds).
	for _, workers := range []int{1, 8} {
		for _, c := range []struct {
			name string
			cpu  func() func() time.Duration
		}{{"quiet", func() func() time.Duration { return fakeCPU }}, {"load from halfway", loaded}} {
			out, _ := run1(t, in, Options{Base: base, Combinations: cc, CPU: c.cpu(), Workers: workers, CostLimit: 2.5})
			last, line := out.MemberCostMillis[famLast], out.MemberCostMillis[famLine]
			if len(out.DroppedMembers) != 0 || last != line || out.BudgetMillis != 2.5*last {
				t.Errorf("%d workers, %s: costs %v, budget %v, dropped %v; want equal costs, the budget 2.5 times them, nothing dropped",
					workers, c.name, out.MemberCostMillis, out.BudgetMillis, out.DroppedMembers)
			}
		}
	}
}

func TestFixedAndPerSeriesRunTheDeclaration(t *testing.T) {
	in := []series.Series{line("a", 20, 1), step("b", 20)}
	base := selection.Config{Horizon: 2, Zoo: specs(famLast, famLine), CombineTop: 2, CombineMargin: 10}
	for _, m := range []Mode{Fixed, PerSeries} {
		out, got := run1(t, in, Options{Mode: m, Base: base, Combinations: combos})
		c := ForMode(m, base)
		for i, s := range in {
			ref, err := selection.Forecast(s, c.Config)
			if err != nil {
				t.Fatal(err)
			}
			if got[i].Design != c.Name || got[i].Chosen != ref.Chosen || !reflect.DeepEqual(got[i].Mean, ref.Mean) {
				t.Errorf("%s %s: %s %v, want %s %v", m, s.Key, got[i].Chosen, got[i].Mean, ref.Chosen, ref.Mean)
			}
		}
		if len(out.Candidates) != 1 || out.InnerSeries != 0 {
			t.Errorf("%s: outcome %+v", m, out)
		}
	}
	_, got := run1(t, in[1:], Options{Mode: Fixed, Base: base})
	if got[0].Family != selection.FamilyCombination {
		t.Errorf("fixed with a margin of 10: %s, want the declared combination", got[0].Chosen)
	}
}

func TestValidateNamesTheField(t *testing.T) {
	base := selection.Config{Horizon: 2, Zoo: specs(famLast)}
	for _, c := range []struct {
		o    Options
		want string
	}{
		{Options{Mode: "Sometimes", Base: base}, "mode"},
		{Options{Rule: "best", Base: base}, "rule"},
		{Options{CostLimit: 0.5, Base: base}, "costLimit"},
		{Options{CostLimit: math.NaN(), Base: base}, "costLimit"},
		{Options{MinSeries: -1, Base: base}, "minSeries"},
		{Options{Base: selection.Config{Horizon: 0, Zoo: base.Zoo}}, "horizon"},
	} {
		err := c.o.Validate()
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%+v: error %v, want one naming %s", c.o, err, c.want)
		}
	}
}

// A series that cannot be cleaned is rejected with the cleaning reason, as without design.
func TestUnusableSeriesIsRejected(t *testing.T) {
	bad := series.Series{Key: "bad", Start: start(), Freq: series.Yearly, Values: []float64{1, math.Inf(1), 3}}
	var gotErr error
	_, err := Forecast(context.Background(), []series.Series{bad, line("ok", 20, 1)}, Options{Base: selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}, Combinations: combos},
		func(i int, r Result, err error) {
			if i == 0 {
				gotErr = err
			}
		})
	if err != nil {
		t.Fatal(err)
	}
	if gotErr == nil || !strings.Contains(gotErr.Error(), "infinite") {
		t.Errorf("bad series: error %v, want the cleaning reason", gotErr)
	}
}

// collapse averages a series' inner MASE over its origins with a defined scale: series 0 has
// origins scoring 1 and 3 (mean 2), series 1 one scored origin (5) and one without a scale.
func TestCollapseAveragesOrigins(t *testing.T) {
	sg := Segment{Frequency: series.Yearly, Class: "smooth", Band: BandLong}
	inner := []innerSeries{{unit: 0, seg: sg, scaled: true}, {unit: 0, seg: sg, scaled: true}, {unit: 1, seg: sg, scaled: true}, {unit: 1, seg: sg}}
	units, scores := collapse(inner, [][]float64{{1, 3, 5, math.NaN()}}, 2)
	if len(units) != 2 || !units[0].scaled || !units[1].scaled || scores[0][0] != 2 || scores[0][1] != 5 {
		t.Errorf("units %+v, scores %v; want 2 and 5", units, scores)
	}
}

// With two inner origins every eligible series is still one inner series (20 points hold two
// origins of h = 2 above T = 8), and the choice stands.
func TestAutoInnerOrigins(t *testing.T) {
	var in []series.Series
	for i := 0; i < 25; i++ {
		in = append(in, line(fmt.Sprintf("line%d", i), 20, float64(i+1)))
	}
	out, got := run1(t, in, Options{Base: selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}, Combinations: combos, CPU: fakeCPU, InnerOrigins: 2})
	if out.InnerSeries != 25 || out.Choices[0].Inner != 25 || got[0].Design != "line" {
		t.Errorf("inner series %d, choice %+v", out.InnerSeries, out.Choices[0])
	}
}

// The cost verdict holds on to the previous run's within CostMargin (20%) of the budget, and
// follows the costs beyond it; with no previous run it is the plain rule. Hand-computed: A is
// protected (cost 10), B and C may go; the budget is 50.
func TestOverBudgetHoldsThePreviousVerdict(t *testing.T) {
	zoo := specs("A", "B", "C")
	protected := map[string]bool{"A": true}
	for _, c := range []struct {
		name   string
		b, c   float64 // costs of B and C
		before *Before
		want   []string
	}{
		// Sum 52 > 50: the plain rule drops B, the costlier.
		{"no previous run, over", 22, 20, nil, []string{"B"}},
		// The previous run kept both: they stay while the sum fits 60.
		{"kept before, 4% over", 22, 20, &Before{Kept: []string{"A", "B", "C"}}, nil},
		{"kept before, 24% over", 22, 30, &Before{Kept: []string{"A", "B", "C"}}, []string{"C"}},
		// The previous run dropped B: it comes back only when the sum fits 40.
		{"dropped before, 4% under", 20, 18, &Before{Kept: []string{"A", "C"}, Dropped: []string{"B"}}, []string{"B"}},
		{"dropped before, 22% under", 12, 17, &Before{Kept: []string{"A", "C"}, Dropped: []string{"B"}}, nil},
		// A member the previous run did not measure (C) is judged by the plain rule, and so is
		// any sum it is part of.
		{"new member", 22, 20, &Before{Kept: []string{"A", "B"}}, []string{"B"}},
		// The protected member counts in the sum: B alone fits 60, but not beside A.
		{"kept before, B within 60 alone, 28% over with A", 54, 0, &Before{Kept: []string{"A", "B", "C"}}, []string{"B"}},
		// A run stopped at the budget is over it whatever the previous run did.
		{"stopped", 10, 5, &Before{Kept: []string{"A", "B", "C"}}, []string{"C"}},
	} {
		cost := map[string]float64{"A": 10, "B": c.b, "C": c.c}
		var stopped map[string]bool
		if c.name == "stopped" {
			stopped = map[string]bool{"C": true}
		}
		got := overBudget(zoo, cost, 50, stopped, protected, Options{Before: c.before}.margin)
		if !reflect.DeepEqual(got, c.want) {
			t.Errorf("%s: dropped %v, want %v", c.name, got, c.want)
		}
	}
}

// Options.Before reaches the verdict through Forecast, the outcome says which member it held,
// and the record gives the next run its Before. The line member costs as much as the
// last-value member (4 per series); at 1.9 times the latter the budget is 7.6, so the two
// (8) do not fit and the plain rule drops the line; a previous run that kept it holds it (8
// fits 1.2 x 7.6).
func TestAutoCostBudgetHoldsThePreviousVerdict(t *testing.T) {
	in := lines30()
	cc := []Combination{{Name: "last", Families: []string{famLast}}, {Name: "line", Families: []string{famLine}}}
	o := Options{Base: selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}, Combinations: cc, CPU: fakeCPU, Workers: 1, CostLimit: 1.9}
	out, _ := run1(t, in, o)
	if !reflect.DeepEqual(out.DroppedMembers, []string{famLine}) || out.HeldMembers != nil || !reflect.DeepEqual(out.NearBudget, []string{famLine}) {
		t.Fatalf("no previous run: dropped %v, held %v, near the budget %v; want the line dropped and near the budget", out.DroppedMembers, out.HeldMembers, out.NearBudget)
	}
	var text strings.Builder
	out.Write(&text)
	if want := "  within 20% of the budget (a run keeps the previous run's verdict on them): " + famLine + "\n"; !strings.Contains(text.String(), want) {
		t.Errorf("outcome text has no %q:\n%s", want, text.String())
	}
	// At 3 times (budget 12) the line is kept whatever the previous run did: not near.
	o2 := o
	o2.CostLimit = 3
	if far, _ := run1(t, in, o2); far.NearBudget != nil || far.DroppedMembers != nil {
		t.Errorf("budget 12: near %v, dropped %v; want neither", far.NearBudget, far.DroppedMembers)
	}
	if b := NewRecord(out, OneSE, 0).Before(); !reflect.DeepEqual(b, &Before{Kept: []string{famLast}, Dropped: []string{famLine}}) {
		t.Errorf("record's verdict %+v", b)
	}
	o.Before = &Before{Kept: []string{famLast, famLine}}
	out, got := run1(t, in, o)
	if out.DroppedMembers != nil || !reflect.DeepEqual(out.HeldMembers, []string{famLine}) || got[0].Design != "line" {
		t.Errorf("kept before: dropped %v, held %v, design %s; want the line held and chosen", out.DroppedMembers, out.HeldMembers, got[0].Design)
	}
	var b strings.Builder
	out.Write(&b)
	if want := famLine + " 4.00 (kept, as by the previous run)"; !strings.Contains(b.String(), want) {
		t.Errorf("outcome text has no %q:\n%s", want, b.String())
	}
	r := NewRecord(out, OneSE, 0)
	if back, err := r.Outcome(); err != nil || !reflect.DeepEqual(back.HeldMembers, []string{famLine}) {
		t.Errorf("record round trip: held %v, %v", back.HeldMembers, err)
	}
	if b := r.Before(); !reflect.DeepEqual(b, &Before{Kept: []string{famLast, famLine}}) {
		t.Errorf("next run's verdict %+v", b)
	}
}
