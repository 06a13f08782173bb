package summary

import (
	"bytes"
	"encoding/json"
	"fmt"
	"time"
)

// ProgressPrefix starts every progress line a train pod prints to its log; the rest of the
// line is a Progress in JSON.
const ProgressPrefix = "almanac-progress "

// ProgressInterval is how often a train pod prints a progress line while it works (it also
// prints one at every phase change). The controller's stall threshold must exceed it
// (spec.sharding.stallAfterSeconds is at least 60).
const ProgressInterval = 30 * time.Second

// Phases of a train pod, in order.
const (
	PhaseReading = "reading" // reading and collecting the shard's units
	PhaseFitting = "fitting" // choosing the design and forecasting (units are written as they finish; when units are fitted as they are read, reading goes on)
	PhaseDone    = "done"    // every unit written; the summary follows
)

// Progress is one progress line of a train pod: where the shard stands at Time. It reaches the
// controller through the pod's log (the controller reads the last lines of each running train
// pod when it requeues); the trainer holds no API credentials and the controller no storage
// ones, so neither a status object nor a storage object would do.
type Progress struct {
	Shard int    `json:"shard"`
	Phase string `json:"phase"`
	// Time is when the line was written (the pod's clock).
	Time time.Time `json:"time"`
	// Units of the shard, read, and written.
	Units        int `json:"units"`
	UnitsRead    int `json:"unitsRead"`
	UnitsWritten int `json:"unitsWritten"`
	// Planned is the series count (series plus rejected at collection) of the units read
	// so far, which is the shard's once every unit is read (when fitting waits for the whole
	// shard, from the fitting line on); Done the series forecast or rejected so far.
	Planned int `json:"planned"`
	Done    int `json:"done"`
	// FitSeconds is the wall time since fitting started (0 before).
	FitSeconds float64 `json:"fitSeconds"`
	// IdleSeconds is how long none of Phase, UnitsRead, Done and UnitsWritten has changed.
	IdleSeconds float64 `json:"idleSeconds"`
}

// Line renders p as one log line, without the newline.
func (p Progress) Line() string {
	b, _ := json.Marshal(p) // plain fields: cannot fail
	return ProgressPrefix + string(b)
}

// LastProgress returns the last well-formed progress line in a log excerpt; ok is false when
// there is none. Lines that start with the prefix but do not decode are skipped (a line cut by
// the excerpt's byte limit, for instance).
func LastProgress(log []byte) (p Progress, ok bool) {
	for len(log) > 0 {
		i := bytes.LastIndexByte(log[:len(log)-1], '\n')
		line := bytes.TrimSpace(log[i+1:])
		log = log[:i+1]
		if i < 0 {
			log = nil
		}
		rest, found := bytes.CutPrefix(line, []byte(ProgressPrefix))
		if !found {
			continue
		}
		var q Progress
		if err := json.Unmarshal(rest, &q); err == nil {
			return q, true
		}
	}
	return Progress{}, false
}

// ParseProgress decodes one progress line.
func ParseProgress(line string) (Progress, error) {
	rest, found := bytes.CutPrefix([]byte(line), []byte(ProgressPrefix))
	if !found {
		return Progress{}, fmt.Errorf("progress: line does not start with %q", ProgressPrefix)
	}
	var p Progress
	if err := json.Unmarshal(rest, &p); err != nil {
		return Progress{}, fmt.Errorf("progress: %w", err)
	}
	return p, nil
}
