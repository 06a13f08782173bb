package controllers

import (
	"math"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	corev1 "k8s.io/api/core/v1"
	"sigs.k8s.io/yaml"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/config/crd"
	"almanac.dev/almanac/trainer/summary"
)

// hierarchySources are the level reports of a run of item x depot demand cut into two shards
// by depot: each shard holds its depot's items (bottom level "item+depot") and the depot total;
// the reconcile step reports the nodes that span shards, the item totals and the grand total.
func hierarchySources() [][]summary.Level {
	mase := func(n int, exp, real float64) *summary.Accuracy {
		return &summary.Accuracy{Metric: "MASE", Evaluated: n, EvaluatedPoints: 7 * n, ExpectedSum: exp, RealizedSum: real,
			LogEvaluated: n, ExpectedLogSum: float64(n) * math.Log(exp/float64(n)), RealizedLogSum: float64(n) * math.Log(real/float64(n))}
	}
	// q10 and q90 of the previous forecasts on 7 new actuals per node: each shard's bottom level.
	cal := func(n, below10, below90 int, pinball float64) *summary.Calibration {
		return &summary.Calibration{Levels: []float64{0.1, 0.9}, Series: n, Points: 7 * n, Below: []int{below10, below90},
			PinballSum: []float64{pinball, 2 * pinball}, BiasSum: pinball}
	}
	return [][]summary.Level{
		{{Name: "item+depot", Nodes: 3, Accuracy: mase(3, 0.3, 0.6), Calibration: cal(3, 2, 19, 0.3)}, {Name: "depot", Nodes: 1, Accuracy: mase(1, 0.1, 0.2)}},
		{{Name: "item+depot", Nodes: 2, Accuracy: mase(2, 0.2, 0.4), Calibration: cal(2, 1, 13, 0.2)}, {Name: "depot", Nodes: 1, Accuracy: mase(1, 0.1, 0.2)}},
		{{Name: "total", Nodes: 1, Accuracy: mase(1, 0.5, 0.5)}, {Name: "item", Nodes: 3}},
	}
}

