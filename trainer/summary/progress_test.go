package summary

import (
	"testing"
	"time"
)

func TestProgressLineRoundTrip(t *testing.T) {
	p := Progress{Shard: 3, Phase: PhaseFitting, Time: time.Date(2026, 12, 4, 10, 0, 0, 0, time.UTC),
		Units: 4, UnitsRead: 4, UnitsWritten: 1, Planned: 1000, Done: 420, FitSeconds: 12.5, IdleSeconds: 0.5}
	got, err := ParseProgress(p.Line())
	if err != nil {
		t.Fatal(err)
	}
	if got != p {
		t.Fatalf("round trip: got %+v, want %+v", got, p)
	}
	if _, err := ParseProgress("train: shard 3: 10 series"); err == nil {
		t.Fatal("a line without the prefix decoded")
	}
}

func TestLastProgressTakesTheLastWellFormedLine(t *testing.T) {
	a := Progress{Shard: 1, Phase: PhaseReading, Done: 0}
	b := Progress{Shard: 1, Phase: PhaseFitting, Done: 50}
	log := "train: shard 1: design auto\n" + a.Line() + "\n" + b.Line() + "\nsome other line\n" +
		ProgressPrefix + `{"shard":1,"phase":"fit` // cut by a byte limit
	got, ok := LastProgress([]byte(log))
	if !ok || got.Done != 50 || got.Phase != PhaseFitting {
		t.Fatalf("got %+v ok=%v, want the second line", got, ok)
	}
	if _, ok := LastProgress([]byte("no progress here\n\n")); ok {
		t.Fatal("found progress in a log without any")
	}
	if _, ok := LastProgress(nil); ok {
		t.Fatal("found progress in an empty log")
	}
	if got, ok := LastProgress([]byte(a.Line())); !ok || got.Phase != PhaseReading {
		t.Fatalf("a single line without newline: got %+v ok=%v", got, ok)
	}
}
