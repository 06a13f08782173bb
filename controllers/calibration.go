package controllers

import (
	"fmt"
	"math"
	"math/big"
	"strconv"
	"strings"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/coverage"
	"almanac.dev/almanac/trainer/summary"
)

// addCalibration folds one shard's calibration counts and sums into the run's (exact, as
// addAccuracy). An error is returned, and sums left as they were, when the shard's levels
// differ from the run's or a sum is not finite.
func addCalibration(sums *forecastingv1alpha1.CalibrationSums, c summary.Calibration) (*forecastingv1alpha1.CalibrationSums, error) {
	if c.Series == 0 {
		return sums, nil
	}
	if len(c.Below) != len(c.Levels) || len(c.PinballSum) != len(c.Levels) {
		return sums, fmt.Errorf("calibration has %d levels, %d counts and %d pinball sums", len(c.Levels), len(c.Below), len(c.PinballSum))
	}
	levels := make([]string, len(c.Levels))
	for j, l := range c.Levels {
		levels[j] = strconv.FormatFloat(l, 'g', -1, 64)
	}
	out := &forecastingv1alpha1.CalibrationSums{Levels: levels, Below: make([]int64, len(levels)), PinballSums: make([]string, len(levels)), BiasSum: "0"}
	if sums != nil {
		if strings.Join(sums.Levels, ",") != strings.Join(levels, ",") {
			return sums, fmt.Errorf("calibration levels %v do not match the run's %v", levels, sums.Levels)
		}
		out = sums.DeepCopy()
	}
	for j := range levels {
		p, err := addDecimal(out.PinballSums[j], c.PinballSum[j])
		if err != nil {
			return sums, fmt.Errorf("pinball sum of level %s: %w", levels[j], err)
		}
		out.PinballSums[j] = p
		out.Below[j] += int64(c.Below[j])
	}
	bias, err := addDecimal(out.BiasSum, c.BiasSum)
	if err != nil {
		return sums, fmt.Errorf("bias sum: %w", err)
	}
	out.BiasSum = bias
	if err := addExpectation(out, c, sums == nil); err != nil {
		return sums, err
	}
	out.Series += int64(c.Series)
	out.Points += int64(c.Points)
	return out, nil
}

// addExpectation folds the shard's expectation and pair counts into out (exact, as the other
// sums). The run's sums carry an expectation only while every shard folded so far sent one:
// first is true for the run's first shard, whose expectation (if any) starts the sums; a
// later shard without one drops it.
func addExpectation(out *forecastingv1alpha1.CalibrationSums, c summary.Calibration, first bool) error {
	if !c.HasExpectation() || (!first && out.Expected == nil) {
		out.Pairs, out.BelowPairs, out.Expected, out.ExpectedVariances, out.ExpectedPinballSums = 0, nil, nil, nil, nil
		out.ExpectedBiasSum, out.BacktestSeries, out.BacktestPoints, out.BacktestActuals = "", 0, 0, 0
		return nil
	}
	n := len(c.Levels)
	if first {
		out.BelowPairs, out.Expected = make([]int64, n), make([]string, n)
		out.ExpectedVariances, out.ExpectedPinballSums = make([]string, n), make([]string, n)
	}
	for j := range n {
		var err error
		if out.Expected[j], err = addDecimal(out.Expected[j], c.Expected[j]); err != nil {
			return fmt.Errorf("expected count of level %v: %w", c.Levels[j], err)
		}
		if out.ExpectedVariances[j], err = addDecimal(out.ExpectedVariances[j], c.ExpectedVar[j]); err != nil {
			return fmt.Errorf("expected variance of level %v: %w", c.Levels[j], err)
		}
		if out.ExpectedPinballSums[j], err = addDecimal(out.ExpectedPinballSums[j], c.ExpectedPinballSum[j]); err != nil {
			return fmt.Errorf("expected pinball sum of level %v: %w", c.Levels[j], err)
		}
		out.BelowPairs[j] += int64(c.BelowPairs[j])
	}
	b, err := addDecimal(out.ExpectedBiasSum, c.ExpectedBiasSum)
	if err != nil {
		return fmt.Errorf("expected bias sum: %w", err)
	}
	out.ExpectedBiasSum = b
	out.Pairs += int64(c.Pairs)
	out.BacktestSeries += int64(c.BacktestSeries)
	out.BacktestPoints += int64(c.BacktestPoints)
	out.BacktestActuals += int64(c.BacktestActuals)
	return nil
}