// TestAddLevelsIsExactAndOrderFree: folding the shards and the reconcile step in any order
// gives the same levels, ordered top to bottom, with the exact sums (as addAccuracy: the
// exact decimal of the sum of the binary doubles).
func TestAddLevelsIsExactAndOrderFree(t *testing.T) {
	src := hierarchySources()
	fold := func(order ...int) *forecastingv1alpha1.HierarchyStatus {
		h := &forecastingv1alpha1.HierarchyStatus{ReconcileStep: true}
		for _, i := range order {
			var err error
			if h, err = addLevels(h, src[i]); err != nil {
				t.Fatalf("addLevels: %v", err)
			}
		}
		showLevels(h, "fenwick-daily-1")
		return h
	}
	a, b := fold(0, 1, 2), fold(2, 1, 0)
	if diff := cmp.Diff(a, b); diff != "" {
		t.Fatalf("order matters (-012,+210):\n%s", diff)
	}
	var names []string
	var nodes []int64
	for _, l := range a.Levels {
		names, nodes = append(names, l.Name), append(nodes, l.Nodes)
	}
	if diff := cmp.Diff([]string{"total", "depot", "item", "item+depot"}, names); diff != "" {
		t.Errorf("level order (-want,+got):\n%s", diff)
	}
	if diff := cmp.Diff([]int64{1, 2, 3, 5}, nodes); diff != "" {
		t.Errorf("nodes (-want,+got):\n%s", diff)
	}
	bottom := a.Levels[3]
	// 0.3 + 0.2 in binary doubles: 0.299999999999999988897769753748434595763683319091796875 +
	// 0.200000000000000011102230246251565404236316680908203125, exactly 0.5.
	if bottom.AccuracySums.ExpectedSum != "0.5" || bottom.AccuracySums.Evaluated != 5 || bottom.AccuracySums.EvaluatedPoints != 35 {
		t.Errorf("bottom sums = %+v", bottom.AccuracySums)
	}
	// Mean error = sum / evaluated nodes (common practice): 0.5/5 and 1.0/5.
	if acc := bottom.Accuracy; acc.Expected != "0.1000" || acc.Realized != "0.2000" || acc.Ratio != "2.000" || acc.Run != "fenwick-daily-1" {
		t.Errorf("bottom accuracy = %+v", acc)
	}
	// Calibration per level, folded as the run's (addCalibration, withCalibration): 35 actuals,
	// 3 at or below q10 and 32 at or below q90, so shares 3/35 and 32/35, the 80% band held
	// 29/35; pinball and bias sums 0.3 + 0.2 = 0.5 exactly (above), over 35.
	if cs := bottom.CalibrationSums; cs == nil || cs.Points != 35 || cs.Series != 5 || !cmp.Equal(cs.Below, []int64{3, 32}) || cs.PinballSums[0] != "0.5" {
		t.Errorf("bottom calibration sums = %+v", cs)
	}
	if acc := bottom.Accuracy; len(acc.Calibration) != 2 || acc.Calibration[0].Realized != "0.086" || acc.Calibration[1].Realized != "0.914" ||
		acc.BandCoverage != "0.829" || acc.Calibration[0].PinballLoss != "0.0143" || acc.Bias != "0.0143" || acc.CalibrationPoints != 35 {
		t.Errorf("bottom calibration = %+v, band %s, bias %s", acc.Calibration, acc.BandCoverage, acc.Bias)
	}
	if a.Levels[0].CalibrationSums != nil || a.Levels[0].Accuracy.Calibration != nil {
		t.Errorf("the total shows a calibration it was not sent: %+v", a.Levels[0])
	}
	if a.Levels[2].Accuracy != nil || a.Levels[2].AccuracySums != nil {
		t.Errorf("a level without evaluation shows accuracy: %+v", a.Levels[2])
	}
	if !a.ReconcileStep {
		t.Error("reconcileStep lost")
	}
}

func TestAddLevelsIsAllOrNothing(t *testing.T) {
	start, err := addLevels(nil, hierarchySources()[0])
	if err != nil {
		t.Fatal(err)
	}
	keep := start.DeepCopy()
	tests := map[string][]summary.Level{
		"no name":      {{Name: "depot", Nodes: 1}, {Name: "", Nodes: 1}},
		"twice":        {{Name: "depot", Nodes: 1}, {Name: "depot", Nodes: 1}},
		"negative":     {{Name: "depot", Nodes: -1}},
		"other metric": {{Name: "item+depot", Nodes: 1}, {Name: "depot", Nodes: 1, Accuracy: &summary.Accuracy{Metric: "RMSSE", Evaluated: 1}}},
		"not finite":   {{Name: "depot", Nodes: 1, Accuracy: &summary.Accuracy{Metric: "MASE", Evaluated: 1, ExpectedSum: math.Inf(1)}}},
		"other quantiles": {{Name: "depot", Nodes: 1}, {Name: "item+depot", Nodes: 1, Calibration: &summary.Calibration{Levels: []float64{0.2, 0.8}, Series: 1, Points: 7,
			Below: []int{1, 6}, PinballSum: []float64{0.1, 0.1}}}},
		// start holds 2 levels; 8 more names make 10, above maxHierarchyLevels.
		"too many levels": {{Name: "l1"}, {Name: "l2"}, {Name: "l3"}, {Name: "l4"}, {Name: "l5"}, {Name: "l6"}, {Name: "l7"}, {Name: "l8"}},
	}
	for name, levels := range tests {
		t.Run(name, func(t *testing.T) {
			got, err := addLevels(start, levels)
			if err == nil {
				t.Fatal("no error")
			}
			if diff := cmp.Diff(keep, got); diff != "" {
				t.Errorf("levels changed on error (-want,+got):\n%s", diff)
			}
			if diff := cmp.Diff(keep, start); diff != "" {
				t.Errorf("the input was modified (-want,+got):\n%s", diff)
			}
		})
	}
}

