package stationarity

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestKPSSByHand: y = 1, 2, 3, 4 with no lags has e = (-1.5, -0.5, 0.5, 1.5), partial sums
// (-1.5, -2, -1.5, 0), sum S^2 = 8.5, s^2 = 5/4, eta = 8.5 / (16 * 1.25) = 0.425
// (Kwiatkowski et al. 1992, eq. 11 worked by hand).
func TestKPSSByHand(t *testing.T) {
	if got := KPSS([]float64{1, 2, 3, 4}, 0); math.Abs(got-0.425) > 1e-15 {
		t.Errorf("KPSS = %v, want 0.425", got)
	}
	// With one lag: sum e_t e_{t-1} = 0.75 - 0.25 + 0.75 = 1.25, weight 1/2, so
	// s^2 = (5 + 2 * 0.5 * 1.25) / 4 = 1.5625 and eta = 8.5 / 25 = 0.34.
	if got := KPSS([]float64{1, 2, 3, 4}, 1); math.Abs(got-0.34) > 1e-15 {
		t.Errorf("KPSS(lag 1) = %v, want 0.34", got)
	}
}

// TestDiffsOnSimulatedSeries: white noise needs no difference, a random walk one and an
// integrated random walk two (KPSS at 5%; fixed PCG seed).
func TestDiffsOnSimulatedSeries(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	wn, rw, irw := make([]float64, 200), make([]float64, 200), make([]float64, 200)
	a, b := 0.0, 0.0
	for i := range wn {
		e := rng.NormFloat64()
		wn[i] = e
		a += e
		rw[i] = a
		b += a
		irw[i] = b
	}
	for name, c := range map[string]struct {
		y    []float64
		want int
	}{"white noise": {wn, 0}, "random walk": {rw, 1}, "integrated": {irw, 2}} {
		if got := Diffs(c.y, 2); got != c.want {
			t.Errorf("%s: Diffs = %d, want %d", name, got, c.want)
		}
	}
}

// TestSeasonalStrength: a pure sine season of period 12 plus small noise is strongly seasonal,
// white noise is not.
func TestSeasonalStrength(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	s, wn := make([]float64, 96), make([]float64, 96)
	for i := range s {
		s[i] = 10*math.Sin(2*math.Pi*float64(i)/12) + rng.NormFloat64()
		wn[i] = rng.NormFloat64()
	}
	if f := SeasonalStrength(s, 12); f < 0.9 || SeasonalDiffs(s, 12) != 1 {
		t.Errorf("seasonal series: strength %v", f)
	}
	if f := SeasonalStrength(wn, 12); f > 0.5 || SeasonalDiffs(wn, 12) != 0 {
		t.Errorf("white noise: strength %v", f)
	}
}
