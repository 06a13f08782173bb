package features

import (
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/series"
)

// everything declares one of every generator.
func everything() Config {
	return Config{
		Calendar:      slices.Clone(CalendarNames),
		Events:        []Event{{Name: "harvest-fair", Dates: []string{"2026-03-20", "2026-05-01"}, Lead: 2, Lag: 1}},
		Fourier:       []FourierTerm{{Period: 30.4, Order: 2}},
		Lags:          []int{1, 2, 3, 7},
		Windows:       []int{3, 7},
		Stats:         slices.Clone(StatNames),
		Covariates:    []string{"promo"},
		CovariateLags: []int{1, 2},
	}
}

func randomSeries(rng *rand.Rand, n, future int) ([]float64, map[string][]float64) {
	y := make([]float64, n)
	c := make([]float64, n+future)
	for i := range y {
		y[i] = 50 + 10*rng.NormFloat64()
	}
	for i := range c {
		c[i] = float64(rng.IntN(2))
	}
	return y, map[string][]float64{"promo": c}
}

// TestNoLeakage proves, for every generator and every step of the direct strategy, that the
// feature row of (origin o, step h) is unchanged when every value at or after the origin and
// every covariate value after the target period j = o+h−1 is replaced by noise. The second
// half shows the check has teeth: changing the last known value y[o−1] changes some row.
func TestNoLeakage(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	const n, H = 80, 6
	y, cov := randomSeries(rng, n, H)
	src := Source{Key: "fenwick/oats-1kg/bristol", Start: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Daily, Covariates: cov}
	set, err := NewSet(everything(), src)
	if err != nil {
		t.Fatal(err)
	}
	kinds := map[colKind]bool{}
	for _, c := range set.cols {
		kinds[c.kind] = true
	}
	if len(kinds) != int(kindRolling)+1 {
		t.Fatalf("config exercises %d of %d column kinds", len(kinds), kindRolling+1)
	}
	changedByKnown := false
	for h := 1; h <= H; h++ {
		cols := set.Columns(h)
		for o := set.FirstOrigin(cols, h); o <= n; o++ {
			j := o + h - 1
			want := make([]float64, len(cols))
			if err := set.Fill(want, cols, y, o, h); err != nil {
				t.Fatal(err)
			}
			y2 := slices.Clone(y)
			for i := o; i < n; i++ {
				y2[i] = rng.NormFloat64() * 1000
			}
			c2 := slices.Clone(cov["promo"])
			for i := j + 1; i < len(c2); i++ {
				c2[i] = rng.NormFloat64() * 1000
			}
			set2, _ := NewSet(everything(), Source{Key: src.Key, Start: src.Start, Freq: src.Freq, Covariates: map[string][]float64{"promo": c2}})
			got := make([]float64, len(cols))
			if err := set2.Fill(got, cols, y2, o, h); err != nil {
				t.Fatal(err)
			}
			for k := range cols {
				if got[k] != want[k] {
					t.Fatalf("origin %d step %d: feature %s changed from %v to %v when data after the origin changed", o, h, set.names[cols[k]], want[k], got[k])
				}
			}
			if o >= 1 {
				y2[o-1] += 17
				_ = set2.Fill(got, cols, y2, o, h)
				changedByKnown = changedByKnown || !slices.Equal(got, want)
			}
		}
	}
	if !changedByKnown {
		t.Fatal("changing the last known value changed no row: the rows do not depend on the history at all")
	}
}

