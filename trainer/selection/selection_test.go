package selection

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

func specs(fams ...string) []models.Spec {
	out := make([]models.Spec, len(fams))
	for i, f := range fams {
		out[i] = models.Spec{Family: f}
	}
	return out
}

func yearly(key string, y ...float64) series.Series {
	return series.Series{Key: key, Start: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Yearly, Values: y}
}

// An exact straight line is forecast without error by the line member, so its backtest MASE
// is 0 and it wins; the naive member's MASE is 1 at step 1 (its error equals the naive scale;
// hand-worked from Hyndman & Koehler 2006 eq. (6)).
func TestChoosesBestMember(t *testing.T) {
	s := yearly("line", 1, 3, 5, 7, 9, 11, 13, 15, 17, 19)
	r, err := Forecast(s, Config{Horizon: 2, Zoo: specs(famLast, famLine, famFail, famPanic), Levels: []float64{0.1, 0.5, 0.9}})
	if err != nil {
		t.Fatal(err)
	}
	if r.Chosen != famLine || r.Expected != 0 {
		t.Fatalf("chosen %s expected %v, want %s with 0; notes %v", r.Chosen, r.Expected, famLine, r.Notes)
	}
	if got := r.Mean; math.Abs(got[0]-21) > 1e-9 || math.Abs(got[1]-23) > 1e-9 {
		t.Errorf("mean %v, want [21 23]", got)
	}
	// naive at step k errs by 2k against a naive scale of 2: MASE per step = k, overall 1.5.
	if got := r.Scores[famLast]; math.Abs(got-1.5) > 1e-12 {
		t.Errorf("naive score %v, want 1.5", got)
	}
	for _, f := range []string{famFail, famPanic} {
		if !math.IsNaN(r.Scores[f]) {
			t.Errorf("%s score %v, want NaN", f, r.Scores[f])
		}
	}
	if len(r.StepErrors) != 2 || r.StepErrors[0] != 0 {
		t.Errorf("step errors %v", r.StepErrors)
	}
	if r.QuantileSource != "empirical" || len(r.Quantiles) != 3 {
		t.Errorf("quantiles %v from %q", r.Quantiles, r.QuantileSource)
	}
}

// Equal scores go to the earlier zoo member (the documented simplicity order).
func TestTieGoesToEarlierMember(t *testing.T) {
	s := yearly("walk", 1, 2, 4, 3, 5, 6, 4, 7)
	zoo := []models.Spec{{Family: famLast, Name: "b"}, {Family: famLast, Name: "a"}}
	r, err := Forecast(s, Config{Horizon: 2, Zoo: zoo})
	if err != nil {
		t.Fatal(err)
	}
	if r.Chosen != "b" {
		t.Errorf("chosen %s, want b (listed first)", r.Chosen)
	}
}

// On a series alternating 100, 100.2 the members last±1 miss by about 1 while their mean (the
// last value) misses by 0.2, so the combination's backtest wins and is chosen.
func TestCombinationChosenOnlyWhenBetter(t *testing.T) {
	var y []float64
	for i := 0; i < 12; i++ {
		y = append(y, 100+0.2*float64(i%2))
	}
	cfg := Config{Horizon: 1, Zoo: specs(famUp, famDown), CombineTop: 2, Levels: []float64{0.5}}
	r, err := Forecast(yearly("alt", y...), cfg)
	if err != nil {
		t.Fatal(err)
	}
	if r.Family != FamilyCombination || math.Abs(r.Mean[0]-y[len(y)-1]) > 1e-12 {
		t.Fatalf("got %s mean %v, want the combination at %v", r.Chosen, r.Mean, y[len(y)-1])
	}
	// A line through an exact line is perfect: the combination with a worse member must lose.
	r, err = Forecast(yearly("line", 1, 2, 3, 4, 5, 6, 7, 8), Config{Horizon: 2, Zoo: specs(famLine, famLast), CombineTop: 2})
	if err != nil {
		t.Fatal(err)
	}
	if r.Chosen != famLine {
		t.Errorf("chosen %s, want %s", r.Chosen, famLine)
	}
}

// With no backtestable member the documented fallback order is used and noted.
func TestFallbackWhenTooShort(t *testing.T) {
	r, err := Forecast(yearly("short", 4, 6), Config{Horizon: 3, Zoo: specs(famLong)})
	if err != nil {
		t.Fatal(err)
	}
	if r.Chosen == "" || !math.IsNaN(r.Expected) || !strings.Contains(strings.Join(r.Notes, ";"), "fallback") {
		t.Errorf("chosen %q expected %v notes %v", r.Chosen, r.Expected, r.Notes)
	}
}