// hasExpectation: the run's sums carry an expectation for every level.
func hasExpectation(s *forecastingv1alpha1.CalibrationSums) bool {
	n := len(s.Levels)
	return len(s.Expected) == n && len(s.ExpectedVariances) == n && len(s.ExpectedPinballSums) == n && len(s.BelowPairs) == n
}

// ratFloat is the float64 nearest a decimal sum ("" is 0); ok false when it does not parse.
func ratFloat(s string) (float64, bool) {
	r, ok := new(big.Rat).SetString(orZero(s))
	if !ok {
		return 0, false
	}
	f, _ := r.Float64()
	return f, true
}

// calibrationOf turns the run's exact sums into the float counts and sums coverage.Judge
// reads (each sum rounded once, to the nearest float64). With nominal, or sums without an
// expectation, the expectation is the levels themselves (Expected n·τ, no backtest variance)
// but the pair counts are kept for the design effect.
func calibrationOf(sums *forecastingv1alpha1.CalibrationSums, nominal bool) (summary.Calibration, error) {
	c := summary.Calibration{Series: int(sums.Series), Points: int(sums.Points)}
	n := len(sums.Levels)
	if len(sums.Below) != n {
		return c, fmt.Errorf("calibration sums have %d levels and %d counts", n, len(sums.Below))
	}
	for j, l := range sums.Levels {
		tau, err := strconv.ParseFloat(l, 64)
		if err != nil {
			return c, fmt.Errorf("calibration level %q: %w", l, err)
		}
		c.Levels = append(c.Levels, tau)
		c.Below = append(c.Below, int(sums.Below[j]))
	}
	if !hasExpectation(sums) {
		return c, nil
	}
	c.Pairs = int(sums.Pairs)
	c.BelowPairs, c.Expected, c.ExpectedVar, c.ExpectedPinballSum = make([]int, n), make([]float64, n), make([]float64, n), make([]float64, n)
	for j := range n {
		c.BelowPairs[j] = int(sums.BelowPairs[j])
		c.Expected[j] = float64(sums.Points) * c.Levels[j]
		if !nominal {
			e, ok1 := ratFloat(sums.Expected[j])
			v, ok2 := ratFloat(sums.ExpectedVariances[j])
			if !ok1 || !ok2 {
				return c, fmt.Errorf("expectation of level %s does not parse", sums.Levels[j])
			}
			c.Expected[j], c.ExpectedVar[j] = e, v
		}
	}
	if !nominal {
		c.BacktestSeries, c.BacktestPoints, c.BacktestActuals = int(sums.BacktestSeries), int(sums.BacktestPoints), int(sums.BacktestActuals)
	}
	return c, nil
}