// TestAddLevelsTakesTheLargestHierarchy: 7 more names make 9 levels, the most a hierarchy has.
func TestAddLevelsTakesTheLargestHierarchy(t *testing.T) {
	start, err := addLevels(nil, hierarchySources()[0])
	if err != nil {
		t.Fatal(err)
	}
	got, err := addLevels(start, []summary.Level{{Name: "l1"}, {Name: "l2"}, {Name: "l3"}, {Name: "l4"}, {Name: "l5"}, {Name: "l6"}, {Name: "l7"}})
	if err != nil || len(got.Levels) != maxHierarchyLevels {
		t.Errorf("%d levels, %v; want %d", len(got.Levels), err, maxHierarchyLevels)
	}
}

// TestMaxHierarchyLevelsIsTheAPIs: the cap is spec.hierarchy.levels' maxItems in the generated
// CRD plus the implied bottom level.
func TestMaxHierarchyLevelsIsTheAPIs(t *testing.T) {
	raw, err := crd.Bases.ReadFile("bases/forecasting.almanac.dev_forecastportfolios.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := yaml.Unmarshal(raw, &doc); err != nil {
		t.Fatal(err)
	}
	node := any(doc)
	for _, k := range []string{"spec", "versions", "0", "schema", "openAPIV3Schema", "properties", "spec", "properties", "hierarchy", "properties", "levels", "maxItems"} {
		switch n := node.(type) {
		case map[string]any:
			node = n[k]
		case []any:
			node = n[0]
		default:
			t.Fatalf("CRD: no %s", k)
		}
	}
	if got, ok := node.(float64); !ok || int(got)+1 != maxHierarchyLevels {
		t.Errorf("spec.hierarchy.levels maxItems %v; maxHierarchyLevels %d should be it plus 1", node, maxHierarchyLevels)
	}
}

func TestFoldShardsAddsLevels(t *testing.T) {
	src := hierarchySources()
	t0 := time.Date(2026, 12, 1, 3, 0, 0, 0, time.UTC)
	var st forecastingv1alpha1.ForecastRunStatus
	st.Hierarchy = &forecastingv1alpha1.HierarchyStatus{ReconcileStep: true}
	job := trainJob("0-1", "")
	pods := []corev1.Pod{
		finishedPod(0, corev1.PodSucceeded, trainMessage(t, summary.Summary{Shard: 0, Series: 3, Trained: 3, Levels: src[0]}), t0),
		finishedPod(1, corev1.PodSucceeded, trainMessage(t, summary.Summary{Shard: 1, Series: 2, Trained: 2, Levels: src[1]}), t0),
	}
	// Folding twice (a second reconcile of the same Job status) counts each shard once.
	for range 2 {
		if _, err := foldShards(&st, job, pods, false); err != nil {
			t.Fatal(err)
		}
	}
	got := map[string]int64{}
	for _, l := range st.Hierarchy.Levels {
		got[l.Name] = l.Nodes
	}
	if diff := cmp.Diff(map[string]int64{"depot": 2, "item+depot": 5}, got); diff != "" {
		t.Errorf("levels (-want,+got):\n%s", diff)
	}
	if !st.Hierarchy.ReconcileStep || st.Hierarchy.Levels[1].AccuracySums.Evaluated != 5 {
		t.Errorf("hierarchy = %+v", st.Hierarchy)
	}
}

func TestFormatDeviation(t *testing.T) {
	for d, want := range map[float64]string{0: "0", 2.220446049250313e-16: "2.22e-16", 0.012345: "0.0123"} {
		if got := formatDeviation(d); got != want {
			t.Errorf("formatDeviation(%g) = %q, want %q", d, got, want)
		}
	}
}
