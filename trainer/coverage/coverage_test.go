package coverage

import (
	"math"
	"math/rand/v2"
	"testing"

	"almanac.dev/almanac/trainer/summary"
)

// z90 is Φ⁻¹(0.9) = 1.2815516 (standard normal table).
const z90 = 1.2815515655446004

// correlated builds the calibration counts of one run: s series with h new actuals each,
// y_it = a_i + e_it with a_i ~ N(0, r) shared by the series and e_it ~ N(0, 1 − r) iid, so
// every actual is N(0, 1) and two actuals of one series correlate by r. The published
// quantiles are width·(−z90, 0, z90): with width 1 the true 0.1, 0.5 and 0.9 quantiles of
// N(0, 1), a correct 80% band. The expectation is nominal (Expected = n·τ).
func correlated(rng *rand.Rand, s, h int, r, width float64) summary.Calibration {
	levels := []float64{0.1, 0.5, 0.9}
	q := []float64{-z90 * width, 0, z90 * width}
	c := summary.Calibration{Levels: levels, Series: s, Points: s * h, Below: make([]int, 3), PinballSum: make([]float64, 3),
		BelowPairs: make([]int, 3), Expected: make([]float64, 3), ExpectedVar: make([]float64, 3), ExpectedPinballSum: make([]float64, 3),
		Pairs: s * h * (h - 1)}
	for range s {
		a := math.Sqrt(r) * rng.NormFloat64()
		var b [3]int
		for range h {
			y := a + math.Sqrt(1-r)*rng.NormFloat64()
			for j := range q {
				if y <= q[j] {
					b[j]++
				}
			}
		}
		for j := range b {
			c.Below[j] += b[j]
			c.BelowPairs[j] += b[j] * (b[j] - 1)
		}
	}
	for j, tau := range levels {
		c.Expected[j] = float64(c.Points) * tau
	}
	return c
}

// binomialOnly drops what the design effect needs: Judge then treats every actual as
// independent (the tolerance of the sixth session).
func binomialOnly(c summary.Calibration) summary.Calibration {
	c.BelowPairs, c.Expected, c.ExpectedVar, c.ExpectedPinballSum, c.Pairs = nil, nil, nil, nil, 0
	return c
}

func anyOff(ls []Level) bool {
	for _, l := range ls {
		if l.Off {
			return true
		}
	}
	return false
}

// TestDesignEffectOnCorrelatedActuals: 400 generated runs of 200 series × 6 actuals whose
// actuals correlate by r = 0.5 within a series (construction in correlated), a correct 80%
// band published, judged at a 5% false-alarm rate over the three levels. With the design
// effect (Kish 1965) a correct band is called off in at most about 5% of runs (we allow 8%
// for the Monte Carlo error of 400 runs: sd sqrt(0.05·0.95/400) = 1.1%); the binomial
// tolerance, which treats the 1200 actuals as independent, calls it off far more often
// (hits at the median correlate by (2/π)·arcsin(0.5) = 1/3 for a bivariate normal, Sheppard's
// formula, so deff ≈ 1 + 5/3 at that level: 25.8% of these runs). A band 0.6 as wide (true 0.9-level share Φ(0.6·z90) = 0.78) is still caught in
// every run. With independent actuals (r = 0) the design effect stays near 1.
func TestDesignEffectOnCorrelatedActuals(t *testing.T) {
	rng := rand.New(rand.NewPCG(19, 7))
	const runs = 400
	offDeff, offBinom, caught := 0, 0, 0
	var deff float64
	for range runs {
		c := correlated(rng, 200, 6, 0.5, 1)
		ls := Judge(c, 0.05)
		if anyOff(ls) {
			offDeff++
		}
		deff += ls[1].DesignEffect
		if anyOff(Judge(binomialOnly(c), 0.05)) {
			offBinom++
		}
		if anyOff(Judge(correlated(rng, 200, 6, 0.5, 0.6), 0.05)) {
			caught++
		}
	}
	rate, binom := float64(offDeff)/runs, float64(offBinom)/runs
	t.Logf("correct band called off: %.1f%% of runs with the design effect (mean deff at the median %.2f), %.1f%% with the binomial; narrow band caught in %d of %d",
		100*rate, deff/runs, 100*binom, caught, runs)
	if rate > 0.08 {
		t.Errorf("design effect: a correct band is off in %.1f%% of runs, want at most about 5%%", 100*rate)
	}
	if binom < 0.2 {
		t.Errorf("binomial tolerance off in only %.1f%% of runs: the construction is not correlated enough to show the need", 100*binom)
	}
	if math.Abs(deff/runs-(1+5.0/3)) > 0.25 {
		t.Errorf("mean design effect at the median %.2f, want about 1 + 5·(1/3) = 2.67", deff/runs)
	}
	if caught != runs {
		t.Errorf("narrow band caught in %d of %d runs", caught, runs)
	}
	ind := Judge(correlated(rng, 200, 6, 0, 1), 0.05)
	for _, l := range ind {
		if l.DesignEffect > 1.3 {
			t.Errorf("independent actuals: level %v design effect %.2f, want about 1", l.Level, l.DesignEffect)
		}
	}
}

// A backtest expectation moves the centre and adds its own sampling variance: 100 series with
// 4 new actuals each, each promising a 0.9-level share of 0.75 from 20 backtest points.
func TestJudgeBacktestExpectation(t *testing.T) {
	c := summary.Calibration{Levels: []float64{0.9}, Series: 100, Points: 400, Below: []int{300}, PinballSum: []float64{0},
		Pairs: 100 * 12, BelowPairs: []int{100 * 3 * 2}, Expected: []float64{300}, ExpectedVar: []float64{100 * 16 * 0.75 * 0.25 / 20},
		ExpectedPinballSum: []float64{0}, BacktestSeries: 100, BacktestPoints: 2000, BacktestActuals: 400}
	l := Judge(c, 0.05)[0]
	if l.Nominal || l.Expected != 0.75 || l.Off || !l.Judged {
		t.Errorf("at the promised share: %+v", l)
	}
	// every series 3 of 4 below: p̂ = 0.75, pairs 6 each, ρ = (0.5 − 0.5625)/0.1875 < 0 → 0
	if l.Rho != 0 || l.DesignEffect != 1 {
		t.Errorf("ρ %v deff %v, want 0 and 1", l.Rho, l.DesignEffect)
	}
	// tolerance: z·sqrt(400·0.75·0.25 + 15)/400 with z = Φ⁻¹(0.975) = 1.96
	if want := 1.959964 * math.Sqrt(75+15) / 400; math.Abs(l.Tolerance-want) > 1e-5 {
		t.Errorf("tolerance %v, want %v", l.Tolerance, want)
	}
	c.Expected = []float64{360} // promised 0.9: 300 of 400 is off
	if l := Judge(c, 0.05)[0]; !l.Off {
		t.Errorf("300 of 400 against a promise of 360: %+v", l)
	}
}
