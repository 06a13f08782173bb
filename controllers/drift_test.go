package controllers

import (
	"math"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// TestAddAccuracyIsExactAndOrderFree folds the same shard sums in two orders. 0.1+0.2+0.3 in
// float64 differs by order ((0.1+0.2)+0.3 = 0.6000000000000001, 0.1+(0.2+0.3) = 0.6); the
// exact sums must not.
func TestAddAccuracyIsExactAndOrderFree(t *testing.T) {
	shards := []summary.Accuracy{
		{Metric: "MASE", Evaluated: 10, EvaluatedPoints: 70, ExpectedSum: 0.1, RealizedSum: 1.5, Drifted: 1,
			LogEvaluated: 10, ExpectedLogSum: -0.1, RealizedLogSum: 0.5},
		{Metric: "MASE", Evaluated: 20, EvaluatedPoints: 140, ExpectedSum: 0.2, RealizedSum: 2.25,
			LogEvaluated: 19, ExpectedLogSum: -0.2, RealizedLogSum: 0.25},
		{Metric: "MASE", Evaluated: 30, EvaluatedPoints: 210, ExpectedSum: 0.3, RealizedSum: 3, Drifted: 2,
			LogEvaluated: 30, ExpectedLogSum: -0.3, RealizedLogSum: 0.25},
	}
	fold := func(order []int) *forecastingv1alpha1.AccuracySums {
		var sums *forecastingv1alpha1.AccuracySums
		for _, i := range order {
			var err error
			if sums, err = addAccuracy(sums, shards[i]); err != nil {
				t.Fatalf("addAccuracy: %v", err)
			}
		}
		return sums
	}
	a, b := fold([]int{0, 1, 2}), fold([]int{2, 1, 0})
	if diff := cmp.Diff(a, b); diff != "" {
		t.Errorf("order matters (-012,+210):\n%s", diff)
	}
	want := &forecastingv1alpha1.AccuracySums{
		Metric: "MASE", Evaluated: 60, EvaluatedPoints: 420, Drifted: 3, RealizedSum: "6.75",
		// The exact sum of the three binary doubles nearest 0.1, 0.2 and 0.3.
		ExpectedSum:  "0.6000000000000000055511151231257827021181583404541015625",
		LogEvaluated: 59, RealizedLogSum: "1", ExpectedLogSum: "-0.6000000000000000055511151231257827021181583404541015625",
	}
	if diff := cmp.Diff(want, a); diff != "" {
		t.Errorf("sums (-want,+got):\n%s", diff)
	}
}

func TestAddAccuracyRejects(t *testing.T) {
	start := &forecastingv1alpha1.AccuracySums{Metric: "MASE", Evaluated: 1, ExpectedSum: "1", RealizedSum: "1"}
	tests := map[string]summary.Accuracy{
		"other metric": {Metric: "RMSSE", Evaluated: 1, ExpectedSum: 1, RealizedSum: 1},
		"infinite sum": {Metric: "MASE", Evaluated: 1, ExpectedSum: math.Inf(1), RealizedSum: 1},
		"not a number": {Metric: "MASE", Evaluated: 1, ExpectedSum: 1, RealizedSum: math.NaN()},
	}
	for name, a := range tests {
		t.Run(name, func(t *testing.T) {
			got, err := addAccuracy(start, a)
			if err == nil {
				t.Fatalf("no error")
			}
			if diff := cmp.Diff(start, got); diff != "" {
				t.Errorf("sums changed on error (-want,+got):\n%s", diff)
			}
		})
	}
}

func TestAccuracyStatus(t *testing.T) {
	tests := map[string]struct {
		sums *forecastingv1alpha1.AccuracySums
		want *forecastingv1alpha1.AccuracyStatus
	}{
		"nothing evaluated": {sums: &forecastingv1alpha1.AccuracySums{ExpectedSum: "0", RealizedSum: "0"}},
		"nil":               {},
		"means and ratio": {
			// expected 48/60 = 0.8, realized 66/60 = 1.1, ratio 66/48 = 1.375.
			sums: &forecastingv1alpha1.AccuracySums{Metric: "MASE", Evaluated: 60, EvaluatedPoints: 420, ExpectedSum: "48", RealizedSum: "66", Drifted: 9},
			want: &forecastingv1alpha1.AccuracyStatus{Metric: "MASE", Expected: "0.8000", Realized: "1.1000", Ratio: "1.375",
				EvaluatedSeries: 60, EvaluatedPoints: 420, DriftedSeries: 9, Run: "r1"},
		},
		"geometric means": {
			// ln 1.5 = 0.405465..., ln 0.75 = -0.287682...: over 2 series the geometric means
			// are exp(ln(1.5)) = 1.5 and 0.75 (sums of two equal logs), the ratio 0.5.
			sums: &forecastingv1alpha1.AccuracySums{Metric: "MASE", Evaluated: 3, EvaluatedPoints: 9, ExpectedSum: "3", RealizedSum: "3",
				LogEvaluated: 2, ExpectedLogSum: "0.8109302162163288", RealizedLogSum: "-0.5753641449035618"},
			want: &forecastingv1alpha1.AccuracyStatus{Metric: "MASE", Expected: "1.0000", Realized: "1.0000", Ratio: "1.000",
				ExpectedGeometric: "1.5000", RealizedGeometric: "0.7500", GeometricRatio: "0.500", GeometricSeries: 2,
				EvaluatedSeries: 3, EvaluatedPoints: 9, Run: "r1"},
		},
		"zero expected error has no ratio": {
			sums: &forecastingv1alpha1.AccuracySums{Metric: "MAE", Evaluated: 2, EvaluatedPoints: 4, ExpectedSum: "0", RealizedSum: "1"},
			want: &forecastingv1alpha1.AccuracyStatus{Metric: "MAE", Expected: "0.0000", Realized: "0.5000",
				EvaluatedSeries: 2, EvaluatedPoints: 4, Run: "r1"},
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			if diff := cmp.Diff(tc.want, accuracyStatus(tc.sums, "r1")); diff != "" {
				t.Errorf("accuracyStatus (-want,+got):\n%s", diff)
			}
		})
	}
}

