package controllers

import (
	"fmt"
	"math"
	"math/big"
	"strconv"
	"strings"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
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
	out.Series += int64(c.Series)
	out.Points += int64(c.Points)
	return out, nil
}

// withCalibration adds the calibration block to an accuracy status: per level the realized
// share below[j]/points and the mean scaled pinball loss pinballSums[j]/points, the widest
// band's coverage (below[last] − below[0]) / points against its nominal level
// levels[last] − levels[0] (an actual at or below the lowest quantile is also at or below the
// highest, the quantiles being increasing), and the mean scaled bias biasSum/points.
func withCalibration(acc *forecastingv1alpha1.AccuracyStatus, sums *forecastingv1alpha1.CalibrationSums) {
	if acc == nil || sums == nil || sums.Points == 0 {
		return
	}
	n := new(big.Rat).SetInt64(sums.Points)
	acc.Calibration = nil
	for j, l := range sums.Levels {
		p, ok := new(big.Rat).SetString(orZero(sums.PinballSums[j]))
		if !ok {
			return
		}
		acc.Calibration = append(acc.Calibration, forecastingv1alpha1.QuantileCalibration{
			Level: l, Realized: big.NewRat(sums.Below[j], sums.Points).FloatString(3), PinballLoss: p.Quo(p, n).FloatString(4)})
	}
	if k := len(sums.Levels); k >= 2 {
		lo, err1 := strconv.ParseFloat(sums.Levels[0], 64)
		hi, err2 := strconv.ParseFloat(sums.Levels[k-1], 64)
		if err1 == nil && err2 == nil && lo < 0.5 && hi > 0.5 {
			acc.BandCoverage = big.NewRat(sums.Below[k-1]-sums.Below[0], sums.Points).FloatString(3)
			acc.BandLevel = strconv.FormatFloat(hi-lo, 'f', 3, 64)
		}
	}
	if b, ok := new(big.Rat).SetString(orZero(sums.BiasSum)); ok {
		acc.Bias = b.Quo(b, n).FloatString(4)
	}
	acc.CalibrationPoints = sums.Points
}

// minBinomialVariance is the least n·τ·(1−τ) for which a level's count is judged: the normal
// approximation to the binomial is commonly used when this is at least 5 (common practice, a
// textbook rule of thumb).
const minBinomialVariance = 5

// coverageTolerance is the z such that a calibrated forecast trips the calibration check with
// probability at most alpha over L levels: if the n actuals are independent and the τ quantile
// is right, the count k below it is Binomial(n, τ), approximately normal with mean n·τ and
// variance n·τ·(1−τ) (de Moivre–Laplace), so P(|k − n·τ| > z·sqrt(n·τ·(1−τ))) ≈ 2(1 − Φ(z));
// Bonferroni over L levels gives 2(1 − Φ(z)) = alpha/L, z = Φ⁻¹(1 − alpha/(2L)) =
// sqrt(2)·erfinv(1 − alpha/L). Actuals of one series at several horizons are positively
// correlated, which widens the true spread of k: the check then errs on the side of alarms.
func coverageTolerance(alpha float64, levels int) float64 {
	return math.Sqrt2 * math.Erfinv(1-alpha/float64(levels))
}

// calibrationVerdict judges a run's calibration and bias sums against spec.drift's
// calibrationFalseAlarmPercent and maxBiasPercent (each only when set). fired is true with
// the reason CalibrationOff or Biased and a message naming the levels or the bias.
func calibrationVerdict(sums *forecastingv1alpha1.CalibrationSums, spec forecastingv1alpha1.DriftSpec) (fired bool, reason, message string) {
	if sums == nil || sums.Points == 0 {
		return false, "", ""
	}
	n := float64(sums.Points)
	if spec.CalibrationFalseAlarmPercent > 0 {
		z := coverageTolerance(float64(spec.CalibrationFalseAlarmPercent)/100, len(sums.Levels))
		var off []string
		for j, l := range sums.Levels {
			tau, err := strconv.ParseFloat(l, 64)
			if err != nil {
				continue
			}
			v := n * tau * (1 - tau)
			if v < minBinomialVariance {
				continue
			}
			if d := float64(sums.Below[j]) - n*tau; math.Abs(d) > z*math.Sqrt(v) {
				off = append(off, fmt.Sprintf("%d of %d actuals at or below the %s quantile, expected %.0f ± %.0f",
					sums.Below[j], sums.Points, l, n*tau, z*math.Sqrt(v)))
			}
		}
		if len(off) > 0 {
			return true, forecastingv1alpha1.ReasonCalibrationOff,
				fmt.Sprintf("calibration off (false-alarm rate %d%%, z = %.2f): %s", spec.CalibrationFalseAlarmPercent, z, strings.Join(off, "; "))
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
