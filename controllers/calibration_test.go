package controllers

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/coverage"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// z90 is Φ⁻¹(0.9) = 1.2815516 (standard normal table), so mean ± z90·σ are the 0.1 and 0.9
// quantiles of N(mean, σ²) and bound its central 80% band.
const z90 = 1.2815515655446004

// gaussianShards builds `shards` shard calibration sums over n series each: a history of 24
// iid N(100, 10²) points and 6 new actuals from the same law, the previous run's forecast
// being mean 100+shift with quantiles 0.1, 0.5, 0.9 at 100+shift + (−z90, 0, z90)·10·width.
// width 1 is the true law (calibrated); width < 1 an overconfident member.
func gaussianShards(t fatalHelper, shards, n int, width, shift float64, seed uint64) []summary.Calibration {
	return promisedShards(t, shards, n, width, shift, seed, nil)
}

// promisedShards is gaussianShards with every series promising the backtest record promised
// (nil: none, the levels are the promise).
func promisedShards(t fatalHelper, shards, n int, width, shift float64, seed uint64, promised *tables.Calibration) []summary.Calibration {
	t.Helper()
	rng := rand.New(rand.NewPCG(seed, 2))
	start := time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)
	levels := []float64{0.1, 0.5, 0.9}
	out := make([]summary.Calibration, shards)
	for sh := range out {
		for i := range n {
			v := make([]float64, 30)
			for k := range v {
				v[k] = 100 + 10*rng.NormFloat64()
			}
			s := series.Series{Key: fmt.Sprintf("depot-%d/item-%d", sh, i), Start: start, Freq: series.Yearly, Values: v}
			m := 100 + shift
			var rows []tables.ForecastRow
			for k := range 6 {
				rows = append(rows, tables.ForecastRow{Key: s.Key, Period: s.PeriodAt(24 + k), Step: k + 1, Mean: m,
					Quantiles: []float64{m - z90*10*width, m, m + z90*10*width}})
			}
			c, ok := pipeline.Calibrate(s, rows, levels, false, promised)
			if !ok {
				t.Fatalf("%s: not calibrated", s.Key)
			}
			if !out[sh].Add(c) {
				t.Fatalf("%s: levels differ", s.Key)
			}
		}
	}
	return out
}

// fatalHelper is what gaussianShards needs of *testing.T and GinkgoT().
type fatalHelper interface {
	Helper()
	Fatalf(format string, args ...any)
}

func foldCalibration(t *testing.T, shards []summary.Calibration, order []int) *forecastingv1alpha1.CalibrationSums {
	t.Helper()
	var sums *forecastingv1alpha1.CalibrationSums
	for _, i := range order {
		var err error
		if sums, err = addCalibration(sums, shards[i]); err != nil {
			t.Fatalf("addCalibration: %v", err)
		}
	}
	return sums
}

// TestCoverageTolerance checks z against the standard normal table: Φ⁻¹(0.995) = 2.5758 for
// a 1% two-sided false-alarm rate on one level, Φ⁻¹(1 − 0.01/6) = 2.9352 on three.
func TestCoverageTolerance(t *testing.T) {
	for _, tc := range []struct {
		alpha  float64
		levels int
		want   float64
	}{{0.01, 1, 2.5758}, {0.01, 3, 2.9352}, {0.05, 1, 1.9600}} {
		if got := coverage.Z(tc.alpha, tc.levels); math.Abs(got-tc.want) > 5e-4 {
			t.Errorf("coverage.Z(%v, %d) = %.4f, want %.4f", tc.alpha, tc.levels, got, tc.want)
		}
	}
}