// withCalibration adds the calibration block to an accuracy status: per level the realized
// share below[j]/points, the mean scaled pinball loss pinballSums[j]/points, the promised share
// expected[j]/points, the backtest's mean scaled pinball loss over the backtested series
// (expectedPinballSums[j]/backtestActuals) and the design effect (coverage.Judge); the widest
// band's coverage (below[last] − below[0]) / points against its nominal level
// levels[last] − levels[0] and its promised share (an actual at or below the lowest quantile
// is also at or below the highest, the quantiles being increasing); the mean scaled bias
// biasSum/points and the backtest's expectedBiasSum/backtestActuals.
func withCalibration(acc *forecastingv1alpha1.AccuracyStatus, sums *forecastingv1alpha1.CalibrationSums) {
	if acc == nil || sums == nil || sums.Points == 0 {
		return
	}
	n := new(big.Rat).SetInt64(sums.Points)
	acc.Calibration = nil
	withExp := hasExpectation(sums)
	var judged []coverage.Level // the design effect needs the pair counts of an expectation
	if c, err := calibrationOf(sums, false); err == nil && withExp {
		judged = coverage.Judge(c, 0.05) // the design effect does not depend on the rate
	}
	for j, l := range sums.Levels {
		p, ok := new(big.Rat).SetString(orZero(sums.PinballSums[j]))
		if !ok {
			return
		}
		qc := forecastingv1alpha1.QuantileCalibration{
			Level: l, Realized: big.NewRat(sums.Below[j], sums.Points).FloatString(3), PinballLoss: p.Quo(p, n).FloatString(4)}
		if withExp {
			if e, ok := new(big.Rat).SetString(orZero(sums.Expected[j])); ok {
				qc.Expected = e.Quo(e, n).FloatString(3)
			}
			if e, ok := new(big.Rat).SetString(orZero(sums.ExpectedPinballSums[j])); ok && sums.BacktestActuals > 0 {
				qc.ExpectedPinballLoss = e.Quo(e, new(big.Rat).SetInt64(sums.BacktestActuals)).FloatString(4)
			}
		}
		if j < len(judged) {
			qc.DesignEffect = strconv.FormatFloat(judged[j].DesignEffect, 'f', 2, 64)
		}
		acc.Calibration = append(acc.Calibration, qc)
	}
	if k := len(sums.Levels); k >= 2 {
		lo, err1 := strconv.ParseFloat(sums.Levels[0], 64)
		hi, err2 := strconv.ParseFloat(sums.Levels[k-1], 64)
		if err1 == nil && err2 == nil && lo < 0.5 && hi > 0.5 {
			acc.BandCoverage = big.NewRat(sums.Below[k-1]-sums.Below[0], sums.Points).FloatString(3)
			acc.BandLevel = strconv.FormatFloat(hi-lo, 'f', 3, 64)
			if withExp {
				a, ok1 := new(big.Rat).SetString(orZero(sums.Expected[k-1]))
				b, ok2 := new(big.Rat).SetString(orZero(sums.Expected[0]))
				if ok1 && ok2 {
					d := a.Sub(a, b)
					acc.ExpectedBandCoverage = d.Quo(d, n).FloatString(3)
				}
			}
		}
	}
	if b, ok := new(big.Rat).SetString(orZero(sums.BiasSum)); ok {
		acc.Bias = b.Quo(b, n).FloatString(4)
	}
	if withExp && sums.BacktestActuals > 0 {
		if b, ok := new(big.Rat).SetString(orZero(sums.ExpectedBiasSum)); ok {
			acc.ExpectedBias = b.Quo(b, new(big.Rat).SetInt64(sums.BacktestActuals)).FloatString(4)
		}
		acc.BacktestSeries = sums.BacktestSeries
	}
	acc.CalibrationPoints = sums.Points
}

// calibrationVerdict judges a run's calibration and bias sums against spec.drift's
// calibrationFalseAlarmPercent (coverage.Judge: the promised counts of
// calibrationExpectation, the design effect, the backtest's own sampling error) and
// maxBiasPercent, each only when set. fired is true with the reason CalibrationOff or Biased
// and a message naming the levels or the bias.
//
// shared is how many such judgements share the false-alarm rate α = percent/100: each is made
// at α/shared (Bonferroni), so that a forecast as good as promised trips any of them with at
// most α; 1 for the input series, the number of hierarchy levels judged for those (levelCalibration).
// The bias bound is a fixed share of the scale, not a test, and is not split.
func calibrationVerdict(sums *forecastingv1alpha1.CalibrationSums, spec forecastingv1alpha1.DriftSpec, shared int) (fired bool, reason, message string) {
	if sums == nil || sums.Points == 0 {
		return false, "", ""
	}
	if spec.CalibrationFalseAlarmPercent > 0 {
		nominal := spec.CalibrationExpectation == forecastingv1alpha1.ExpectationNominal
		c, err := calibrationOf(sums, nominal)
		if err == nil {
			alpha := float64(spec.CalibrationFalseAlarmPercent) / 100 / float64(max(shared, 1))
			var off []string
			for j, l := range coverage.Judge(c, alpha) {
				if !l.Off {
					continue
				}
				what := "the level"
				if !l.Nominal && !nominal {
					what = "promised"
				}
				off = append(off, fmt.Sprintf("%d of %d actuals at or below the %s quantile (%.3f), %s %.3f ± %.3f (design effect %.2f)",
					sums.Below[j], sums.Points, sums.Levels[j], l.Realized, what, l.Expected, l.Tolerance, l.DesignEffect))
			}
			if len(off) > 0 {
				rate := fmt.Sprintf("%d%%", spec.CalibrationFalseAlarmPercent)
				if shared > 1 {
					rate += fmt.Sprintf(" shared by %d levels", shared)
				}
				return true, forecastingv1alpha1.ReasonCalibrationOff,
					fmt.Sprintf("calibration off (false-alarm rate %s, z = %.2f): %s", rate,
						coverage.Z(alpha, len(sums.Levels)), strings.Join(off, "; "))
			}
		}
	}
	if spec.MaxBiasPercent > 0 {
		b, ok := new(big.Rat).SetString(orZero(sums.BiasSum))
		if ok {
			mean, _ := b.Quo(b, new(big.Rat).SetInt64(sums.Points)).Float64()
			if math.Abs(mean)*100 > float64(spec.MaxBiasPercent) {
				return true, forecastingv1alpha1.ReasonBiased,
					fmt.Sprintf("mean scaled error (forecast − actual) %.4f over %d actuals is beyond ±%d%% of the scale", mean, sums.Points, spec.MaxBiasPercent)
			}
		}
	}
	return false, "", ""
}

