package pipeline

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"

	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
)

// ManifestVersion is the version of MANIFEST.json and unit.json this package writes and reads.
const ManifestVersion = 1

// Unit states in the manifest.
const (
	// StateTrained: this run's shard wrote and verified the unit.
	StateTrained = "trained"
	// StateCarried: the unit's shard failed; the entry is the previous manifest's, whose files
	// live under an earlier run (Source).
	StateCarried = "carriedForward"
	// StateMissing: the shard failed and no earlier run has the unit; it has no files.
	StateMissing = "missing"
)

// File is one table file of a unit.
type File struct {
	// Table is "forecasts", "models", "evaluation" or "rejected".
	Table string `json:"table"`
	// Key is relative to the output URI.
	Key    string `json:"key"`
	Bytes  int64  `json:"bytes"`
	SHA256 string `json:"sha256"`
}

// Counts are a unit's series counts.
type Counts struct {
	// Series is the number of series train found in the unit (trained + rejected).
	Series   int `json:"series"`
	Trained  int `json:"trained"`
	Rejected int `json:"rejected"`
	// Carried counts the rejected series whose previous forecast was carried forward, series
	// by series (carryForward; publish.maxCarriedRuns).
	Carried int `json:"carried,omitempty"`
	// CarriedBroken counts the carried series whose rows were in a broken input object (hash
	// buckets; part of Carried). The publish guard counts them as forecast, as it counts the
	// series of a broken object's unit carried forward whole with the Objects layout.
	CarriedBroken int `json:"carriedBroken,omitempty"`
	// Models counts trained series by chosen model family.
	Models map[string]int `json:"models,omitempty"`
	// Designs counts trained series by the design that forecast them (design.Result.Design).
	Designs map[string]int `json:"designs,omitempty"`
	// DesignsByShard counts, of those, the series whose design the shard chose on its own
	// series (their segment was not in the plan's decision; design.FromShard).
	DesignsByShard map[string]int `json:"designsByShard,omitempty"`
}

// UnitDone is unit.json, written by train last in a unit's folder.
type UnitDone struct {
	Version int    `json:"version"`
	Run     string `json:"run"`
	Unit    string `json:"unit"`
	Files   []File `json:"files"`
	Counts  Counts `json:"counts"`
	// Accuracy sums the unit's evaluation of the previous run (nil when nothing was evaluated).
	Accuracy *summary.Accuracy `json:"accuracy,omitempty"`
	// Calibration sums the coverage, pinball and bias of that evaluation (nil when none).
	Calibration *summary.Calibration `json:"calibration,omitempty"`
	// Stability sums how far this run's forecasts moved from the previous run's (nil when none).
	Stability *summary.Stability `json:"stability,omitempty"`
	// PreviousRun is the run whose forecasts were evaluated ("" on a first run).
	PreviousRun string `json:"previousRun,omitempty"`
	// Levels (hierarchical runs) counts the nodes the unit forecast per hierarchy level, with
	// the accuracy of their evaluation.
	Levels []summary.Level `json:"levels,omitempty"`
	// Broken lists the input objects the unit's shard could not read (hash buckets: every
	// shard reads every object) and went on without (loadBuckets).
	Broken []BrokenObject `json:"broken,omitempty"`
}

// ManifestUnit is one unit's entry in the manifest.
type ManifestUnit struct {
	ID    string `json:"id"`
	State string `json:"state"`
	// Source is the run whose files the entry lists ("" when missing).
	Source   string            `json:"source,omitempty"`
	Files    []File            `json:"files,omitempty"`
	Counts   Counts            `json:"counts"`
	Accuracy *summary.Accuracy `json:"accuracy,omitempty"`
	// Reason says why the unit was carried forward or is missing.
	Reason string `json:"reason,omitempty"`
}

// Manifest is MANIFEST.json, written last by publish.
type Manifest struct {
	Version int    `json:"version"`
	Run     string `json:"run"`
	// PreviousRun is the run this one followed (evaluated and carried forward from).
	PreviousRun  string `json:"previousRun,omitempty"`
	Partitioning string `json:"partitioning"`
	Buckets      int    `json:"buckets,omitempty"`
	// Complete is true when no unit is missing. Carried-forward units count as present: they
	// hold the newest forecast there is for their series.
	Complete bool           `json:"complete"`
	Units    []ManifestUnit `json:"units"`
	Totals   Totals         `json:"totals"`
	// Broken lists the input objects the run could not read, at plan or in train; their
	// series kept their previous forecasts (carried forward by unit or by series).
	Broken []BrokenObject `json:"brokenObjects,omitempty"`
}

// Totals add up the manifest's units.
type Totals struct {
	Units          int               `json:"units"`
	Trained        int               `json:"trainedUnits"`
	CarriedForward int               `json:"carriedForwardUnits"`
	Missing        int               `json:"missingUnits"`
	Series         Counts            `json:"series"`
	Accuracy       *summary.Accuracy `json:"accuracy,omitempty"`
}

// unit returns the manifest entry of a unit id.
func (m *Manifest) unit(id string) (ManifestUnit, bool) {
	for _, u := range m.Units {
		if u.ID == id {
			return u, true
		}
	}
	return ManifestUnit{}, false
}

// file returns the entry's file of a table.
func (u ManifestUnit) file(table string) (File, bool) {
	for _, f := range u.Files {
		if f.Table == table {
			return f, true
		}
	}
	return File{}, false
}

// readManifest reads and checks runs/<run>/MANIFEST.json.
func readManifest(ctx context.Context, out *store.Store, run string) (*Manifest, error) {
	key := store.RunKey(run, store.ManifestName)
	b, err := out.Get(ctx, key)
	if err != nil {
		if errors.Is(err, store.ErrNotFound) {
			return nil, fmt.Errorf("run %s has no manifest (not published): %w: %w", run, ErrConfig, err)
		}
		return nil, storageErr(err)
	}
	var m Manifest
	if err := json.Unmarshal(b, &m); err != nil {
		return nil, fmt.Errorf("%s: %w: %w", out.Describe(key), store.ErrDamaged, err)
	}
	if m.Version != ManifestVersion || m.Run != run {
		return nil, fmt.Errorf("%s: version %d run %q, want version %d run %q: %w", out.Describe(key), m.Version, m.Run, ManifestVersion, run, store.ErrDamaged)
	}
	return &m, nil
}