// TestGaussianBandCoverage: with known Gaussian noise and the true quantiles published, the
// realized coverage of the 80% band over 400 series × 6 actuals lands within the binomial
// error of 80%: |k/n − 0.8| <= z·sqrt(0.8·0.2/n) with z = Φ⁻¹(0.995) (the points are
// independent by construction, so the count inside the band is Binomial(n, 0.8)). Folding the
// shards in any order gives the same sums, and drift does not fire; an overconfident member
// (band a third as wide: true coverage 2Φ(z90/3) − 1 ≈ 0.33) trips calibration drift, and a
// member that forecasts one σ high trips bias drift (bias ≈ σ / E|x_t − x_{t−1}| = sqrt(π)/2
// ≈ 0.886 for iid data, the half-normal mean of a N(0, 2σ²) difference).
func TestGaussianBandCoverage(t *testing.T) {
	shards := gaussianShards(t, 4, 100, 1, 0, 11)
	sums := foldCalibration(t, shards, []int{0, 1, 2, 3})
	if diff := cmp.Diff(sums, foldCalibration(t, shards, []int{3, 1, 0, 2})); diff != "" {
		t.Fatalf("fold order matters (-0123,+3102):\n%s", diff)
	}
	acc := &forecastingv1alpha1.AccuracyStatus{}
	withCalibration(acc, sums)
	n := float64(sums.Points)
	if n != 2400 {
		t.Fatalf("points %v, want 2400", n)
	}
	cov, err := strconv.ParseFloat(acc.BandCoverage, 64)
	if err != nil || acc.BandLevel != "0.800" {
		t.Fatalf("band coverage %q level %q", acc.BandCoverage, acc.BandLevel)
	}
	tol := coverage.Z(0.01, 1) * math.Sqrt(0.8*0.2/n)
	t.Logf("80%% band coverage %s over %v actuals (tolerance ±%.4f); per level %+v; bias %s", acc.BandCoverage, n, tol, acc.Calibration, acc.Bias)
	if math.Abs(cov-0.8) > tol+0.0005 { // 0.0005: BandCoverage is rounded to 3 places
		t.Errorf("coverage %.3f is outside 0.8 ± %.4f", cov, tol)
	}
	spec := forecastingv1alpha1.DriftSpec{CalibrationFalseAlarmPercent: 1, MaxBiasPercent: 50}
	if fired, reason, msg := calibrationVerdict(sums, spec, 1); fired {
		t.Errorf("calibrated forecasts drift: %s %s", reason, msg)
	}

	over := foldCalibration(t, gaussianShards(t, 4, 100, 1.0/3, 0, 12), []int{0, 1, 2, 3})
	fired, reason, msg := calibrationVerdict(over, spec, 1)
	if !fired || reason != forecastingv1alpha1.ReasonCalibrationOff {
		t.Errorf("overconfident member: fired %v reason %q (%s)", fired, reason, msg)
	}
	if fired, _, _ := calibrationVerdict(over, forecastingv1alpha1.DriftSpec{}, 1); fired {
		t.Errorf("calibration judged although spec.drift does not ask for it")
	}

	high := foldCalibration(t, gaussianShards(t, 4, 100, 1, 10, 13), []int{0, 1, 2, 3})
	acc = &forecastingv1alpha1.AccuracyStatus{}
	withCalibration(acc, high)
	bias, _ := strconv.ParseFloat(acc.Bias, 64)
	if math.Abs(bias-math.Sqrt(math.Pi)/2) > 0.1 {
		t.Errorf("bias %.4f, want about sqrt(π)/2 = 0.886", bias)
	}
	fired, reason, msg = calibrationVerdict(high, forecastingv1alpha1.DriftSpec{MaxBiasPercent: 50}, 1)
	if !fired || reason != forecastingv1alpha1.ReasonBiased {
		t.Errorf("biased member: fired %v reason %q (%s)", fired, reason, msg)
	}
}

