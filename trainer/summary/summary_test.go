package summary

import (
	"strings"
	"testing"
)

func TestEncodeDecodeRoundTrip(t *testing.T) {
	s := Summary{Kind: KindPublish, Units: 12, CarriedForward: 2, Missing: 1, Manifest: "runs/r2/MANIFEST.json"}
	b, err := Encode(s)
	if err != nil {
		t.Fatal(err)
	}
	got, err := Decode(b)
	if err != nil {
		t.Fatal(err)
	}
	if got.Missing != 1 || got.CarriedForward != 2 || got.Manifest != s.Manifest {
		t.Fatalf("round trip = %+v", got)
	}
	if strings.Contains(string(b), "shard") {
		t.Fatalf("zero fields must be omitted: %s", b)
	}
}

func TestEncodeTrimsToLimit(t *testing.T) {
	s := Summary{Kind: KindTrain, Trained: 9, Error: strings.Repeat("x", 10000), Models: map[string]int{}}
	for i := 0; i < 400; i++ {
		s.Models[strings.Repeat("m", 20)+string(rune('a'+i%26))+strings.Repeat("z", i%7)+string(rune('A'+i/26))] = i
	}
	b, err := Encode(s)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) > MaxBytes {
		t.Fatalf("%d bytes, limit %d", len(b), MaxBytes)
	}
	got, _ := Decode(b)
	if got.Models["(truncated)"] != 9 {
		t.Fatalf("models not truncated to the trained count: %v", got.Models)
	}
}

func TestDecodeRejectsUnknownKind(t *testing.T) {
	if _, err := Decode([]byte(`{"kind":"cook"}`)); err == nil {
		t.Fatal("unknown kind accepted")
	}
}

func TestAccuracyAdd(t *testing.T) {
	var a Accuracy
	a.Add(Accuracy{Metric: "MASE", Evaluated: 2, EvaluatedPoints: 20, ExpectedSum: 1.5, RealizedSum: 2.25, Drifted: 1})
	a.Add(Accuracy{Metric: "MASE", Evaluated: 1, EvaluatedPoints: 7, ExpectedSum: 0.5, RealizedSum: 0.75})
	want := Accuracy{Metric: "MASE", Evaluated: 3, EvaluatedPoints: 27, ExpectedSum: 2, RealizedSum: 3, Drifted: 1}
	if a != want {
		t.Fatalf("Add = %+v, want %+v", a, want)
	}
}

// TestCalibrationFitsAtTheLevelLimit: the API allows 19 quantile levels; a train summary with
// their calibration sums (full-precision floats), a long model list and a long error still
// encodes within MaxBytes and keeps every calibration count.
func TestCalibrationFitsAtTheLevelLimit(t *testing.T) {
	c := *fullCalibration(19)
	s := Summary{Kind: KindTrain, Trained: 9, Error: strings.Repeat("x", 10000), Models: map[string]int{}, Calibration: &c,
		Accuracy: &Accuracy{Metric: "MASE", Evaluated: 5, ExpectedSum: 1.0 / 3, RealizedSum: 2.0 / 3, LogEvaluated: 5, ExpectedLogSum: -1.0 / 3, RealizedLogSum: 1.0 / 7}}
	for i := 0; i < 400; i++ {
		s.Models[strings.Repeat("m", 20)+string(rune('a'+i%26))+strings.Repeat("z", i%7)+string(rune('A'+i/26))] = i
	}
	b, err := Encode(s)
	if err != nil || len(b) > MaxBytes {
		t.Fatalf("encode: %d bytes, %v", len(b), err)
	}
	got, err := Decode(b)
	if err != nil {
		t.Fatal(err)
	}
	if got.Calibration == nil || len(got.Calibration.Below) != 19 || got.Calibration.Below[18] != 950000 ||
		got.Calibration.PinballSum[2] != c.PinballSum[2] || got.Accuracy.RealizedLogSum != 1.0/7 ||
		!got.Calibration.HasExpectation() || got.Calibration.Expected[18] != c.Expected[18] {
		t.Fatalf("calibration after the round trip = %+v", got.Calibration)
	}
}

func TestCalibrationAdd(t *testing.T) {
	var c Calibration
	a := Calibration{Levels: []float64{0.1, 0.9}, Series: 1, Points: 3, Below: []int{0, 3}, PinballSum: []float64{0.5, 0.25}, BiasSum: 1}
	if !c.Add(a) || !c.Add(a) {
		t.Fatal("same levels refused")
	}
	if c.Series != 2 || c.Points != 6 || c.Below[1] != 6 || c.PinballSum[0] != 1 || c.BiasSum != 2 {
		t.Fatalf("sum = %+v", c)
	}
	if c.Add(Calibration{Levels: []float64{0.2, 0.8}, Series: 1, Points: 1, Below: []int{0, 1}, PinballSum: []float64{0, 0}}) {
		t.Fatal("other levels added")
	}
	if c.Series != 2 {
		t.Fatalf("refused add changed the sums: %+v", c)
	}
}

