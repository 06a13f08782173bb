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