// Calendar encodings on known dates (the Gregorian calendar and ISO 8601 week numbers, checked
// against Go's time package): 2026-03-07 is a Saturday in ISO week 10, the 7th of 31 days.
func TestCalendarValues(t *testing.T) {
	src := Source{Key: "k", Start: time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC), Freq: series.Daily}
	set, err := NewSet(Config{Calendar: CalendarNames}, src)
	if err != nil {
		t.Fatal(err)
	}
	row := rowByName(t, set, 6, 1) // origin 6, step 1: target period 6 = 2026-03-07
	want := map[string]float64{
		"dayOfWeek:Sat": 1, "dayOfWeek:Sun": 0, "dayOfWeek:Tue": 0, "weekend": 1, "weekOfYear": 10,
		"month:Mar": 1, "month:Feb": 0, "quarter:2": 0, "positionInMonth": 6.0 / 30,
	}
	for k, v := range want {
		if math.Abs(row[k]-v) > 1e-12 {
			t.Errorf("%s = %v, want %v", k, row[k], v)
		}
	}
	// Monthly data: month dummies only (dayOfWeek, weekend, weekOfYear, positionInMonth and
	// quarter do not fit monthly periods).
	m, _ := NewSet(Config{Calendar: CalendarNames}, Source{Key: "k", Start: src.Start, Freq: series.Monthly})
	if len(m.Names()) != 11 || m.Names()[0] != "month:Feb" {
		t.Errorf("monthly calendar columns %v", m.Names())
	}
}

func rowByName(t *testing.T, set *Set, origin, step int) map[string]float64 {
	t.Helper()
	cols := set.Columns(step)
	dst := make([]float64, len(cols))
	if err := set.Fill(dst, cols, make([]float64, origin), origin, step); err != nil {
		t.Fatal(err)
	}
	out := map[string]float64{}
	for k, i := range cols {
		out[set.names[i]] = dst[k]
	}
	return out
}

// Event windows: a daily series flags the two days before 25 December, the day, and the day
// after; weekly data flags the week (Monday anchor) that contains the date.
func TestEventWindows(t *testing.T) {
	ev := Config{Events: []Event{{Name: "christmas", Dates: []string{"2026-12-25"}, Lead: 2, Lag: 1}}}
	start := time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC)
	set, err := NewSet(ev, Source{Key: "k", Start: start, Freq: series.Daily})
	if err != nil {
		t.Fatal(err)
	}
	for day := 1; day <= 31; day++ {
		r := rowByName(t, set, day-1, 1) // target period day−1 is December <day>
		on, before, after := r["event:christmas"], r["event:christmas:before"], r["event:christmas:after"]
		wantOn, wantBefore, wantAfter := b2f(day == 25), b2f(day == 23 || day == 24), b2f(day == 26)
		if on != wantOn || before != wantBefore || after != wantAfter {
			t.Errorf("December %d: on %v before %v after %v", day, on, before, after)
		}
	}
	wk, _ := NewSet(ev, Source{Key: "k", Start: time.Date(2026, 11, 30, 0, 0, 0, 0, time.UTC), Freq: series.Weekly})
	// Weeks start 30 Nov, 7, 14, 21 (contains the 25th), 28 Dec.
	for w, want := range []float64{0, 0, 0, 1, 0} {
		if got := rowByName(t, wk, w, 1)["event:christmas"]; got != want {
			t.Errorf("week %d: event %v, want %v", w, got, want)
		}
	}
}

// Fourier terms follow sin(2πkt/P), cos(2πkt/P) with t the absolute period number (FPP 3rd
// ed., section 7.4, from memory); two series starting at different dates agree on the same
// calendar period.
func TestFourierAbsolutePeriod(t *testing.T) {
	cfg := Config{Fourier: []FourierTerm{{Period: 365.25 / 7, Order: 2}}}
	a, _ := NewSet(cfg, Source{Key: "a", Start: time.Date(2025, 1, 6, 0, 0, 0, 0, time.UTC), Freq: series.Weekly})
	b, _ := NewSet(cfg, Source{Key: "b", Start: time.Date(2025, 3, 3, 0, 0, 0, 0, time.UTC), Freq: series.Weekly})
	ra := rowByName(t, a, 19, 1) // period 19 of a is 2025-05-19
	rb := rowByName(t, b, 11, 1) // period 11 of b is 2025-05-19
	for k, v := range ra {
		if math.Abs(v-rb[k]) > 1e-12 {
			t.Errorf("%s: %v vs %v", k, v, rb[k])
		}
	}
	tt := float64(a.base + 19)
	if got, want := ra["fourier52.1786:sin2"], math.Sin(4*math.Pi*tt/(365.25/7)); math.Abs(got-want) > 1e-12 {
		t.Errorf("sin2 = %v, want %v", got, want)
	}
}