// TestLevelsRoundTrip: a reconcile summary with eight levels of full-precision sums (more
// than a hierarchy of item, depot, region and total has) fits the limit and comes back exact.
func TestLevelsRoundTrip(t *testing.T) {
	s := Summary{Kind: KindReconcile, MaxDeviation: 3.0 / 7 * 1e-12}
	for i := range 8 {
		s.Levels = append(s.Levels, Level{Name: strings.Repeat("l", 20) + string(rune('a'+i)), Nodes: 1000003 * (i + 1),
			Accuracy: &Accuracy{Metric: "MASE", Evaluated: 99991, EvaluatedPoints: 1399874, ExpectedSum: 1.0 / 3 * float64(i+1),
				RealizedSum: 2.0 / 3, Drifted: 7, LogEvaluated: 99990, ExpectedLogSum: -1.0 / 7, RealizedLogSum: 1.0 / 11}})
	}
	b, err := Encode(s)
	if err != nil || len(b) > MaxBytes {
		t.Fatalf("encode: %d bytes, %v", len(b), err)
	}
	got, err := Decode(b)
	if err != nil {
		t.Fatal(err)
	}
	if got.Kind != KindReconcile || got.MaxDeviation != s.MaxDeviation || len(got.Levels) != 8 ||
		got.Levels[7].Nodes != 8000024 || *got.Levels[2].Accuracy != *s.Levels[2].Accuracy {
		t.Fatalf("round trip = %+v", got)
	}
	plan, err := Decode([]byte(`{"kind":"plan","shards":3,"reconcile":true}`))
	if err != nil || !plan.Reconcile {
		t.Fatalf("plan with reconcile = %+v, %v", plan, err)
	}
}

// TestLevelCalibrationsGiveWayFirst: the levels' calibrations are what Encode drops first to
// stay within MaxBytes (their expectations, then the whole records), before the run-wide
// calibration's expectation; a small hierarchy keeps them whole.
func TestLevelCalibrationsGiveWayFirst(t *testing.T) {
	cal := fullCalibration
	tree := func(levels, k int) Summary {
		s := Summary{Kind: KindTrain, Trained: 9, Calibration: cal(k)}
		for i := range levels {
			s.Levels = append(s.Levels, Level{Name: strings.Repeat("l", 20) + string(rune('a'+i)), Nodes: 1000003,
				Accuracy:    &Accuracy{Metric: "MASE", Evaluated: 99991, ExpectedSum: 1.0 / 3, RealizedSum: 2.0 / 3},
				Calibration: cal(k)})
		}
		return s
	}
	small := tree(4, 3)
	b, err := Encode(small)
	if err != nil {
		t.Fatal(err)
	}
	got, err := Decode(b)
	if err != nil || len(got.Levels) != 4 || got.Levels[3].Calibration == nil || !got.Levels[3].Calibration.HasExpectation() ||
		got.Levels[3].Calibration.PinballSum[1] != small.Levels[3].Calibration.PinballSum[1] {
		t.Fatalf("small hierarchy after the round trip: %+v, %v", got.Levels, err)
	}
	big := tree(9, 19)
	if b, err = Encode(big); err != nil || len(b) > MaxBytes {
		t.Fatalf("encode of 9 levels x 19 quantiles: %d bytes, %v", len(b), err)
	}
	if got, err = Decode(b); err != nil {
		t.Fatal(err)
	}
	if got.Calibration == nil || len(got.Calibration.Below) != 19 || len(got.Levels) != 9 || got.Levels[8].Accuracy == nil ||
		*got.Levels[8].Accuracy != *big.Levels[8].Accuracy {
		t.Fatalf("big hierarchy lost more than the level calibrations: %+v", got)
	}
	for _, l := range got.Levels {
		if l.Calibration != nil && l.Calibration.HasExpectation() {
			t.Errorf("level %s kept its calibration's expectation while the summary was over the limit", l.Name)
		}
	}
}

// fullCalibration is a calibration of k quantile levels (i/(k+1)) with its expectation, every
// sum a full-precision float.
func fullCalibration(k int) *Calibration {
	c := &Calibration{Series: 123456, Points: 987654, Pairs: 9876543, BacktestSeries: 123456, BacktestPoints: 2222222, BacktestActuals: 987654,
		BiasSum: -98765.0 / 7, ExpectedBiasSum: 98765.0 / 13}
	for i := 1; i <= k; i++ {
		c.Levels = append(c.Levels, float64(i)/float64(k+1))
		c.Below = append(c.Below, 50000*i)
		c.PinballSum = append(c.PinballSum, 1234567.0/3*float64(i))
		c.BelowPairs = append(c.BelowPairs, 5000000*i)
		c.Expected = append(c.Expected, 987654.0/7*float64(i))
		c.ExpectedVar = append(c.ExpectedVar, 4321.0/9*float64(i))
		c.ExpectedPinballSum = append(c.ExpectedPinballSum, 1234567.0/11*float64(i))
	}
	return c
}
