package series

import (
	"math"
	"slices"
	"strings"
	"testing"
	"time"
)

var nan = math.NaN()

func mk(v ...float64) *Series {
	return &Series{Key: "item-7@depot-north", Start: time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC), Freq: Monthly, Values: v}
}

// Cleaning steps, each checked by hand; rules are those documented on Clean (common practice).
func TestClean(t *testing.T) {
	s := mk(nan, 0, 0, 4, -2, nan, nan, 10, nan)
	if err := Clean(s, CleanRules{NonNegative: true, TrimLeadingZeros: true, MaxGapFraction: 0.5}); err != nil {
		t.Fatal(err)
	}
	// after trimming 1 NaN and 2 zeros: 4, 0 (was −2), gap, gap, 10, gap.
	// interpolation 0 -> 10 over 3 steps: 10/3, 20/3; trailing gap repeats 10.
	want := []float64{4, 0, 10.0 / 3, 20.0 / 3, 10, 10}
	for i := range want {
		if math.Abs(s.Values[i]-want[i]) > 1e-12 {
			t.Fatalf("values %v, want %v", s.Values, want)
		}
	}
	if !s.Start.Equal(time.Date(2024, 4, 1, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("start %v, want 2024-04-01 (three periods trimmed)", s.Start)
	}
	if len(s.Notes) != 5 {
		t.Errorf("notes %q, want 5 decisions", s.Notes)
	}
}

func TestCleanRejects(t *testing.T) {
	cases := map[string]struct {
		s    *Series
		r    CleanRules
		want string
	}{
		"infinite": {mk(1, math.Inf(1)), CleanRules{}, "index 1 is infinite"},
		"empty":    {mk(nan, nan), CleanRules{}, "no observed values"},
		"gaps":     {mk(1, nan, nan, 4), CleanRules{}, "2 of 4 values missing"},
		"short":    {mk(1, 2), CleanRules{MinLength: 3}, "fewer than the 3 required"},
	}
	for name, c := range cases {
		err := Clean(c.s, c.r)
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), "item-7@depot-north") {
			t.Errorf("%s: err %v, want one naming the series and %q", name, err, c.want)
		}
	}
}

func TestCleanAllZeroKept(t *testing.T) {
	s := mk(0, 0, 0)
	if err := Clean(s, CleanRules{TrimLeadingZeros: true}); err != nil {
		t.Fatal(err)
	}
	if len(s.Values) != 3 || !slices.Contains(s.Notes, "all values are zero") {
		t.Errorf("values %v notes %q", s.Values, s.Notes)
	}
}