func TestDriftVerdict(t *testing.T) {
	type verdict struct {
		Status metav1.ConditionStatus
		Reason string
	}
	spec := forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 100}
	tests := map[string]struct {
		sums *forecastingv1alpha1.AccuracySums
		spec forecastingv1alpha1.DriftSpec
		want verdict
	}{
		"not evaluated": {spec: spec, want: verdict{metav1.ConditionUnknown, forecastingv1alpha1.ReasonNotEvaluated}},
		"too few points": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 5, EvaluatedPoints: 99, ExpectedSum: "1", RealizedSum: "9"},
			spec: spec, want: verdict{metav1.ConditionUnknown, forecastingv1alpha1.ReasonTooFewPoints},
		},
		"exactly at the threshold is within": {
			// 1.3 is not a binary double, so use sums whose ratio is exactly 13/10.
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 5, EvaluatedPoints: 100, ExpectedSum: "10", RealizedSum: "13"},
			spec: spec, want: verdict{metav1.ConditionFalse, forecastingv1alpha1.ReasonWithinThreshold},
		},
		"just above the threshold": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 5, EvaluatedPoints: 100, ExpectedSum: "10", RealizedSum: "13.0000001"},
			spec: spec, want: verdict{metav1.ConditionTrue, forecastingv1alpha1.ReasonAboveThreshold},
		},
		"defaults apply when the spec is empty": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 5, EvaluatedPoints: 100, ExpectedSum: "10", RealizedSum: "14"},
			want: verdict{metav1.ConditionTrue, forecastingv1alpha1.ReasonAboveThreshold},
		},
		// 100 series: the log ratio bound is 100·ln(1.3) = 26.236426446749106.
		"geometric: a few exploding series do not drift the run": {
			// Mean ratio 5 (drift by Mean), geometric ratio exp(10/100) = 1.105.
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 100, EvaluatedPoints: 600, ExpectedSum: "100", RealizedSum: "500",
				LogEvaluated: 100, ExpectedLogSum: "0", RealizedLogSum: "10"},
			spec: spec, want: verdict{metav1.ConditionFalse, forecastingv1alpha1.ReasonWithinThreshold},
		},
		"mean is still selectable": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 100, EvaluatedPoints: 600, ExpectedSum: "100", RealizedSum: "500",
				LogEvaluated: 100, ExpectedLogSum: "0", RealizedLogSum: "10"},
			spec: forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 100, Aggregate: forecastingv1alpha1.AggregateMean},
			want: verdict{metav1.ConditionTrue, forecastingv1alpha1.ReasonAboveThreshold},
		},
		"geometric: just above the threshold": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 100, EvaluatedPoints: 600, ExpectedSum: "100", RealizedSum: "100",
				LogEvaluated: 100, ExpectedLogSum: "-1", RealizedLogSum: "25.2364265"},
			spec: spec, want: verdict{metav1.ConditionTrue, forecastingv1alpha1.ReasonAboveThreshold},
		},
		"geometric: just below the threshold": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 100, EvaluatedPoints: 600, ExpectedSum: "100", RealizedSum: "1000",
				LogEvaluated: 100, ExpectedLogSum: "-1", RealizedLogSum: "25.2364264"},
			spec: spec, want: verdict{metav1.ConditionFalse, forecastingv1alpha1.ReasonWithinThreshold},
		},
		"better than promised": {
			sums: &forecastingv1alpha1.AccuracySums{Evaluated: 5, EvaluatedPoints: 500, ExpectedSum: "10", RealizedSum: "8"},
			spec: spec, want: verdict{metav1.ConditionFalse, forecastingv1alpha1.ReasonWithinThreshold},
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			status, reason, msg := driftVerdict(tc.sums, tc.spec)
			if diff := cmp.Diff(tc.want, verdict{status, reason}); diff != "" {
				t.Errorf("driftVerdict (-want,+got):\n%s\nmessage: %s", diff, msg)
			}
			if msg == "" {
				t.Errorf("empty message")
			}
		})
	}
}

