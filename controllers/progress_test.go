package controllers

import (
	"testing"
	"time"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

var progressT0 = time.Date(2026, 12, 4, 10, 0, 0, 0, time.UTC)

func at(s int) time.Time { return progressT0.Add(time.Duration(s) * time.Second) }

func TestStalledShards(t *testing.T) {
	after := 600 * time.Second
	readings := []shardReading{
		// moving: line 10 s old, idle 2 s
		{Shard: 0, Started: at(0), Progress: &summary.Progress{Time: at(990), Done: 50, IdleSeconds: 2}},
		// hung: keeps printing, idle for 700 s
		{Shard: 1, Started: at(0), Progress: &summary.Progress{Time: at(995), IdleSeconds: 700}},
		// frozen: its last line, idle 0, is 650 s old
		{Shard: 2, Started: at(0), Progress: &summary.Progress{Time: at(350)}},
		// no line since its start 900 s ago
		{Shard: 3, Started: at(100)},
		// no line, started 100 s ago
		{Shard: 4, Started: at(900)},
		// log unreadable: left out
		{Shard: 5, Started: at(0), Unread: true},
		// idle exactly the threshold counts
		{Shard: 6, Started: at(0), Progress: &summary.Progress{Time: at(1000), IdleSeconds: 600}},
	}
	got := stalledShards(at(1000), readings, after)
	want := []int{1, 2, 3, 6}
	if len(got) != len(want) {
		t.Fatalf("stalled %v, want %v", got, want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("stalled %v, want %v", got, want)
		}
	}
	if s := indexRanges([]int{1, 2, 3, 6}); s != "1-3,6" {
		t.Errorf("indexRanges = %q", s)
	}
}

// TestSmoothedRate: simple exponential smoothing with weight 0.5 (Brown 1959): readings of
// 100 and then 300 series in two 10 s intervals give 10, then 0.5·30 + 0.5·10 = 20.
func TestSmoothedRate(t *testing.T) {
	r1 := smoothedRate(0, 0, at(0), 100, at(10))
	if r1 != 10 {
		t.Fatalf("first rate %v, want 10", r1)
	}
	r2 := smoothedRate(r1, 100, at(10), 400, at(20))
	if r2 != 20 {
		t.Fatalf("second rate %v, want 20", r2)
	}
	if r := smoothedRate(r2, 400, at(20), 500, at(20).Add(300*time.Millisecond)); r != r2 {
		t.Fatalf("a reading under a second later changed the rate to %v", r)
	}
	if r := smoothedRate(0, 0, time.Time{}, 100, at(10)); r != 0 {
		t.Fatalf("no previous reading gave rate %v, want 0", r)
	}
	if r := smoothedRate(r2, 500, at(20), 400, at(30)); r != 10 {
		t.Fatalf("a falling count (a retried shard starts over) gave %v, want 0.5·0 + 0.5·20 = 10", r)
	}
}

func TestEstimatedEndAndPercent(t *testing.T) {
	end, ok := estimatedEnd(at(0), 10000, 4000, 20)
	if !ok || !end.Equal(at(300)) {
		t.Fatalf("end %v %v, want +300 s", end, ok)
	}
	if _, ok := estimatedEnd(at(0), 10000, 4000, 0); ok {
		t.Fatal("an end without a rate")
	}
	if _, ok := estimatedEnd(at(0), 0, 4000, 5); ok {
		t.Fatal("an end without a plan")
	}
	if end, _ := estimatedEnd(at(0), 100, 150, 5); !end.Equal(at(0)) {
		t.Fatalf("more done than planned (an estimate) ends now, got %v", end)
	}
	for _, c := range []struct {
		planned, done int64
		want          int32
	}{{1000, 0, 0}, {1000, 999, 99}, {1000, 1000, 100}, {1000, 1500, 100}, {0, 10, 0}} {
		if got := percentDone(c.planned, c.done); got != c.want {
			t.Errorf("percentDone(%d, %d) = %d, want %d", c.planned, c.done, got, c.want)
		}
	}
	for r, want := range map[float64]string{1234.4: "1234", 42.25: "42.2", 0.1234: "0.123"} {
		if got := formatRate(r); got != want {
			t.Errorf("formatRate(%v) = %q, want %q", r, got, want)
		}
	}
}

func TestNextProgress(t *testing.T) {
	readings := []shardReading{
		{Shard: 2, Started: at(0), Progress: &summary.Progress{Time: at(29), Done: 300}},
		{Shard: 3, Started: at(0), Progress: &summary.Progress{Time: at(29), Done: 100}},
		{Shard: 4, Started: at(25)},
	}
	p, stalled := nextProgress(nil, 2000, 10000, readings, time.Time{}, at(30), DefaultStallAfter)
	if p.SeriesDone != 2400 || p.Percent != 24 || p.RunningShards != 3 || len(stalled) != 0 || p.StalledShards != "" {
		t.Fatalf("first reading %+v, stalled %v", p, stalled)
	}
	if p.SeriesPerSecond != "" || p.EstimatedEnd != nil || !p.TrainingStartTime.Time.Equal(at(30)) {
		t.Fatalf("first reading has a rate or end without a previous reading: %+v", p)
	}
	readings[0].Progress = &summary.Progress{Time: at(59), Done: 500}
	readings[1].Progress = &summary.Progress{Time: at(59), Done: 300}
	p2, _ := nextProgress(p, 2000, 10000, readings, at(5), at(60), DefaultStallAfter)
	// 400 more in 30 s: 13.3 series/s; 10000 - 2800 = 7200 left: 540 s.
	if p2.SeriesDone != 2800 || p2.SeriesPerSecond != "13.3" || !p2.EstimatedEnd.Time.Equal(at(600)) || !p2.TrainingStartTime.Time.Equal(at(30)) {
		t.Fatalf("second reading %+v (end %v)", p2, p2.EstimatedEnd)
	}
	f := finalProgress(p2, 9990, 10000, at(5), at(530))
	// 9990 series over the 500 s since training was first seen (the start in status wins).
	if f.Percent != 100 || f.SeriesDone != 9990 || f.SeriesPerSecond != "20.0" || !f.EstimatedEnd.Time.Equal(at(530)) {
		t.Fatalf("final %+v", f)
	}
	// Without a reading, the train Job's start; a run under a second counts one second.
	if f := finalProgress(nil, 400, 400, at(10), at(30)); f.SeriesPerSecond != "20.0" || !f.TrainingStartTime.Time.Equal(at(10)) {
		t.Fatalf("final without readings %+v", f)
	}
	if f := finalProgress(nil, 40, 40, at(30), at(30)); f.SeriesPerSecond != "40.0" {
		t.Fatalf("final within a second %+v", f)
	}
	fp := &forecastingv1alpha1.ForecastPortfolio{}
	if stallAfter(fp) != DefaultStallAfter {
		t.Fatal("an undefaulted portfolio has no stall threshold")
	}
	fp.Spec.Sharding.StallAfterSeconds = 120
	if stallAfter(fp) != 2*time.Minute {
		t.Fatal("stallAfterSeconds ignored")
	}
}
