package controllers

import (
	"math"
	"sort"
	"strconv"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// Progress of a run, pure: the run reconciler reads each running train pod's last progress line
// (podlogs.go) and these functions turn the readings into status.progress and the stalled
// shards. No client calls here.

// DefaultStallAfter is spec.sharding.stallAfterSeconds' default (the CRD's, repeated for a
// portfolio object that was not defaulted, as in unit tests).
const DefaultStallAfter = 900 * time.Second

// rateWeight is the weight of the newest reading in the smoothed rate (simple exponential
// smoothing, Brown 1959; the weight is a common-practice choice, not tuned).
const rateWeight = 0.5

// shardReading is what the controller knows of one running train shard.
type shardReading struct {
	Shard int
	// Started is when the pod's container started (zero: unknown).
	Started time.Time
	// Progress is the pod's last progress line; nil when none was found.
	Progress *summary.Progress
	// Unread is true when the log could not be read (the shard is then left out of the stall
	// check rather than called stalled).
	Unread bool
}

// quietSince is when a shard last moved: its last line's time less the idle seconds it
// reported, or the container's start when it printed no line yet. Zero when unknown.
func quietSince(r shardReading) time.Time {
	if r.Progress != nil && !r.Progress.Time.IsZero() {
		return r.Progress.Time.Add(-time.Duration(r.Progress.IdleSeconds * float64(time.Second)))
	}
	return r.Started
}

// stalledShards returns the sorted indexes of the shards quiet for at least after at now: a
// hung pod keeps printing a growing idleSeconds; a frozen one stops printing, and its last
// line grows old.
func stalledShards(now time.Time, readings []shardReading, after time.Duration) []int {
	var out []int
	for _, r := range readings {
		if r.Unread {
			continue
		}
		since := quietSince(r)
		if since.IsZero() {
			continue
		}
		if now.Sub(since) >= after {
			out = append(out, r.Shard)
		}
	}
	sort.Ints(out)
	return out
}

// smoothedRate returns the rate after a new reading: the change of done over the time since
// the previous reading, weighted rateWeight against the previous rate (the first rate is the
// change itself). A reading less than a second after the previous one keeps the previous rate.
func smoothedRate(prevRate float64, prevDone int64, prevTime time.Time, done int64, now time.Time) float64 {
	dt := now.Sub(prevTime).Seconds()
	if prevTime.IsZero() || dt < 1 {
		return prevRate
	}
	cur := math.Max(float64(done-prevDone), 0) / dt
	if prevRate <= 0 {
		return cur
	}
	return rateWeight*cur + (1-rateWeight)*prevRate
}

// estimatedEnd is now + (planned - done) / rate; ok is false without a positive rate or a plan.
func estimatedEnd(now time.Time, planned, done int64, rate float64) (time.Time, bool) {
	if rate <= 0 || planned <= 0 {
		return time.Time{}, false
	}
	left := math.Max(float64(planned-done), 0)
	return now.Add(time.Duration(left / rate * float64(time.Second))).Truncate(time.Second), true
}

// percentDone is 100·done/planned rounded down, within 0..100.
func percentDone(planned, done int64) int32 {
	if planned <= 0 {
		return 0
	}
	return int32(min(100, max(0, done*100/planned)))
}

// stallAfter is the portfolio's spec.sharding.stallAfterSeconds, or the default.
func stallAfter(fp *forecastingv1alpha1.ForecastPortfolio) time.Duration {
	if fp == nil || fp.Spec.Sharding.StallAfterSeconds <= 0 {
		return DefaultStallAfter
	}
	return time.Duration(fp.Spec.Sharding.StallAfterSeconds) * time.Second
}

// nextProgress computes status.progress at now from the previous block (nil at the first
// reading), the series of the folded shards, the planned series, the running shards'
// readings and the train Job's start (zero: unknown). It returns the stalled shards too.
func nextProgress(prev *forecastingv1alpha1.RunProgress, folded, planned int64, readings []shardReading,
	trainStart, now time.Time, after time.Duration) (*forecastingv1alpha1.RunProgress, []int) {
	p := &forecastingv1alpha1.RunProgress{SeriesPlanned: planned, ObservedTime: &metav1.Time{Time: now},
		TrainingStartTime: startOf(prev, trainStart, now)}
	done := folded
	for _, r := range readings {
		if r.Progress != nil {
			done += int64(r.Progress.Done)
		}
	}
	p.SeriesDone = done
	p.RunningShards = int32(len(readings))
	p.Percent = percentDone(planned, done)
	var prevRate float64
	var prevDone int64
	var prevTime time.Time
	if prev != nil {
		prevRate, _ = strconv.ParseFloat(prev.SeriesPerSecond, 64)
		prevDone = prev.SeriesDone
		if prev.ObservedTime != nil {
			prevTime = prev.ObservedTime.Time
		}
	}
	rate := smoothedRate(prevRate, prevDone, prevTime, done, now)
	if rate > 0 {
		p.SeriesPerSecond = formatRate(rate)
	}
	if end, ok := estimatedEnd(now, planned, done, rate); ok {
		p.EstimatedEnd = &metav1.Time{Time: end}
	}
	stalled := stalledShards(now, readings, after)
	p.StalledShards = indexRanges(stalled)
	return p, stalled
}

// finalProgress is status.progress once the train Job has ended: every series counted, the
// mean rate over the whole training, and the end time.
func finalProgress(prev *forecastingv1alpha1.RunProgress, total, planned int64, trainStart, now time.Time) *forecastingv1alpha1.RunProgress {
	p := &forecastingv1alpha1.RunProgress{SeriesDone: total, SeriesPlanned: planned, Percent: 100,
		ObservedTime: &metav1.Time{Time: now}, EstimatedEnd: &metav1.Time{Time: now.Truncate(time.Second)},
		TrainingStartTime: startOf(prev, trainStart, now)}
	// A run trained within a second shows the rate of one second.
	p.SeriesPerSecond = formatRate(float64(total) / math.Max(now.Sub(p.TrainingStartTime.Time).Seconds(), 1))
	return p
}

// startOf is the training's start: the one already in status, else the train Job's start,
// else now.
func startOf(prev *forecastingv1alpha1.RunProgress, trainStart, now time.Time) *metav1.Time {
	switch {
	case prev != nil && prev.TrainingStartTime != nil:
		return prev.TrainingStartTime
	case !trainStart.IsZero():
		return &metav1.Time{Time: trainStart}
	}
	return &metav1.Time{Time: now}
}

// formatRate writes a rate for display: whole series per second from 100 up, one decimal from
// 1, three below.
func formatRate(r float64) string {
	switch {
	case r >= 100:
		return strconv.FormatFloat(math.Round(r), 'f', 0, 64)
	case r >= 1:
		return strconv.FormatFloat(r, 'f', 1, 64)
	}
	return strconv.FormatFloat(r, 'f', 3, 64)
}

// indexRanges writes indexes as ranges: [3 7 8 9] -> "3,7-9".
func indexRanges(idx []int) string {
	set := indexSet{}
	for _, i := range idx {
		set[i] = struct{}{}
	}
	return set.String()
}