// driftedTree is a run's hierarchy, folded by addLevels from one train summary, whose levels
// drift differently. Hand-worked (logarithms exact in the sums, as the trainer sends them):
//   - total: 1 node, 12 new actuals, realized 3 against expected 1 (ratio 3), but 12 < 100
//     points: TooFewPoints, not judged;
//   - depot: 20 nodes, 160 points; 10 nodes promised 1 and realized 3 (ratio 3), 10 promised
//     4 and realized 3 (ratio 0.75). Geometric ratio sqrt(3·0.75) = 1.5 > 1.3: AboveThreshold;
//     arithmetic ratio 60/50 = 1.2 < 1.3: within under aggregate Mean. Geometric means
//     exp(10·ln 4/20) = 2 and 3;
//   - item: 30 nodes, 240 points, every node 1.2 times its promise 1: WithinThreshold;
//   - item+depot (the input series): 120 nodes, 960 points, as promised: WithinThreshold;
//   - category: nodes but no evaluation (first run of the level): NotEvaluated.
//
// The depot level also sent its calibration: of its 160 new actuals 20 at or below q10 and 132
// at or below q90 (its 80% band held 112/160 = 0.700), promised 16 and 144 (0.800).
func driftedTree(t *testing.T) *forecastingv1alpha1.HierarchyStatus {
	t.Helper()
	acc := func(n, points int, exp, real, expLog, realLog float64) *summary.Accuracy {
		return &summary.Accuracy{Metric: "MASE", Evaluated: n, EvaluatedPoints: points, ExpectedSum: exp, RealizedSum: real,
			LogEvaluated: n, ExpectedLogSum: expLog, RealizedLogSum: realLog}
	}
	h, err := addLevels(nil, []summary.Level{
		{Name: "total", Nodes: 1, Accuracy: acc(1, 12, 1, 3, 0, math.Log(3))},
		{Name: "depot", Nodes: 20, Accuracy: acc(20, 160, 50, 60, 10*math.Log(4), 20*math.Log(3)),
			Calibration: &summary.Calibration{Levels: []float64{0.1, 0.9}, Series: 20, Points: 160, Below: []int{20, 132}, PinballSum: []float64{8, 8},
				Pairs: 640, BelowPairs: []int{40, 520}, Expected: []float64{16, 144}, ExpectedVar: []float64{14.4, 14.4}, ExpectedPinballSum: []float64{10, 10},
				BacktestSeries: 20, BacktestPoints: 400, BacktestActuals: 400}},
		{Name: "item", Nodes: 30, Accuracy: acc(30, 240, 30, 36, 0, 30*math.Log(1.2))},
		{Name: "item+depot", Nodes: 120, Accuracy: acc(120, 960, 120, 120, 0, 0)},
		{Name: "category", Nodes: 5},
	})
	if err != nil {
		t.Fatal(err)
	}
	showLevels(h, "fenwick-weekly-2")
	return h
}