// levelCalibration applies calibrationVerdict to each hierarchy level's calibration sums on
// its own and records each verdict in the level's CalibrationDrift (levels as levelDrift
// returned them, in h's order): CalibrationOff or Biased when it fires, CalibrationHeld when
// it does not; nothing when spec.drift sets neither rule or the level has no calibrated new
// actuals. The false-alarm rate is shared by the levels that have such actuals. It returns
// the AccuracyDrift reason for the levels, LevelCalibrationOff when some level's quantiles
// are off (else LevelBiased when some level is biased, else ""), and a message naming each
// level that fired with its verdict.
func levelCalibration(h *forecastingv1alpha1.HierarchyStatus, spec forecastingv1alpha1.DriftSpec, levels []forecastingv1alpha1.LevelAccuracy) (reason, message string) {
	if h == nil || (spec.CalibrationFalseAlarmPercent == 0 && spec.MaxBiasPercent == 0) {
		return "", ""
	}
	judged := 0
	for _, l := range h.Levels {
		if l.CalibrationSums != nil && l.CalibrationSums.Points > 0 {
			judged++
		}
	}
	var fired []string
	for i, l := range h.Levels {
		if i >= len(levels) || levels[i].Name != l.Name || l.CalibrationSums == nil || l.CalibrationSums.Points == 0 {
			continue
		}
		off, why, msg := calibrationVerdict(l.CalibrationSums, spec, judged)
		if !off {
			levels[i].CalibrationDrift = forecastingv1alpha1.ReasonCalibrationHeld
			continue
		}
		levels[i].CalibrationDrift = why
		fired = append(fired, fmt.Sprintf("level %s: %s", l.Name, msg))
		switch {
		case why == forecastingv1alpha1.ReasonCalibrationOff:
			reason = forecastingv1alpha1.ReasonLevelCalibrationOff
		case reason == "":
			reason = forecastingv1alpha1.ReasonLevelBiased
		}
	}
	return reason, strings.Join(fired, "; ")
}

// addStability folds one shard's movement sums into the run's (exact, as addAccuracy).
func addStability(sums *forecastingv1alpha1.StabilitySums, s summary.Stability) (*forecastingv1alpha1.StabilitySums, error) {
	if s.Series == 0 {
		return sums, nil
	}
	out := &forecastingv1alpha1.StabilitySums{MovementSum: "0"}
	if sums != nil {
		*out = *sums
	}
	m, err := addDecimal(out.MovementSum, s.MovementSum)
	if err != nil {
		return sums, fmt.Errorf("movement sum: %w", err)
	}
	out.MovementSum = m
	out.Series += int64(s.Series)
	out.Points += int64(s.Points)
	return out, nil
}

// withStability adds movement = movementSum / points to an accuracy status.
func withStability(acc *forecastingv1alpha1.AccuracyStatus, sums *forecastingv1alpha1.StabilitySums) {
	if acc == nil || sums == nil || sums.Points == 0 {
		return
	}
	if m, ok := new(big.Rat).SetString(orZero(sums.MovementSum)); ok {
		acc.Movement = m.Quo(m, new(big.Rat).SetInt64(sums.Points)).FloatString(4)
		acc.MovementPoints = sums.Points
	}
}
