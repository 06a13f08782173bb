package stl

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// stlTestSeries is a smooth seasonal series: level 100, slope 0.3 per step, a period-12 sine
// of amplitude 10 and N(0, 1) noise (fixed PCG seed).
func stlTestSeries(n int) []float64 {
	rng := rand.New(rand.NewPCG(7, 11))
	y := make([]float64, n)
	for t := range y {
		y[t] = 100 + 0.3*float64(t) + 10*math.Sin(2*math.Pi*float64(t)/12) + rng.NormFloat64()
	}
	return y
}

// TestSTLRejectsBadInput: misfits are errors naming what is wrong.
func TestSTLRejectsBadInput(t *testing.T) {
	y := stlTestSeries(60)
	nan := append([]float64(nil), y...)
	nan[9] = math.NaN()
	for name, c := range map[string]struct {
		y    []float64
		m    int
		o    Options
		want string
	}{
		"period 1":          {y, 1, Options{Periodic: true}, "period 1"},
		"two periods":       {y[:24], 12, Options{Periodic: true}, "more than two periods"},
		"NaN":               {nan, 12, Options{Periodic: true}, "observation 10"},
		"no seasonal span":  {y, 12, Options{}, "SeasonalWindow"},
		"degree out of set": {y, 12, Options{SeasonalWindow: 7, TrendDegree: 3}, "degree 3"},
	} {
		if _, err := Decompose(c.y, c.m, c.o); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", name, err, c.want)
		}
	}
}

// TestSTLRobustIgnoresOutlier: with the outer loop, one gross outlier gets robustness weight 0
// and stays in the remainder, while the trend and seasonal around it are those of the clean
// series (the purpose of the robustness loop, Cleveland et al. 1990); without
// the outer loop the outlier leaks into the trend.
func TestSTLRobustIgnoresOutlier(t *testing.T) {
	clean := stlTestSeries(120)
	dirty := append([]float64(nil), clean...)
	const at, spike = 60, 80.0
	dirty[at] += spike
	opt := Options{SeasonalWindow: 7, Robust: true}
	c, err := Decompose(clean, 12, opt)
	if err != nil {
		t.Fatal(err)
	}
	d, err := Decompose(dirty, 12, opt)
	if err != nil {
		t.Fatal(err)
	}
	if d.Weights[at] != 0 {
		t.Errorf("outlier weight %v, want 0", d.Weights[at])
	}
	if r := d.Remainder[at] - c.Remainder[at]; math.Abs(r-spike) > 0.1*spike {
		t.Errorf("remainder at the outlier moved by %v, want about %v", r, spike)
	}
	worst := 0.0
	for i := range clean {
		worst = math.Max(worst, math.Abs(d.Trend[i]-c.Trend[i]))
	}
	if worst > 0.5 {
		t.Errorf("robust trend moved by up to %v (noise sd 1)", worst)
	}
	plain, err := Decompose(dirty, 12, Options{SeasonalWindow: 7})
	if err != nil {
		t.Fatal(err)
	}
	if leak := plain.Trend[at] - c.Trend[at]; leak < 2 {
		t.Errorf("non-robust trend moved by only %v at the outlier; the check above would not tell robust from plain", leak)
	}
}

// TestSTLPeriodicSeasonRepeats: with Periodic the seasonal component is identical in every
// period, and with a seasonal span of 7 it is not (the series' noise differs per period).
func TestSTLPeriodicSeasonRepeats(t *testing.T) {
	y := stlTestSeries(96)
	p, err := Decompose(y, 12, Options{Periodic: true})
	if err != nil {
		t.Fatal(err)
	}
	for i := 12; i < len(y); i++ {
		if p.Seasonal[i] != p.Seasonal[i-12] {
			t.Fatalf("periodic seasonal differs at t=%d: %v vs %v", i+1, p.Seasonal[i], p.Seasonal[i-12])
		}
	}
	w, err := Decompose(y, 12, Options{SeasonalWindow: 7})
	if err != nil {
		t.Fatal(err)
	}
	same := true
	for i := 12; i < len(y); i++ {
		same = same && w.Seasonal[i] == w.Seasonal[i-12]
	}
	if same {
		t.Error("seasonal span 7 gave a periodic seasonal component")
	}
	// The sine's amplitude is 10: the periodic seasonal's range is close to 20.
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range p.Seasonal[:12] {
		lo, hi = math.Min(lo, v), math.Max(hi, v)
	}
	if hi-lo < 17 || hi-lo > 23 {
		t.Errorf("periodic seasonal range %v, want about 20", hi-lo)
	}
}

// BenchmarkSTL decomposes a monthly series of M3 monthly length (126) as the seasonal-strength
// test does (seasonal span 11, as in stationarity.SeasonalStrength).
func BenchmarkSTL(b *testing.B) {
	y := stlTestSeries(126)
	for b.Loop() {
		if _, err := Decompose(y, 12, Options{SeasonalWindow: 11}); err != nil {
			b.Fatal(err)
		}
	}
}

// TestMSTLParts: the components add back up to y; too short a series or a non-finite period is
// an error naming the problem; a period with fewer than two cycles is dropped.
func TestMSTLParts(t *testing.T) {
	y := make([]float64, 24*7*3)
	rng := rand.New(rand.NewPCG(3, 5))
	for i := range y {
		y[i] = 50 + 10*math.Sin(2*math.Pi*float64(i)/24) + 5*math.Cos(2*math.Pi*float64(i)/168) + rng.NormFloat64()
	}
	d, err := MSTL(y, []float64{168, 24, 24}, MSTLOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if len(d.Periods) != 2 || d.Periods[0] != 24 || d.Periods[1] != 168 {
		t.Fatalf("periods %v, want [24 168]", d.Periods)
	}
	for i, v := range y {
		sum := d.Trend[i] + d.Seasonal[0][i] + d.Seasonal[1][i] + d.Remainder[i]
		if math.Abs(sum-v) > 1e-9 {
			t.Fatalf("t=%d: components add to %v, y = %v", i, sum, v)
		}
	}
	d, err = MSTL(y[:300], []float64{24, 168}, MSTLOptions{})
	if err != nil || len(d.Periods) != 1 {
		t.Errorf("300 hours: periods %v, err %v; want 168 dropped", d.Periods, err)
	}
	if _, err := MSTL(y[:40], []float64{24}, MSTLOptions{}); err == nil || !strings.Contains(err.Error(), "two full cycles") {
		t.Errorf("40 hours, period 24: err %v", err)
	}
	if _, err := MSTL(y, []float64{math.NaN()}, MSTLOptions{}); err == nil || !strings.Contains(err.Error(), "not finite") {
		t.Errorf("NaN period: err %v", err)
	}
	f := d.SeasonalForecast(30)
	if f[0] != d.Seasonal[0][300-24] || f[24] != f[0] {
		t.Errorf("seasonal forecast does not repeat the last cycle: %v", f[:2])
	}
}

// BenchmarkMSTLHourly decomposes 960 hours (M4 hourly's longest training length) with periods
// 24 and 168.
func BenchmarkMSTLHourly(b *testing.B) {
	y := make([]float64, 960)
	for i := range y {
		y[i] = 50 + 10*math.Sin(2*math.Pi*float64(i)/24) + 5*math.Cos(2*math.Pi*float64(i)/168)
	}
	for b.Loop() {
		if _, err := MSTL(y, []float64{24, 168}, MSTLOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}