// Rolling statistics of the window 1, 2, 3, 4: mean 2.5, min 1, max 4, sample standard
// deviation sqrt(5/3) (textbook definition with divisor n−1).
func TestRollingStatistics(t *testing.T) {
	set, _ := NewSet(Config{Windows: []int{4}, Stats: StatNames, Lags: []int{2}}, Source{Key: "k", Start: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Monthly})
	y := []float64{9, 1, 2, 3, 4}
	cols := set.Columns(1)
	dst := make([]float64, len(cols))
	if err := set.Fill(dst, cols, y, 5, 1); err != nil {
		t.Fatal(err)
	}
	want := []float64{3, 2.5, 1, 4, math.Sqrt(5.0 / 3)} // lag2 = y[3], then mean, min, max, std
	for k := range want {
		if math.Abs(dst[k]-want[k]) > 1e-12 {
			t.Errorf("%s = %v, want %v", set.names[cols[k]], dst[k], want[k])
		}
	}
	if got := set.Columns(3); len(got) != 4 {
		t.Errorf("step 3 may not use lag2: columns %v", got)
	}
}

// A missing covariate value is an error naming the series, the covariate and the period; so is
// a forecast period past the covariate's known values, and a declared covariate the series
// lacks.
func TestCovariateErrors(t *testing.T) {
	cfg := Config{Covariates: []string{"promo"}}
	start := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	cov := []float64{0, 1, math.NaN(), 0}
	set, _ := NewSet(cfg, Source{Key: "fenwick/tea/leeds", Start: start, Freq: series.Weekly, Covariates: map[string][]float64{"promo": cov}})
	dst := make([]float64, 1)
	err := set.Fill(dst, set.Columns(1), make([]float64, 4), 2, 1)
	if err == nil || !strings.Contains(err.Error(), "fenwick/tea/leeds") || !strings.Contains(err.Error(), `"promo" is missing for period 2026-01-19`) {
		t.Errorf("NaN covariate: %v", err)
	}
	err = set.Fill(dst, set.Columns(1), make([]float64, 4), 4, 1)
	if err == nil || !strings.Contains(err.Error(), "has no known value for period 2026-02-02") {
		t.Errorf("covariate not known ahead: %v", err)
	}
	_, err = NewSet(Config{Covariates: []string{"price"}}, Source{Key: "fenwick/tea/leeds", Start: start, Freq: series.Weekly})
	if err == nil || !strings.Contains(err.Error(), `covariate "price"`) {
		t.Errorf("undeclared covariate: %v", err)
	}
}

// Validate names the field; Defaults validate for every frequency.
func TestValidate(t *testing.T) {
	for _, f := range series.Frequencies {
		if err := Defaults(f).Validate(); err != nil {
			t.Errorf("Defaults(%s): %v", f, err)
		}
	}
	bad := map[string]Config{
		"features.lags[1]":                {Lags: []int{1, 0}},
		"features.calendar[0]":            {Calendar: []string{"hourOfDay"}},
		"features.events[0] (x).dates[0]": {Events: []Event{{Name: "x", Dates: []string{"25/12/2026"}}}},
		"features.fourier[0].order":       {Fourier: []FourierTerm{{Period: 4, Order: 3}}},
		"features.selection.filter":       {Selection: Selection{Filter: "entropy"}},
		"features.covariateLags":          {CovariateLags: []int{1}},
	}
	for field, c := range bad {
		if err := c.Validate(); err == nil || !strings.HasPrefix(err.Error(), field) {
			t.Errorf("%s: got %v", field, err)
		}
	}
}
