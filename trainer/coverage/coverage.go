// Package coverage judges whether published quantiles covered new actuals as often as they
// promised, with a tolerance that allows for the correlation of one series' actuals across
// the horizon. The controller (spec.drift.calibrationFalseAlarmPercent) and the report use it.
package coverage

import (
	"math"

	"almanac.dev/almanac/trainer/summary"
)

// MinVariance is the least effective n·p·(1−p) for which a level is judged: the normal
// approximation to the binomial is commonly used when this is at least 5 (common practice, a
// textbook rule of thumb), n being the effective sample size n/deff.
const MinVariance = 5

// Level is the judgement of one quantile level.
type Level struct {
	Level float64
	// Realized is below/points; Expected the promised share (Expected/points, or the level
	// itself without an expectation); Nominal says which.
	Realized, Expected float64
	Nominal            bool
	// Rho is the estimated correlation of hits within a series (0..1), DesignEffect
	// 1 + Rho·pairs/points.
	Rho, DesignEffect float64
	// Tolerance is z times the standard error of the realized share around Expected;
	// Off is |Realized − Expected| > Tolerance. Judged is false when the effective sample is
	// too small for the normal approximation (MinVariance).
	Tolerance float64
	Judged    bool
	Off       bool
}

// Z is the normal quantile that makes a calibrated forecast trip Judge with probability about
// alpha over L levels: two-sided, Bonferroni, z = Φ⁻¹(1 − alpha/(2L)) = sqrt(2)·erfinv(1 − alpha/L).
func Z(alpha float64, levels int) float64 {
	return math.Sqrt2 * math.Erfinv(1-alpha/float64(max(levels, 1)))
}

// Judge compares, per level j, the count b_j of the N = c.Points actuals at or below the
// level-j quantile with the promised count E_j (c.Expected[j], or N·τ_j when c carries no
// expectation) at false-alarm rate alpha over all levels:
//
//	off_j  ⇔  |b_j − E_j| > z · sqrt( deff_j · N·p_j(1 − p_j) + V_j ),   p_j = E_j / N
//
// 1. Correlated actuals. The hits of one series at several horizons are positively correlated
// (a series that ran high stays high), so b_j is not Binomial(N, p_j): series are clusters of
// n_i actuals. Kish's design effect (Kish 1965, "Survey Sampling", section 5.4: for clusters
// with intra-class correlation ρ, Var = deff·Var_binomial, deff = 1 + (n̄ − 1)ρ; with unequal
// cluster sizes n̄ − 1 becomes Σ n_i(n_i − 1) / Σ n_i) gives
//
//	deff_j = 1 + ρ_j · c.Pairs / N.
//
// ρ_j is estimated from the same actuals by the moment estimator of the intra-class correlation
// of binary data (for exchangeable hits with share p, E[b_ij(b_ij − 1)] = n_i(n_i − 1)(p² +
// ρ·p(1 − p))):
//
//	ρ_j = ( c.BelowPairs[j] / c.Pairs − p̂_j² ) / ( p̂_j (1 − p̂_j) ),   p̂_j = b_j / N,
//
// clamped to [0, 1] (ρ = 1: every series counts once, the effective sample is the number of
// series weighted by size; ρ = 0: the binomial). With p̂_j, not p_j, in the estimator, a band
// that is simply too narrow everywhere does not inflate ρ. Without BelowPairs (older trainers)
// ρ = 0, the plain binomial.
//
// 2. Expectation error. A promised share from a backtest is itself estimated from m_i backtest
// points per series; its variance enters as V_j = c.ExpectedVar[j] · (1 + ρ_j (m̄ − 1)),
// m̄ = c.BacktestPoints / c.BacktestSeries, the same design effect with the backtest's cluster
// size (backtest points of one series are correlated at least as much as new actuals; ρ_j is
// our proxy for it). Nominal levels have V = 0.
//
// 3. The variance N·p_j(1 − p_j) uses the pooled share p_j; Σ_i n_i p_ij(1 − p_ij), the exact
// variance for per-series shares, is at most that (Jensen), so pooling errs to the wide side.
// Levels with N/deff_j · p_j(1 − p_j) < MinVariance are not judged.
func Judge(c summary.Calibration, alpha float64) []Level {
	if c.Points == 0 || len(c.Below) != len(c.Levels) {
		return nil
	}
	n := float64(c.Points)
	z := Z(alpha, len(c.Levels))
	withExp := c.HasExpectation()
	mbar := 1.0
	if withExp && c.BacktestSeries > 0 {
		mbar = float64(c.BacktestPoints) / float64(c.BacktestSeries)
	}
	out := make([]Level, len(c.Levels))
	for j, tau := range c.Levels {
		l := Level{Level: tau, Realized: float64(c.Below[j]) / n, Expected: tau, Nominal: true, DesignEffect: 1}
		e := n * tau
		if withExp {
			e = c.Expected[j]
			l.Expected, l.Nominal = e/n, false
		}
		if len(c.BelowPairs) == len(c.Levels) && c.Pairs > 0 {
			ph := l.Realized
			if ph > 0 && ph < 1 {
				l.Rho = (float64(c.BelowPairs[j])/float64(c.Pairs) - ph*ph) / (ph * (1 - ph))
				l.Rho = math.Min(math.Max(l.Rho, 0), 1)
			}
			l.DesignEffect = 1 + l.Rho*float64(c.Pairs)/n
		}
		p := math.Min(math.Max(e/n, 0), 1)
		v := l.DesignEffect * n * p * (1 - p)
		if withExp {
			v += c.ExpectedVar[j] * (1 + l.Rho*(mbar-1))
		}
		l.Judged = n/l.DesignEffect*p*(1-p) >= MinVariance
		l.Tolerance = z * math.Sqrt(v) / n
		l.Off = l.Judged && math.Abs(float64(c.Below[j])-e) > z*math.Sqrt(v)
		out[j] = l
	}
	return out
}
