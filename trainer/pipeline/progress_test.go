package pipeline

import (
	"bytes"
	"context"
	"os"
	"strings"
	"sync"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/summary"
)

// lockedBuffer is a bytes.Buffer safe for the tracker's goroutine.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// progressLines decodes every progress line of a log.
func progressLines(t *testing.T, log string) []summary.Progress {
	t.Helper()
	var out []summary.Progress
	for _, line := range strings.Split(log, "\n") {
		if !strings.HasPrefix(line, summary.ProgressPrefix) {
			continue
		}
		p, err := summary.ParseProgress(line)
		if err != nil {
			t.Fatalf("%q: %v", line, err)
		}
		out = append(out, p)
	}
	return out
}

// TestTrainPrintsProgress: one shard of three object units (7 series, one rejected when
// collected) prints reading, fitting and done lines; the last has every unit read and written
// and done = planned = 7. Reading the whole shard first, fitting starts with every unit read
// and planned 7; streaming (the design is Fixed), it starts with the first unit read and
// planned counts that unit's series (2 or 3), growing as the others are read.
func TestTrainPrintsProgress(t *testing.T) {
	_, cfg := objectRun(t)
	cfg.Sharding.TargetSeriesPerShard = 100
	ctx := context.Background()
	if ps, err := RunPlan(ctx, cfg, testEnv()); err != nil || ps.Shards != 1 {
		t.Fatalf("plan: %+v %v, want one shard", ps, err)
	}
	for _, whole := range []bool{true, false} {
		var log lockedBuffer
		env := testEnv()
		env.Log, env.ProgressEvery, env.wholeShard = &log, -1, whole
		if _, err := RunTrain(ctx, cfg, 0, env); err != nil {
			t.Fatal(err)
		}
		lines := progressLines(t, log.String())
		if len(lines) != 3 {
			t.Fatalf("whole shard %v: %d progress lines, want 3 (reading, fitting, done):\n%s", whole, len(lines), log.String())
		}
		first, fit, last := lines[0], lines[1], lines[2]
		if first.Phase != summary.PhaseReading || first.Units != 3 || first.UnitsRead != 0 || first.Planned != 0 {
			t.Errorf("whole shard %v: first line %+v", whole, first)
		}
		if fit.Phase != summary.PhaseFitting || whole && (fit.UnitsRead != 3 || fit.Planned != 7) ||
			!whole && (fit.UnitsRead < 1 || fit.Planned < 2 || fit.Planned > 3) {
			t.Errorf("whole shard %v: fitting line %+v", whole, fit)
		}
		if last.Phase != summary.PhaseDone || last.Done != 7 || last.Planned != 7 || last.UnitsWritten != 3 || last.Shard != 0 {
			t.Errorf("whole shard %v: last line %+v", whole, last)
		}
		if p, ok := summary.LastProgress([]byte(log.String())); !ok || p != last {
			t.Errorf("whole shard %v: LastProgress = %+v %v, want the done line", whole, p, ok)
		}
	}
}

// TestTrackerTimes: idleSeconds counts from the last change, fitSeconds from the start of
// fitting, on an injected clock; the ticker repeats the line without moving anything.
func TestTrackerTimes(t *testing.T) {
	var mu sync.Mutex
	now := time.Date(2026, 12, 4, 9, 0, 0, 0, time.UTC)
	clock := func() time.Time { mu.Lock(); defer mu.Unlock(); return now }
	advance := func(d time.Duration) { mu.Lock(); now = now.Add(d); mu.Unlock() }
	var log lockedBuffer
	tr := startTracker(Env{Now: clock, Log: &log, ProgressEvery: -1}, 5, 2)
	advance(10 * time.Second)
	tr.read()
	tr.read()
	advance(5 * time.Second)
	tr.fitting(100)
	advance(20 * time.Second)
	tr.done(40)
	advance(7 * time.Second)
	p := tr.snapshot()
	if p.Shard != 5 || p.Phase != summary.PhaseFitting || p.Done != 40 || p.Planned != 100 || p.UnitsRead != 2 {
		t.Fatalf("snapshot %+v", p)
	}
	if p.FitSeconds != 27 || p.IdleSeconds != 7 {
		t.Fatalf("fitSeconds %v idleSeconds %v, want 27 and 7", p.FitSeconds, p.IdleSeconds)
	}
	if !p.Time.Equal(now) {
		t.Fatalf("time %v, want %v", p.Time, now)
	}
	tr.finish()
	tr.finish() // a second finish (the deferred stop) must not panic
	if n := len(progressLines(t, log.String())); n != 4 {
		t.Fatalf("%d lines, want 4 (start, fitting, done twice)", n)
	}
}

// TestOverlapWritesWhatOneWorkerWrites: the outputs of a shard of several units do not depend
// on how many goroutines read and fit, nor on the order in which units finish.
func TestOverlapWritesWhatOneWorkerWrites(t *testing.T) {
	var snaps []map[string][]byte
	dir, cfg := objectRun(t)
	cfg.Sharding.TargetSeriesPerShard = 100
	ctx := context.Background()
	for _, workers := range []int{1, 4} {
		if err := os.RemoveAll(dir + "/out"); err != nil {
			t.Fatal(err)
		}
		env := testEnv()
		env.Workers = workers
		if _, err := RunPlan(ctx, cfg, env); err != nil {
			t.Fatal(err)
		}
		if _, err := RunTrain(ctx, cfg, 0, env); err != nil {
			t.Fatal(err)
		}
		snaps = append(snaps, snapshot(t, dir+"/out"))
	}
	if len(snaps[0]) < 12 || len(snaps[0]) != len(snaps[1]) {
		t.Fatalf("1 worker wrote %d files, 4 workers %d", len(snaps[0]), len(snaps[1]))
	}
	for name, b := range snaps[0] {
		if !bytes.Equal(b, snaps[1][name]) {
			t.Errorf("%s differs between 1 and 4 workers:\n%s\n%s", name, b, snaps[1][name])
		}
	}
}