// TestLevelDrift: spec.drift's rule per level, with its minimum of new actuals and its
// aggregate, and a message naming the drifted level.
func TestLevelDrift(t *testing.T) {
	h := driftedTree(t)
	spec := forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 100}
	levels, drifted := levelDrift(h, spec)
	got := map[string]string{}
	var names []string
	for _, l := range levels {
		got[l.Name] = l.Drift
		names = append(names, l.Name)
	}
	want := map[string]string{
		"total":      forecastingv1alpha1.ReasonTooFewPoints,
		"category":   forecastingv1alpha1.ReasonNotEvaluated,
		"depot":      forecastingv1alpha1.ReasonAboveThreshold,
		"item":       forecastingv1alpha1.ReasonWithinThreshold,
		"item+depot": forecastingv1alpha1.ReasonWithinThreshold,
	}
	if diff := cmp.Diff(want, got); diff != "" {
		t.Errorf("verdicts (-want,+got):\n%s", diff)
	}
	// The run's order, top to bottom by node count.
	if diff := cmp.Diff([]string{"total", "category", "depot", "item", "item+depot"}, names); diff != "" {
		t.Errorf("order (-want,+got):\n%s", diff)
	}
	wantMsg := "level depot: realized MASE geometric mean 3.0000 is 1.500 times the expected 2.0000 (over 20 series; arithmetic means 3.0000 and 2.5000), above the threshold of 130%; 0 of 20 series drifted"
	if drifted != wantMsg {
		t.Errorf("message\n got %s\nwant %s", drifted, wantMsg)
	}
	if d := levels[2]; d.Nodes != 20 || d.Accuracy == nil || d.Accuracy.GeometricRatio != "1.500" || d.Accuracy.Run != "fenwick-weekly-2" {
		t.Errorf("depot level %+v", d)
	}
	// The portfolio's copy is its own: changing it leaves the run's status alone.
	levels[2].Accuracy.Ratio = "9"
	if h.Levels[2].Accuracy.Ratio != "1.200" {
		t.Errorf("the run's level accuracy changed to %s", h.Levels[2].Accuracy.Ratio)
	}

	// Under aggregate Mean the depot level is within (60/50 = 1.2) and nothing drifts.
	mean := spec
	mean.Aggregate = forecastingv1alpha1.AggregateMean
	if levels, drifted := levelDrift(h, mean); drifted != "" || levels[2].Drift != forecastingv1alpha1.ReasonWithinThreshold {
		t.Errorf("Mean: depot %s, message %q", levels[2].Drift, drifted)
	}
	// A lower minimum judges the total too (ratio 3), and both levels are named.
	few := spec
	few.MinEvaluatedPoints = 12
	if _, drifted := levelDrift(h, few); !strings.HasPrefix(drifted, "level total: ") || !strings.Contains(drifted, "; level depot: ") {
		t.Errorf("minEvaluatedPoints 12: %s", drifted)
	}
	if levels, drifted := levelDrift(nil, spec); levels != nil || drifted != "" {
		t.Errorf("no hierarchy: %v %q", levels, drifted)
	}
}