func TestAddCalibrationRejectsOtherLevels(t *testing.T) {
	start, err := addCalibration(nil, summary.Calibration{Levels: []float64{0.1, 0.9}, Series: 1, Points: 2, Below: []int{0, 2}, PinballSum: []float64{0.5, 0.25}})
	if err != nil {
		t.Fatal(err)
	}
	got, err := addCalibration(start, summary.Calibration{Levels: []float64{0.05, 0.95}, Series: 1, Points: 2, Below: []int{0, 2}, PinballSum: []float64{1, 1}})
	if err == nil {
		t.Fatalf("no error for other levels")
	}
	if diff := cmp.Diff(start, got); diff != "" {
		t.Errorf("sums changed on error:\n%s", diff)
	}
	if _, err := addCalibration(start, summary.Calibration{Levels: []float64{0.1, 0.9}, Series: 1, Points: 2, Below: []int{0, 2}, PinballSum: []float64{math.NaN(), 1}}); err == nil {
		t.Errorf("no error for a NaN sum")
	}
}

func TestStabilityFoldAndStatus(t *testing.T) {
	a, b := summary.Stability{Series: 1, Points: 2, MovementSum: 0.1}, summary.Stability{Series: 1, Points: 3, MovementSum: 0.2}
	s1, err := addStability(nil, a)
	if err == nil {
		s1, err = addStability(s1, b)
	}
	if err != nil {
		t.Fatal(err)
	}
	s2, _ := addStability(nil, b)
	s2, _ = addStability(s2, a)
	want := &forecastingv1alpha1.StabilitySums{Series: 2, Points: 5,
		// The exact sum of the doubles nearest 0.1 and 0.2, whatever the order.
		MovementSum: "0.3000000000000000166533453693773481063544750213623046875"}
	if diff := cmp.Diff(want, s1); diff != "" {
		t.Errorf("sums (-want,+got):\n%s", diff)
	}
	if diff := cmp.Diff(s1, s2); diff != "" {
		t.Errorf("order matters:\n%s", diff)
	}
	acc := &forecastingv1alpha1.AccuracyStatus{}
	withStability(acc, s1)
	if acc.Movement != "0.0600" || acc.MovementPoints != 5 {
		t.Errorf("movement %q over %d, want 0.0600 over 5", acc.Movement, acc.MovementPoints)
	}
	if _, err := addStability(s1, summary.Stability{Series: 1, Points: 1, MovementSum: math.Inf(1)}); err == nil {
		t.Errorf("no error for an infinite sum")
	}
}

