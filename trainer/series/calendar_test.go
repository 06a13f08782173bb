package series

import (
	"testing"
	"time"
)

func day(y int, m time.Month, d int) time.Time { return time.Date(y, m, d, 0, 0, 0, 0, time.UTC) }

// Period labels checked by hand against a printed calendar (2024-03-06 is a Wednesday).
func TestPeriodStart(t *testing.T) {
	in := time.Date(2024, 3, 6, 15, 42, 7, 0, time.UTC)
	cases := []struct {
		c    Calendar
		want time.Time
	}{
		{Calendar{Freq: Hourly}, time.Date(2024, 3, 6, 15, 0, 0, 0, time.UTC)},
		{Calendar{Freq: Daily}, day(2024, 3, 6)},
		{Calendar{Freq: Weekly, Anchor: time.Monday}, day(2024, 3, 4)},
		{Calendar{Freq: Weekly, Anchor: time.Sunday}, day(2024, 3, 3)},
		{Calendar{Freq: Weekly, Anchor: time.Wednesday}, day(2024, 3, 6)},
		{Calendar{Freq: Weekly, Anchor: time.Thursday}, day(2024, 2, 29)},
		{Calendar{Freq: Monthly}, day(2024, 3, 1)},
		{Calendar{Freq: Quarterly}, day(2024, 1, 1)},
		{Calendar{Freq: Yearly}, day(2024, 1, 1)},
	}
	for _, c := range cases {
		if got := c.c.PeriodStart(in); !got.Equal(c.want) {
			t.Errorf("%s/%s: PeriodStart = %v, want %v", c.c.Freq, c.c.Anchor, got, c.want)
		}
		if c.c.OnGrid(in) {
			t.Errorf("%s: %v reported on the grid", c.c.Freq, in)
		}
		if !c.c.OnGrid(c.want) {
			t.Errorf("%s: label %v reported off the grid", c.c.Freq, c.want)
		}
	}
	// An offset timestamp is the same instant in UTC: 01:00+01:00 is midnight UTC.
	if !(Calendar{Freq: Daily}).OnGrid(time.Date(2024, 3, 6, 1, 0, 0, 0, time.FixedZone("", 3600))) {
		t.Error("01:00+01:00 should be on the daily grid (00:00 UTC)")
	}
}

// Ordinal differences agree with Frequency.Step for every frequency and anchor, across year
// ends, leap days and dates before 1970.
func TestOrdinalAgreesWithStep(t *testing.T) {
	starts := []time.Time{day(1969, 12, 29), day(2023, 12, 25), day(2024, 2, 26), day(1900, 1, 1), day(1600, 1, 3), day(2500, 6, 1)}
	for _, f := range Frequencies {
		for a := time.Sunday; a <= time.Saturday; a++ {
			if f != Weekly && a > time.Sunday {
				break
			}
			c := Calendar{Freq: f, Anchor: a}
			for _, s := range starts {
				base := c.PeriodStart(s)
				for k := -30; k <= 400; k += 7 {
					p := f.Step(base, k)
					if !c.OnGrid(p) {
						t.Fatalf("%s/%s: Step(%v, %d) = %v is off the grid", f, a, base, k, p)
					}
					if l := c.Label(c.Ordinal(p)); !l.Equal(p) {
						t.Fatalf("%s/%s: Label(Ordinal(%v)) = %v", f, a, p, l)
					}
					if d := c.Ordinal(p) - c.Ordinal(base); d != int64(k) {
						t.Fatalf("%s/%s: Ordinal(%v) - Ordinal(%v) = %d, want %d", f, a, p, base, d, k)
					}
				}
			}
		}
	}
}

func TestParseFrequencyAndWeekday(t *testing.T) {
	if f, err := ParseFrequency("Weekly"); err != nil || f != Weekly {
		t.Errorf("Weekly: %v %v", f, err)
	}
	for _, bad := range []string{"", "weekly", "fortnightly"} {
		if _, err := ParseFrequency(bad); err == nil {
			t.Errorf("ParseFrequency(%q) accepted", bad)
		}
	}
	if d, err := ParseWeekday("sunday"); err != nil || d != time.Sunday {
		t.Errorf("sunday: %v %v", d, err)
	}
	if d, err := ParseWeekday(""); err != nil || d != DefaultWeekAnchor {
		t.Errorf("empty: %v %v", d, err)
	}
	if _, err := ParseWeekday("Mon"); err == nil {
		t.Error("Mon accepted")
	}
}
