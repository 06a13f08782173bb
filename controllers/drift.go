package controllers

import (
	"fmt"
	"math"
	"math/big"
	"strconv"
	"strings"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// addAccuracy folds one shard's accuracy sums into the run's sums and returns the new sums.
//
// The error sums are kept as exact rationals and written as exact decimal strings: every float64
// is a dyadic rational, so SetFloat64 is exact and a finite sum of them has a finite decimal
// expansion. Folding is therefore exact and independent of the order in which shards finish,
// which plain float64 addition is not (it is not associative). An error is returned, and sums is
// left as it was, when the shard reports a different metric or a sum that is not finite.
func addAccuracy(sums *forecastingv1alpha1.AccuracySums, a summary.Accuracy) (*forecastingv1alpha1.AccuracySums, error) {
	out := &forecastingv1alpha1.AccuracySums{ExpectedSum: "0", RealizedSum: "0"}
	if sums != nil {
		*out = *sums
	}
	if out.Metric != "" && a.Metric != "" && out.Metric != a.Metric {
		return sums, fmt.Errorf("accuracy metric %q does not match the run's %q", a.Metric, out.Metric)
	}
	exp, err := addDecimal(out.ExpectedSum, a.ExpectedSum)
	if err != nil {
		return sums, fmt.Errorf("expected sum: %w", err)
	}
	realized, err := addDecimal(out.RealizedSum, a.RealizedSum)
	if err != nil {
		return sums, fmt.Errorf("realized sum: %w", err)
	}
	expLog, err := addDecimal(out.ExpectedLogSum, a.ExpectedLogSum)
	if err != nil {
		return sums, fmt.Errorf("expected log sum: %w", err)
	}
	realizedLog, err := addDecimal(out.RealizedLogSum, a.RealizedLogSum)
	if err != nil {
		return sums, fmt.Errorf("realized log sum: %w", err)
	}
	if out.Metric == "" {
		out.Metric = a.Metric
	}
	out.ExpectedSum, out.RealizedSum = exp, realized
	out.ExpectedLogSum, out.RealizedLogSum = expLog, realizedLog
	out.LogEvaluated += int64(a.LogEvaluated)
	out.Evaluated += int64(a.Evaluated)
	out.EvaluatedPoints += int64(a.EvaluatedPoints)
	out.Drifted += int64(a.Drifted)
	return out, nil
}

// addDecimal returns the exact decimal string of dec + f.
func addDecimal(dec string, f float64) (string, error) {
	x, ok := new(big.Rat).SetString(orZero(dec))
	if !ok {
		return "", fmt.Errorf("%q is not a decimal number", dec)
	}
	y := new(big.Rat)
	if y.SetFloat64(f) == nil {
		return "", fmt.Errorf("%v is not finite", f)
	}
	return exactDecimal(x.Add(x, y)), nil
}

func orZero(s string) string {
	if s == "" {
		return "0"
	}
	return s
}

// exactDecimal writes r with as many decimal places as its value needs. A rational whose
// denominator is 2^a * 5^b has exactly max(a, b) decimal places; any other rational (which a
// sum of float64 values never is) is rounded to 40 places.
func exactDecimal(r *big.Rat) string {
	d := new(big.Int).Set(r.Denom())
	places := 0
	for _, p := range []int64{2, 5} {
		n, pb, m := 0, big.NewInt(p), new(big.Int)
		for {
			q, rem := new(big.Int).QuoRem(d, pb, m)
			if rem.Sign() != 0 {
				break
			}
			d, n = q, n+1
		}
		places = max(places, n)
	}
	if d.Cmp(big.NewInt(1)) != 0 {
		places = 40
	}
	s := r.FloatString(places)
	if strings.Contains(s, ".") {
		s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	}
	return s
}

// accuracyStatus turns the sums into the displayed accuracy block:
//
//	expected = ExpectedSum / Evaluated
//	realized = RealizedSum / Evaluated
//	ratio    = realized / expected = RealizedSum / ExpectedSum
//
// (means of per-series errors, as documented in trainer/summary), and the geometric means
//
//	expectedGeometric = exp(ExpectedLogSum / LogEvaluated)
//	realizedGeometric = exp(RealizedLogSum / LogEvaluated)
//	geometricRatio    = exp((RealizedLogSum − ExpectedLogSum) / LogEvaluated)
//
// (the last is the geometric mean of the per-series ratios realized/expected), rounded to 4
// and 3 decimal places for display only. It returns nil when nothing was evaluated.
func accuracyStatus(sums *forecastingv1alpha1.AccuracySums, run string) *forecastingv1alpha1.AccuracyStatus {
	if sums == nil || sums.Evaluated == 0 {
		return nil
	}
	exp, ok1 := new(big.Rat).SetString(orZero(sums.ExpectedSum))
	realized, ok2 := new(big.Rat).SetString(orZero(sums.RealizedSum))
	if !ok1 || !ok2 {
		return nil
	}
	n := new(big.Rat).SetInt64(sums.Evaluated)
	out := &forecastingv1alpha1.AccuracyStatus{
		Metric:          forecastingv1alpha1.ErrorMetric(sums.Metric),
		Expected:        new(big.Rat).Quo(exp, n).FloatString(4),
		Realized:        new(big.Rat).Quo(realized, n).FloatString(4),
		EvaluatedSeries: sums.Evaluated,
		EvaluatedPoints: sums.EvaluatedPoints,
		DriftedSeries:   sums.Drifted,
		Run:             run,
	}
	if exp.Sign() > 0 {
		out.Ratio = new(big.Rat).Quo(realized, exp).FloatString(3)
	}
	if g, ok := geometric(sums); ok {
		out.ExpectedGeometric = strconv.FormatFloat(g.expected, 'f', 4, 64)
		out.RealizedGeometric = strconv.FormatFloat(g.realized, 'f', 4, 64)
		out.GeometricRatio = strconv.FormatFloat(g.ratio, 'f', 3, 64)
		out.GeometricSeries = sums.LogEvaluated
	}
	return out
}

// geometricMeans are the geometric means of a run's accuracy sums, and logRatio the exact
// difference RealizedLogSum − ExpectedLogSum they compare.
type geometricMeans struct {
	expected, realized, ratio float64
	logRatio                  *big.Rat
}

// geometric computes the geometric means of sums; ok is false when no series has both errors
// above 0 or a log sum is not a decimal number.
func geometric(sums *forecastingv1alpha1.AccuracySums) (geometricMeans, bool) {
	if sums == nil || sums.LogEvaluated == 0 {
		return geometricMeans{}, false
	}
	e, ok1 := new(big.Rat).SetString(orZero(sums.ExpectedLogSum))
	r, ok2 := new(big.Rat).SetString(orZero(sums.RealizedLogSum))
	if !ok1 || !ok2 {
		return geometricMeans{}, false
	}
	n := new(big.Rat).SetInt64(sums.LogEvaluated)
	meanE, _ := new(big.Rat).Quo(e, n).Float64()
	meanR, _ := new(big.Rat).Quo(r, n).Float64()
	d := new(big.Rat).Sub(r, e)
	meanD, _ := new(big.Rat).Quo(d, n).Float64()
	return geometricMeans{expected: math.Exp(meanE), realized: math.Exp(meanR), ratio: math.Exp(meanD), logRatio: d}, true
}

// driftVerdict judges a run's accuracy sums against the portfolio's drift spec.
//
// It returns the AccuracyDrift condition status, reason and message:
//   - Unknown, NotEvaluated: no run has evaluated any series yet;
//   - Unknown, TooFewPoints: fewer than minEvaluatedPoints new actuals were compared;
//   - True, AboveThreshold: the realized aggregate is above thresholdPercent/100 times the
//     expected one. With aggregate GeometricMean (the default) that is
//     RealizedLogSum − ExpectedLogSum > LogEvaluated · ln(thresholdPercent/100), the log sums
//     compared exactly; with Mean (or sums from trainers that sent no log sums) it is
//     RealizedSum * 100 > thresholdPercent * ExpectedSum, compared exactly (the same as
//     realized/expected > thresholdPercent/100, without dividing);
//   - False, WithinThreshold: otherwise.
func driftVerdict(sums *forecastingv1alpha1.AccuracySums, spec forecastingv1alpha1.DriftSpec) (metav1.ConditionStatus, string, string) {
	if sums == nil || sums.Evaluated == 0 {
		return metav1.ConditionUnknown, forecastingv1alpha1.ReasonNotEvaluated, "no run has evaluated accuracy yet"
	}
	minPoints := int64(spec.MinEvaluatedPoints)
	if minPoints == 0 {
		minPoints = 100
	}
	if sums.EvaluatedPoints < minPoints {
		return metav1.ConditionUnknown, forecastingv1alpha1.ReasonTooFewPoints,
			fmt.Sprintf("%d new actuals compared, at least %d needed", sums.EvaluatedPoints, minPoints)
	}
	threshold := int64(spec.ThresholdPercent)
	if threshold == 0 {
		threshold = 130
	}
	exp, ok1 := new(big.Rat).SetString(orZero(sums.ExpectedSum))
	realized, ok2 := new(big.Rat).SetString(orZero(sums.RealizedSum))
	if !ok1 || !ok2 {
		return metav1.ConditionUnknown, forecastingv1alpha1.ReasonNotEvaluated, "accuracy sums are not decimal numbers"
	}
	acc := accuracyStatus(sums, "")
	if g, ok := geometric(sums); ok && spec.Aggregate != forecastingv1alpha1.AggregateMean {
		bound := new(big.Rat)
		bound.SetFloat64(float64(sums.LogEvaluated) * math.Log(float64(threshold)/100))
		verdict := fmt.Sprintf("realized %s geometric mean %s is %s times the expected %s (over %d series; arithmetic means %s and %s)",
			sums.Metric, acc.RealizedGeometric, acc.GeometricRatio, acc.ExpectedGeometric, sums.LogEvaluated, acc.Realized, acc.Expected)
		if g.logRatio.Cmp(bound) > 0 {
			return metav1.ConditionTrue, forecastingv1alpha1.ReasonAboveThreshold,
				fmt.Sprintf("%s, above the threshold of %d%%; %d of %d series drifted", verdict, threshold, sums.Drifted, sums.Evaluated)
		}
		return metav1.ConditionFalse, forecastingv1alpha1.ReasonWithinThreshold,
			fmt.Sprintf("%s, within the threshold of %d%%", verdict, threshold)
	}
	lhs := new(big.Rat).Mul(realized, big.NewRat(100, 1))
	rhs := new(big.Rat).Mul(exp, big.NewRat(threshold, 1))
	if lhs.Cmp(rhs) > 0 {
		return metav1.ConditionTrue, forecastingv1alpha1.ReasonAboveThreshold,
			fmt.Sprintf("realized %s %s is %s times the expected %s, above the threshold of %d%%; %d of %d series drifted",
				sums.Metric, acc.Realized, acc.Ratio, acc.Expected, threshold, sums.Drifted, sums.Evaluated)
	}
	return metav1.ConditionFalse, forecastingv1alpha1.ReasonWithinThreshold,
		fmt.Sprintf("realized %s %s is %s times the expected %s, within the threshold of %d%%",
			sums.Metric, acc.Realized, acc.Ratio, acc.Expected, threshold)
}

// levelDrift applies spec.drift's rule to each hierarchy level of a run on its own: the same
// driftVerdict (threshold, aggregate and minEvaluatedPoints) over the sums of the level's nodes
// instead of the run's input series. It returns the portfolio's per-level accuracy, in the
// run's order (top to bottom), each with its verdict's reason, and, when some level is above
// the threshold, a message naming every such level with its verdict.
//
// The threshold is a fixed ratio, not a test at a false-alarm rate, so judging L levels is not
// corrected for multiplicity (calibrationVerdict's Bonferroni split has no counterpart here).
// The bottom level's nodes are the input series, so its verdict is the run's own; the
// aggregates usually have fewer new actuals than minEvaluatedPoints asks for (the grand total
// has one node, so horizon-many points a run): such levels say TooFewPoints and are not judged.
func levelDrift(h *forecastingv1alpha1.HierarchyStatus, spec forecastingv1alpha1.DriftSpec) (levels []forecastingv1alpha1.LevelAccuracy, drifted string) {
	if h == nil {
		return nil, ""
	}
	var above []string
	for _, l := range h.Levels {
		status, reason, message := driftVerdict(l.AccuracySums, spec)
		levels = append(levels, forecastingv1alpha1.LevelAccuracy{Name: l.Name, Nodes: l.Nodes, Accuracy: l.Accuracy.DeepCopy(), Drift: reason})
		if status == metav1.ConditionTrue {
			above = append(above, fmt.Sprintf("level %s: %s", l.Name, message))
		}
	}
	return levels, strings.Join(above, "; ")
}