func TestConstantAndBadSeries(t *testing.T) {
	r, err := Forecast(yearly("flat", 3, 3, 3, 3), Config{Horizon: 2, Zoo: specs(famLast), Levels: []float64{0.1, 0.9}})
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range append(r.Mean, r.Quantiles[0]...) {
		if v != 3 {
			t.Errorf("constant series forecast %v / %v, want all 3", r.Mean, r.Quantiles)
		}
	}
	_, err = Forecast(yearly("holes", 1, math.NaN(), math.NaN(), math.NaN(), 5), Config{Horizon: 1, Zoo: specs(famLast)})
	if err == nil || !strings.Contains(err.Error(), "holes") {
		t.Errorf("mostly missing series: err %v, want a reason naming the series", err)
	}
}

func TestValidate(t *testing.T) {
	good := Config{Horizon: 1, Zoo: specs(famLast)}
	bad := map[string]Config{
		"horizon": {Zoo: specs(famLast)},
		"levels":  {Horizon: 1, Zoo: specs(famLast), Levels: []float64{0.5, 0.5}},
		"level 1": {Horizon: 1, Zoo: specs(famLast), Levels: []float64{1}},
		"zoo":     {Horizon: 1},
		"family":  {Horizon: 1, Zoo: specs("test.NoSuch")},
		"dup":     {Horizon: 1, Zoo: specs(famLast, famLast)},
		"metric":  {Horizon: 1, Zoo: specs(famLast), Metric: "R2"},
		"combine": {Horizon: 1, Zoo: specs(famLast), CombineMethod: "max"},
		"origins": {Horizon: 1, Zoo: specs(famLast), Origins: -1},
		"season":  {Horizon: 1, Zoo: specs(famLast), SeasonLength: -2},
	}
	if err := good.Validate(); err != nil {
		t.Errorf("good config: %v", err)
	}
	for name, c := range bad {
		if err := c.Validate(); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}

// Hand-worked: step-1 errors {−1, +1} give s = 1 and pool {−1, 1}; N = 2, w = 2/22.
// Level 0.9: c_emp = −1 + 0.9·2 = 0.8 (Hyndman & Fan 1996 type 7), z = 1.2815515655446004
// (standard normal table), c = (w·0.8 + (1−w)·z)·sqrt(1 + 1/2). Level 0.5: c_emp = 0, z = 0.
func TestEmpiricalQuantilesByHand(t *testing.T) {
	q := empiricalQuantiles([]float64{10, 10}, []float64{0.5, 0.9}, [][]float64{{-1}, {1}}, nil)
	w := 2.0 / 22
	c := (w*0.8 + (1-w)*1.2815515655446004) * math.Sqrt(1.5)
	if q[0][0] != 10 || math.Abs(q[1][0]-(10+c)) > 1e-12 {
		t.Errorf("step 1: got %v %v, want 10 and %v", q[0][0], q[1][0], 10+c)
	}
	// step 2 lies past the backtest horizon: spread grows by sqrt(2) (random-walk rule).
	if math.Abs(q[1][1]-(10+c*math.Sqrt2)) > 1e-12 {
		t.Errorf("step 2: got %v, want %v", q[1][1], 10+c*math.Sqrt2)
	}
}

// Classes of Syntetos, Boylan & Croston (2005), worked by hand: ADI = n / non-zero count,
// CV² of the non-zero sizes (population variance).
func TestClassify(t *testing.T) {
	cases := []struct {
		y    []float64
		want string
	}{
		{[]float64{5, 5, 6, 5}, ClassSmooth},             // ADI 1, CV² ≈ 0.008
		{[]float64{1, 9, 1, 9}, ClassErratic},            // ADI 1, mean 5, var 16, CV² 0.64
		{[]float64{0, 5, 0, 5, 0, 6}, ClassIntermittent}, // ADI 2, CV² ≈ 0.008
		{[]float64{0, 1, 0, 9, 0, 0}, ClassLumpy},        // ADI 3, CV² 0.64
	}
	for _, c := range cases {
		if got, _, _ := Classify(c.y); got != c.want {
			t.Errorf("Classify(%v) = %s, want %s", c.y, got, c.want)
		}
	}
}

// ForecastMany gives the same results, in input order, whatever the number of workers; a
// failing series gets its own error without stopping the others.
func TestForecastManyDeterministic(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	var in []series.Series
	for i := 0; i < 40; i++ {
		y := make([]float64, 8+rng.IntN(30))
		lvl := 50.0
		for k := range y {
			lvl += rng.NormFloat64()
			y[k] = lvl + 3*math.Sin(float64(k))
		}
		in = append(in, yearly(fmt.Sprintf("s%02d", i), y...))
	}
	in[7].Values = []float64{math.Inf(1), 1, 2}
	zoo, err := Zoo()
	if err != nil {
		t.Fatal(err)
	}
	cfg := Config{Horizon: 4, Zoo: zoo, Levels: []float64{0.05, 0.5, 0.95}, CombineTop: 3}
	run := func(workers int) []string {
		var out []string
		err := ForecastMany(context.Background(), in, cfg, workers, func(i int, r Result, err error) {
			if len(out) != i {
				t.Fatalf("emitted %d at position %d", i, len(out))
			}
			out = append(out, fmt.Sprintf("%v|%v", r, err))
		})
		if err != nil {
			t.Fatal(err)
		}
		return out
	}
	one, four := run(1), run(4)
	for i := range one {
		if one[i] != four[i] {
			t.Errorf("series %d differs between 1 and 4 workers:\n%s\n%s", i, one[i], four[i])
		}
	}
	if !strings.Contains(one[7], "infinite") {
		t.Errorf("series 7: %s, want the infinite-value error", one[7])
	}
}

func TestForecastManyCancel(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	in := []series.Series{yearly("a", 1, 2, 3), yearly("b", 1, 2, 3)}
	err := ForecastMany(ctx, in, Config{Horizon: 1, Zoo: specs(famLast)}, 2, func(int, Result, error) {})
	if err != context.Canceled {
		t.Errorf("err %v, want context.Canceled", err)
	}
}

// BenchmarkForecast is the selection cost of one monthly series (n = 120, h = 18) with the
// full registered zoo, 3 origins and a top-3 combination.
func BenchmarkForecast(b *testing.B) {
	zoo, err := Zoo()
	if err != nil {
		b.Fatal(err)
	}
	var fams []models.Spec
	for _, s := range zoo {
		if !strings.HasPrefix(s.Family, "test.") {
			fams = append(fams, s)
		}
	}
	rng := rand.New(rand.NewPCG(3, 4))
	y := make([]float64, 120)
	for k := range y {
		y[k] = 200 + float64(k) + 30*math.Sin(2*math.Pi*float64(k)/12) + 5*rng.NormFloat64()
	}
	s := series.Series{Key: "bench", Start: time.Date(2015, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Monthly, Values: y}
	cfg := Config{Horizon: 18, Zoo: fams, Levels: []float64{0.1, 0.5, 0.9}, CombineTop: 3, Metric: backtest.MASE}
	b.ResetTimer()
	for b.Loop() {
		if _, err := Forecast(s, cfg); err != nil {
			b.Fatal(err)
		}
	}
}

// On the alternating series the naive member misses by 0.2 (MASE 1) and the combination with
// last+1 by 0.3 or 0.7 (MASE 1.5 to 3.5): without a margin the member wins, with margin 2
// (threshold 3·1) the combination does.
func TestCombineMargin(t *testing.T) {
	var y []float64
	for i := 0; i < 12; i++ {
		y = append(y, 100+0.2*float64(i%2))
	}
	cfg := Config{Horizon: 1, Zoo: specs(famLast, famUp), CombineTop: 2}
	for margin, want := range map[float64]string{0: famLast, 2: "Combination(mean: test.Last, test.Up)"} {
		cfg.CombineMargin = margin
		r, err := Forecast(yearly("alt", y...), cfg)
		if err != nil {
			t.Fatal(err)
		}
		if r.Chosen != want {
			t.Errorf("margin %v: chosen %s, want %s (scores %v)", margin, r.Chosen, want, r.Scores)
		}
	}
}

// variantsAgainstAlone runs ForecastManyVariants on in and, for each variant, ForecastMany
// with cfg's zoo cut to the variant's members (in its order) and its combination setting,
// reports every result or error that differs, and returns the ForecastMany results by variant
// and series.
func variantsAgainstAlone(t *testing.T, in []series.Series, cfg Config, variants []Variant) [][]Result {
	t.Helper()
	got := make([][]Result, len(in))
	gotErr := make([][]error, len(in))
	if err := ForecastManyVariants(context.Background(), in, cfg, variants, nil, 2, func(i int, rs []Result, errs []error) {
		got[i], gotErr[i] = rs, errs
	}); err != nil {
		t.Fatal(err)
	}
	alone := make([][]Result, len(variants))
	for v, vr := range variants {
		c := cfg
		c.CombineTop, c.CombineMethod, c.CombineMargin = vr.CombineTop, vr.CombineMethod, vr.CombineMargin
		if vr.Members != nil {
			c.Zoo = specs(vr.Members...)
		}
		alone[v] = make([]Result, len(in))
		if err := ForecastMany(context.Background(), in, c, 1, func(i int, r Result, err error) {
			g := got[i][v]
			if fmt.Sprint(err) != fmt.Sprint(gotErr[i][v]) || fmt.Sprintf("%+v", r) != fmt.Sprintf("%+v", g) {
				t.Errorf("variant %d, %s:\n variants %+v (%v)\n alone    %+v (%v)", v, in[i].Key, g, gotErr[i][v], r, err)
			}
			alone[v][i] = r
		}); err != nil {
			t.Fatal(err)
		}
	}
	return alone
}

// ForecastManyVariants finishes one backtest per series several ways; each variant's result
// must be exactly ForecastMany's with that combination setting (refits shared, never mutated
// across variants: NonNegative clipping and quantiles included). Invented monthly demand of
// Fenwick Lane Provisions' items with trend, season and noise; one series is constant and one
// too short for any backtest, so the fallback paths are covered too.
func TestForecastManyVariantsEqualsForecastMany(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	var in []series.Series
	for k := 0; k < 6; k++ {
		y := make([]float64, 40+k*5)
		for i := range y {
			y[i] = 50 + float64(k)*3 + 0.4*float64(i) + 8*math.Sin(2*math.Pi*float64(i)/12) + rng.NormFloat64()*3
		}
		in = append(in, series.Series{Key: fmt.Sprintf("item-%d", k), Start: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Monthly, Values: y})
	}
	in = append(in, yearly("flat", 4, 4, 4, 4, 4, 4), yearly("short", 1, 2))
	cfg := Config{Horizon: 6, Levels: []float64{0.1, 0.9}, NonNegative: true,
		Zoo: specs(models.FamilyNaive, models.FamilySeasonalNaive, models.FamilyTheta, models.FamilyETS)}
	variants := []Variant{{}, {CombineTop: 3, CombineMethod: CombineMean, CombineMargin: 1000},
		{CombineTop: 3, CombineMethod: CombineMedian, CombineMargin: 1000}, {CombineTop: 2, CombineMargin: 0.05}}
	combined := 0
	for _, rs := range variantsAgainstAlone(t, in, cfg, variants) {
		for _, r := range rs {
			if r.Family == FamilyCombination {
				combined++
			}
		}
	}
	if combined == 0 {
		t.Error("no variant published a combination: the test does not exercise the shared refits")
	}
	if err := ForecastManyVariants(context.Background(), in, cfg, []Variant{{CombineMethod: "mode"}}, nil, 1, func(int, []Result, []error) {}); err == nil || !strings.Contains(err.Error(), "variants[0]") {
		t.Errorf("bad variant: error %v, want one naming variants[0]", err)
	}
}

// Variants that name member subsets share each member's backtest and refit across subsets;
// each variant's result must still be exactly ForecastMany's with the zoo cut to its members,
// in its own order (ties and combination names follow it: ETS and the line member both
// backtest the exact line perfectly, and the variant that lists the line member first must
// publish it where the zoo's order would publish ETS). The series are Fenwick Lane
// Provisions' invented monthly items again, some so short that the whole zoo's backtest plan
// (its floor is the most demanding member's MinLength) has fewer origins or a shorter horizon
// than a subset's, so the per-plan backtests are exercised; an exact line, which the line
// member backtests perfectly (score 0: no combination can be within a margin of it, see
// Config.CombineMargin); a constant series and one too short for any backtest (fallbacks);
// and members that always fail and always panic.
func TestForecastManyVariantsMemberSubsets(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	start := time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)
	var in []series.Series
	for _, n := range []int{9, 14, 16, 20, 25, 27, 30, 36, 48} {
		y := make([]float64, n)
		for i := range y {
			y[i] = 40 + 0.3*float64(i) + 6*math.Sin(2*math.Pi*float64(i)/12) + rng.NormFloat64()*2
		}
		in = append(in, series.Series{Key: fmt.Sprintf("item-%d", n), Start: start, Freq: series.Monthly, Values: y})
	}
	line := make([]float64, 30)
	for i := range line {
		line[i] = 10 + 2*float64(i)
	}
	in = append(in, series.Series{Key: "line", Start: start, Freq: series.Monthly, Values: line},
		yearly("flat", 4, 4, 4, 4, 4, 4), yearly("short", 1, 2))
	zoo := specs(models.FamilyNaive, models.FamilySeasonalNaive, models.FamilyTheta, models.FamilyETS, famLine, famFail, famPanic)
	cfg := Config{Horizon: 6, Levels: []float64{0.1, 0.9}, ErrorOrigins: 2, Zoo: zoo}
	all := Variant{CombineTop: 3, CombineMethod: CombineMean, CombineMargin: 1000}
	variants := []Variant{
		{Members: []string{models.FamilyETS, models.FamilyTheta}, CombineTop: 2, CombineMethod: CombineMean, CombineMargin: 1000},
		{Members: []string{models.FamilyTheta, famLine, models.FamilyETS}, CombineTop: 3, CombineMethod: CombineMean, CombineMargin: 1000},
		{Members: []string{famUp, famDown}, CombineTop: 2, CombineMethod: CombineMedian},
		{Members: []string{famFail, models.FamilyNaive, famPanic}},
		{Members: []string{models.FamilyETS, models.FamilyTheta}},
		all, {},
	}
	cfg.Zoo = append(cfg.Zoo, specs(famUp, famDown)...)
	alone := variantsAgainstAlone(t, in, cfg, variants)
	var shortened, perfect, combined int
	for i := range in {
		for v := range variants {
			if alone[v][i].Family == FamilyCombination {
				combined++
			}
		}
		whole := alone[len(variants)-1][i]
		if len(whole.StepErrors) > 0 && len(alone[0][i].StepErrors) > len(whole.StepErrors) {
			shortened++ // the subset backtests a longer horizon than the whole zoo
		}
		if r := alone[1][i]; r.Expected == 0 && r.Chosen == famLine {
			perfect++
		}
	}
	if combined == 0 || shortened == 0 || perfect == 0 {
		t.Errorf("combined %d, subset plans longer than the zoo's %d, perfect line kept %d: each must be > 0 for the test to cover them", combined, shortened, perfect)
	}
	for _, bad := range []Variant{{Members: []string{"nope"}}, {Members: []string{}}, {Members: []string{famUp, famUp}}} {
		if err := ForecastManyVariants(context.Background(), in, cfg, []Variant{{}, bad}, nil, 1, func(int, []Result, []error) {}); err == nil || !strings.Contains(err.Error(), "variants[1]") {
			t.Errorf("members %q: error %v, want one naming variants[1]", bad.Members, err)
		}
	}
}

// Fits kept by one call serve the next: members run alone first (as the design's cost pilot
// runs them), then every variant over the whole zoo on the same series must give exactly the
// results of runs without kept fits, and must not fit the kept members again where the plans
// agree (the line and last-value members here, both MinLength 2 or less, on series long
// enough for the zoo's plan). A Fits that held another series or other settings starts anew.
func TestFitsKeptBetweenCalls(t *testing.T) {
	var in []series.Series
	for k := 0; k < 5; k++ {
		y := make([]float64, 30+k)
		for i := range y {
			y[i] = 20 + float64(k) + 0.5*float64(i) + float64((i*7+k)%5)
		}
		in = append(in, series.Series{Key: fmt.Sprintf("item-%d", k), Start: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Monthly, Values: y})
	}
	cfg := Config{Horizon: 4, Zoo: specs(famLast, famLine, models.FamilyTheta, famFail)}
	variants := []Variant{{Members: []string{models.FamilyTheta, famLine}, CombineTop: 2, CombineMargin: 1000}, {CombineTop: 3, CombineMethod: CombineMedian, CombineMargin: 1000}, {}}
	fits := make([]*Fits, len(in))
	for i := range fits {
		fits[i] = new(Fits)
	}
	ctx := context.Background()
	for _, alone := range []string{famLast, famLine} {
		if err := ForecastManyVariants(ctx, in, cfg, []Variant{{Members: []string{alone}}}, fits, 1, func(int, []Result, []error) {}); err != nil {
			t.Fatal(err)
		}
	}
	want := variantsAgainstAlone(t, in, cfg, variants)
	last, line := fitCalls[famLast].Load(), fitCalls[famLine].Load()
	check := func(what string, in []series.Series, cfg Config, want [][]Result) {
		t.Helper()
		if err := ForecastManyVariants(ctx, in, cfg, variants, fits, 2, func(i int, rs []Result, errs []error) {
			for v := range variants {
				if errs[v] != nil || fmt.Sprintf("%+v", rs[v]) != fmt.Sprintf("%+v", want[v][i]) {
					t.Errorf("%s, variant %d, %s:\n kept %+v (%v)\n want %+v", what, v, in[i].Key, rs[v], errs[v], want[v][i])
				}
			}
		}); err != nil {
			t.Fatal(err)
		}
	}
	check("kept fits", in, cfg, want)
	if d1, d2 := fitCalls[famLast].Load()-last, fitCalls[famLine].Load()-line; d1 != 0 || d2 != 0 {
		t.Errorf("the kept members were fitted again: %d and %d fits", d1, d2)
	}
	// Other values under the same keys, then another horizon: the kept fits must not be used.
	changed := slices.Clone(in)
	for i := range changed {
		changed[i].Values = slices.Clone(in[i].Values)
		changed[i].Values[len(changed[i].Values)-1] += 10
	}
	check("changed values", changed, cfg, variantsAgainstAlone(t, changed, cfg, variants))
	longer := cfg
	longer.Horizon = 6
	check("changed horizon", changed, longer, variantsAgainstAlone(t, changed, longer, variants))
	if err := ForecastManyVariants(ctx, in, cfg, variants, fits[:2], 1, func(int, []Result, []error) {}); err == nil {
		t.Error("fits for 2 of 5 series: no error")
	}
}

// TestCombinationMembers reads back the names comboName gives, and nothing else.
func TestCombinationMembers(t *testing.T) {
	top := []*candidate{
		{member: &member{spec: models.Spec{Family: models.FamilyTheta}}, idx: 1},
		{member: &member{spec: models.Spec{Family: models.FamilyETS, Name: "ets-damped"}}, idx: 0},
	}
	name := comboName(CombineMedian, top)
	method, members, ok := CombinationMembers(name)
	if !ok || method != CombineMedian || len(members) != 2 || members[0] != "ets-damped" || members[1] != models.FamilyTheta {
		t.Fatalf("CombinationMembers(%q) = %q, %q, %v", name, method, members, ok)
	}
	for _, bad := range []string{"ETS(A,N,N)", "Combination(mean)", "Combination(: ETS)", "Combination(mean: ETS", "Combination(mean: )"} {
		if _, _, ok := CombinationMembers(bad); ok {
			t.Errorf("CombinationMembers(%q) read a name comboName never gives", bad)
		}
	}
}

// TestCombinationNamesItsFits: a combination's Model names each member's fitted model in zoo
// order and its Params carry every member's parameters under the member's name, so the
// models table's params column shows what was combined (before, only the combination's name).
func TestCombinationNamesItsFits(t *testing.T) {
	var y []float64
	for i := 0; i < 30; i++ {
		y = append(y, 50+float64(i)+3*math.Sin(float64(i)))
	}
	cfg := Config{Horizon: 3, Zoo: []models.Spec{{Family: models.FamilyTheta}, {Family: models.FamilyETS, Name: "ets"}}, CombineTop: 2, CombineMargin: 1000}
	r, err := Forecast(yearly("trend", y...), cfg)
	if err != nil {
		t.Fatal(err)
	}
	if r.Chosen != "Combination(mean: Theta, ets)" || !strings.HasPrefix(r.Model, "Combination(mean: Theta, ETS(") {
		t.Fatalf("chosen %q, model %q", r.Chosen, r.Model)
	}
	var theta, ets int
	for k := range r.Params {
		switch {
		case strings.HasPrefix(k, "Theta."):
			theta++
		case strings.HasPrefix(k, "ets."):
			ets++
		default:
			t.Errorf("param %q is not under a member's name", k)
		}
	}
	if theta == 0 || ets == 0 || r.Params["ets.alpha"] <= 0 {
		t.Errorf("params %v: want both members' parameters, ets.alpha among them", r.Params)
	}
}