// TestBacktestExpectation: a member whose bands are a third as wide as they should be (true
// coverage of the 80% band 2Φ(z90/3) − 1 ≈ 0.33; 0.1 quantile share Φ(−z90/3) ≈ 0.335) and
// whose own backtest showed exactly that (each series promising 0.335, 0.5, 0.665 over 24
// backtest points) covers the new actuals as promised: drift judged against the backtest
// (the default) does not fire, judged against the nominal levels it does. The status shows
// the promise beside the realized share and the design effect (independent actuals: about 1).
// A shard from a trainer without an expectation drops it from the run's sums.
func TestBacktestExpectation(t *testing.T) {
	promised := &tables.Calibration{Levels: []float64{0.1, 0.5, 0.9}, Points: 24, Below: []int{8, 12, 16}, Pinball: []float64{0.2, 0.4, 0.2}, Bias: 0}
	shards := promisedShards(t, 4, 100, 1.0/3, 0, 21, promised)
	sums := foldCalibration(t, shards, []int{0, 1, 2, 3})
	if diff := cmp.Diff(sums, foldCalibration(t, shards, []int{2, 0, 3, 1})); diff != "" {
		t.Fatalf("fold order matters:\n%s", diff)
	}
	if sums.BacktestSeries != 400 || sums.BacktestPoints != 400*24 || sums.BacktestActuals != 2400 || sums.Pairs != 400*6*5 {
		t.Fatalf("backtest sums %d series, %d points, %d actuals, %d pairs", sums.BacktestSeries, sums.BacktestPoints, sums.BacktestActuals, sums.Pairs)
	}
	backtest := forecastingv1alpha1.DriftSpec{CalibrationFalseAlarmPercent: 1}
	if fired, reason, msg := calibrationVerdict(sums, backtest, 1); fired {
		t.Errorf("judged against its backtest: %s %s", reason, msg)
	}
	nominal := backtest
	nominal.CalibrationExpectation = forecastingv1alpha1.ExpectationNominal
	if fired, reason, msg := calibrationVerdict(sums, nominal, 1); !fired || reason != forecastingv1alpha1.ReasonCalibrationOff {
		t.Errorf("judged against the levels: fired %v %q %s", fired, reason, msg)
	} else {
		t.Log(msg)
	}
	acc := &forecastingv1alpha1.AccuracyStatus{}
	withCalibration(acc, sums)
	t.Logf("status %+v band %s promised %s", acc.Calibration, acc.BandCoverage, acc.ExpectedBandCoverage)
	if acc.Calibration[0].Expected != "0.333" || acc.ExpectedBandCoverage != "0.333" || acc.BacktestSeries != 400 ||
		acc.Calibration[1].ExpectedPinballLoss != "0.4000" || acc.ExpectedBias != "0.0000" {
		t.Errorf("status %+v, expected band %q, backtest series %d", acc.Calibration, acc.ExpectedBandCoverage, acc.BacktestSeries)
	}
	for _, q := range acc.Calibration {
		if d, _ := strconv.ParseFloat(q.DesignEffect, 64); d < 1 || d > 1.3 {
			t.Errorf("level %s: design effect %s for independent actuals", q.Level, q.DesignEffect)
		}
	}
	// A calibrated member judged against the same (wrong) promise is off: it covers 80%, the
	// backtest promised 33%.
	if fired, _, msg := calibrationVerdict(foldCalibration(t, promisedShards(t, 4, 100, 1, 0, 22, promised), []int{0, 1, 2, 3}), backtest, 1); !fired {
		t.Errorf("coverage moved from the backtest's 0.33 to 0.8 without drift (%s)", msg)
	}
	old := shards[2]
	old.Pairs, old.BelowPairs, old.Expected, old.ExpectedVar, old.ExpectedPinballSum = 0, nil, nil, nil, nil
	mixed := foldCalibration(t, []summary.Calibration{shards[0], shards[1], old, shards[3]}, []int{0, 1, 2, 3})
	if mixed.Expected != nil || mixed.BacktestSeries != 0 || mixed.Points != sums.Points {
		t.Errorf("a shard without expectation: sums %+v", mixed)
	}
}

// calibratedTree is a hierarchy whose item+depot nodes publish quantiles as good as promised
// (gaussianShards, width 1), whose item nodes publish bands a third as wide (overconfident) and
// whose depot nodes forecast one σ high; the total has no calibration. Every level's accuracy
// is as promised.
func calibratedTree(t *testing.T) *forecastingv1alpha1.HierarchyStatus {
	t.Helper()
	acc := &summary.Accuracy{Metric: "MASE", Evaluated: 100, EvaluatedPoints: 600, ExpectedSum: 100, RealizedSum: 100, LogEvaluated: 100}
	cal := func(width, shift float64, seed uint64) *summary.Calibration {
		c := gaussianShards(t, 1, 100, width, shift, seed)[0]
		return &c
	}
	h, err := addLevels(nil, []summary.Level{
		{Name: "total", Nodes: 1},
		{Name: "depot", Nodes: 100, Accuracy: acc, Calibration: cal(1, 10, 41)},
		{Name: "item", Nodes: 100, Accuracy: acc, Calibration: cal(1.0/3, 0, 42)},
		{Name: "item+depot", Nodes: 100, Accuracy: acc, Calibration: cal(1, 0, 43)},
	})
	if err != nil {
		t.Fatal(err)
	}
	showLevels(h, "fenwick-weekly-3")
	return h
}

// TestLevelCalibration: spec.drift's calibration and bias rules per hierarchy level, each level
// in its CalibrationDrift, the reason LevelCalibrationOff before LevelBiased, and nothing
// judged when spec.drift sets neither rule.
func TestLevelCalibration(t *testing.T) {
	h := calibratedTree(t)
	verdicts := func(spec forecastingv1alpha1.DriftSpec) (map[string]string, string, string) {
		levels, _ := levelDrift(h, spec)
		reason, message := levelCalibration(h, spec, levels)
		got := map[string]string{}
		for _, l := range levels {
			got[l.Name] = l.CalibrationDrift
		}
		return got, reason, message
	}
	got, reason, msg := verdicts(forecastingv1alpha1.DriftSpec{CalibrationFalseAlarmPercent: 1, MaxBiasPercent: 50})
	want := map[string]string{"total": "", "depot": forecastingv1alpha1.ReasonCalibrationOff,
		"item": forecastingv1alpha1.ReasonCalibrationOff, "item+depot": forecastingv1alpha1.ReasonCalibrationHeld}
	if diff := cmp.Diff(want, got); diff != "" || reason != forecastingv1alpha1.ReasonLevelCalibrationOff {
		t.Errorf("both rules: reason %s, verdicts (-want,+got):\n%s", reason, diff)
	}
	if !strings.HasPrefix(msg, "level depot: calibration off (false-alarm rate 1% shared by 3 levels, z = 3.26): ") ||
		!strings.Contains(msg, "; level item: calibration off") {
		t.Errorf("message %q", msg)
	}

	// Bias alone: the one σ high depot nodes only.
	got, reason, msg = verdicts(forecastingv1alpha1.DriftSpec{MaxBiasPercent: 50})
	want = map[string]string{"total": "", "depot": forecastingv1alpha1.ReasonBiased,
		"item": forecastingv1alpha1.ReasonCalibrationHeld, "item+depot": forecastingv1alpha1.ReasonCalibrationHeld}
	if diff := cmp.Diff(want, got); diff != "" || reason != forecastingv1alpha1.ReasonLevelBiased || !strings.HasPrefix(msg, "level depot: mean scaled error") {
		t.Errorf("bias only: reason %s, message %q, verdicts (-want,+got):\n%s", reason, msg, diff)
	}

	got, reason, msg = verdicts(forecastingv1alpha1.DriftSpec{ThresholdPercent: 130})
	if diff := cmp.Diff(map[string]string{"total": "", "depot": "", "item": "", "item+depot": ""}, got); diff != "" || reason != "" || msg != "" {
		t.Errorf("neither rule set: reason %q, message %q, verdicts (-want,+got):\n%s", reason, msg, diff)
	}
	if reason, msg := levelCalibration(nil, forecastingv1alpha1.DriftSpec{MaxBiasPercent: 50}, nil); reason != "" || msg != "" {
		t.Errorf("no hierarchy: %q %q", reason, msg)
	}
}

// TestCalibrationVerdictSharesTheRate: the false-alarm rate is split among the judgements that
// share it (Bonferroni). 58 of 400 actuals at or below a nominal 0.1 quantile (no design
// effect, no promise: a binomial with mean 40 and standard deviation 6) is 3.0 standard
// deviations off: beyond z = Φ⁻¹(1 − 0.01/4) = 2.807 for one judgement at 1% over two quantile
// levels, within z = Φ⁻¹(1 − 0.01/12) = 3.144 when three levels share the 1%.
func TestCalibrationVerdictSharesTheRate(t *testing.T) {
	sums, err := addCalibration(nil, summary.Calibration{Levels: []float64{0.1, 0.9}, Series: 400, Points: 400, Below: []int{58, 360}, PinballSum: []float64{1, 1}})
	if err != nil {
		t.Fatal(err)
	}
	spec := forecastingv1alpha1.DriftSpec{CalibrationFalseAlarmPercent: 1}
	if fired, reason, msg := calibrationVerdict(sums, spec, 1); !fired || reason != forecastingv1alpha1.ReasonCalibrationOff || !strings.Contains(msg, "(false-alarm rate 1%, z = 2.81)") {
		t.Errorf("alone: fired %v %s %q", fired, reason, msg)
	}
	if fired, _, msg := calibrationVerdict(sums, spec, 3); fired {
		t.Errorf("shared by 3: fired (%s)", msg)
	}
}
