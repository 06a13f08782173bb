package pipeline

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
)

// RunPublish is the publish command. For every unit of the plan it checks this run's
// unit.json and the checksum of every file it lists. A unit that passes is trained; one that
// does not (its shard failed or was killed) takes the previous manifest's entry for the same
// unit, whose files are verified the same way, and is carried forward; a unit with neither is
// missing. Then it writes MANIFEST.json and, only after that, replaces latest.json.
//
// First a damaged latest.json is repaired from the manifest chain (repairLatest), whatever
// the verdict on this run. Before writing anything, the run must pass the publish guard (runconfig.Publish, see
// guard); a run below it writes no manifest and fails with ErrRefused, naming its counts and
// the most frequent rejection reasons, so a run that lost its series never replaces good
// forecasts.
//
// Missing units do not fail publish on their own: the other units' forecasts are good and are published,
// and the manifest says complete: false, lists the missing units and the summary counts them
// (summary.Missing), so nothing claims a completeness it lacks. Publish fails (and moves
// nothing) when the plan cannot be read or storage fails; rerunning it gives the same bytes,
// and a rerun after a later run was published leaves latest.json on the later run.
func RunPublish(ctx context.Context, cfg *runconfig.Config, env Env) (summary.Summary, error) {
	sum := summary.Summary{Kind: summary.KindPublish}
	if _, err := Check(cfg); err != nil {
		return sum, err
	}
	if err := repairOutput(ctx, cfg, env); err != nil {
		return sum, err
	}
	out, p, prev, err := openRun(ctx, cfg)
	if err != nil {
		return sum, err
	}
	defer out.Close()
	m := Manifest{Version: ManifestVersion, Run: cfg.Run, Partitioning: p.Partitioning, Buckets: p.Buckets}
	if prev != nil {
		m.PreviousRun = prev.Run
	}
	m.Broken = p.brokenAtPlan()
	for _, u := range p.Units {
		e, broken, err := publishUnit(ctx, out, cfg.Run, prev, u.ID)
		if err != nil {
			return sum, err
		}
		if o, ok := p.object(u.Object); ok && o.Broken != "" && e.State != StateTrained {
			e.Reason = fmt.Sprintf("input object %s was broken at plan: %s", o.Key, o.Broken)
			if e.State == StateMissing {
				e.Reason += "; no earlier run has the unit"
			}
		}
		m.Broken = mergeBroken(m.Broken, broken)
		m.Units = append(m.Units, e)
		m.Totals.add(e)
	}
	sum.Broken = brokenText(m.Broken)
	m.Complete = m.Totals.Missing == 0
	rec, why, err := reconciledUnits(ctx, out, cfg.Run, p, &m)
	if err != nil {
		return sum, err
	}
	if why != "" {
		sum.Refused = true
		env.logf("publish: %s: refused: %s", cfg.Run, why)
		return sum, fmt.Errorf("publish refused, latest.json left as it was: %s: %w", why, ErrRefused)
	}
	sum.Units = m.Totals.Units
	sum.CarriedForward = m.Totals.CarriedForward
	sum.Missing = m.Totals.Missing
	sum.Series = m.Totals.Series.Series
	sum.Trained = m.Totals.Series.Trained
	sum.Rejected = m.Totals.Series.Rejected
	if verdict := guard(cfg.PublishGuard(), p, prev, &m); verdict != "" {
		sum.Refused = true
		reasons, err := topReasons(ctx, out, cfg.Run, cfg.Source.Columns.Series, &m, 3)
		if err != nil {
			return sum, err
		}
		env.logf("publish: %s: refused: %s", cfg.Run, verdict)
		return sum, fmt.Errorf("publish refused, latest.json left as it was: %s%s: %w", verdict, reasons, ErrRefused)
	}
	if rec != nil {
		e := ManifestUnit{ID: SpanningUnit, State: StateTrained, Source: cfg.Run, Files: rec.Files}
		m.Units = append(m.Units, e)
		m.Totals.add(e)
		sum.Units = m.Totals.Units
	}
	key := store.RunKey(cfg.Run, store.ManifestName)
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return sum, err
	}
	moved, err := commit(ctx, out, cfg.Run, prev, key, append(b, '\n'))
	if err != nil {
		return sum, err
	}
	if !moved {
		env.logf("publish: %s: latest.json already names a later run built on this one; left as it is", cfg.Run)
	}
	sum.Accuracy = m.Totals.Accuracy
	sum.Manifest = key
	env.logf("publish: %s: %d units (%d carried forward, %d missing)", cfg.Run, sum.Units, sum.CarriedForward, sum.Missing)
	return sum, nil
}

// commit writes the manifest and then moves latest.json to it, so that no reader following
// latest.json ever finds a manifest other than the one it names:
//
//   - If latest.json names this run and the manifest is about to change (a publish rerun after
//     more shards finished), latest.json first goes back to the previous run (or is removed
//     on a first run), then the manifest is replaced, then latest.json names it again. A
//     reader in between sees the previous complete run.
//   - If latest.json names a later run built on this one (a stale rerun), the manifest is
//     written but latest.json is left alone; moved is false.
func commit(ctx context.Context, out *store.Store, run string, prev *Manifest, key string, b []byte) (moved bool, err error) {
	cur, _, _, err := latest(ctx, out)
	if err != nil {
		return false, err
	}
	sum := store.SHA256(b)
	if cur.Run == run && cur.ManifestSHA256 != sum {
		if err := stepBack(ctx, out, prev); err != nil {
			return false, err
		}
	}
	if err := out.Put(ctx, key, b); err != nil {
		return false, storageErr(err)
	}
	if cur.Run != "" && cur.Run != run {
		newer, err := descends(ctx, out, cur.Run, run)
		if err != nil || newer {
			return false, err
		}
	}
	return true, storageErr(out.WriteLatest(ctx, store.Pointer{Run: run, Manifest: key, ManifestSHA256: sum}))
}

// stepBack points latest.json at the previous run's manifest, or removes it when there is none.
func stepBack(ctx context.Context, out *store.Store, prev *Manifest) error {
	if prev == nil {
		return storageErr(out.Delete(ctx, store.LatestKey))
	}
	key := store.RunKey(prev.Run, store.ManifestName)
	pb, err := out.Get(ctx, key)
	if err != nil {
		return storageErr(err)
	}
	return storageErr(out.WriteLatest(ctx, store.Pointer{Run: prev.Run, Manifest: key, ManifestSHA256: store.SHA256(pb)}))
}

// publishUnit decides one unit's manifest entry and returns the input objects its unit.json
// says the shard went without.
func publishUnit(ctx context.Context, out *store.Store, run string, prev *Manifest, id string) (ManifestUnit, []BrokenObject, error) {
	done, reason, err := verifyUnit(ctx, out, run, id)
	if err != nil {
		return ManifestUnit{}, nil, err
	}
	if reason == "" {
		return ManifestUnit{ID: id, State: StateTrained, Source: run, Files: done.Files, Counts: done.Counts, Accuracy: done.Accuracy}, done.Broken, nil
	}
	e, err := earlierEntry(ctx, out, prev, id, reason)
	return e, nil, err
}

// earlierEntry is the entry of a unit this run did not train: the previous manifest's,
// carried forward, when its files verify; else missing.
func earlierEntry(ctx context.Context, out *store.Store, prev *Manifest, id, reason string) (ManifestUnit, error) {
	if prev != nil {
		if e, ok := prev.unit(id); ok && e.State != StateMissing {
			bad, err := verifyFiles(ctx, out, e.Files)
			if err != nil {
				return ManifestUnit{}, err
			}
			if bad == "" {
				// The previous accuracy belongs to the previous run, not this one.
				return ManifestUnit{ID: id, State: StateCarried, Source: e.Source, Files: e.Files, Counts: e.Counts,
					Reason: reason}, nil
			}
			reason += "; the previous forecast from " + e.Source + " is unusable: " + bad
		}
	}
	return ManifestUnit{ID: id, State: StateMissing, Reason: reason}, nil
}

// verifyUnit reads runs/<run>/units/<id>/unit.json and checks its files. reason is non-empty
// when the unit is not usable; err only for storage failures.
func verifyUnit(ctx context.Context, out *store.Store, run, id string) (UnitDone, string, error) {
	key := store.UnitKey(run, id, store.UnitDoneName)
	b, err := out.Get(ctx, key)
	if errors.Is(err, store.ErrNotFound) {
		return UnitDone{}, "its shard did not finish (no unit.json)", nil
	}
	if err != nil {
		return UnitDone{}, "", storageErr(err)
	}
	var d UnitDone
	if err := json.Unmarshal(b, &d); err != nil || d.Version != ManifestVersion || d.Run != run || d.Unit != id {
		return d, fmt.Sprintf("%s is not this unit's record", key), nil
	}
	bad, err := verifyFiles(ctx, out, d.Files)
	return d, bad, err
}

// verifyFiles checks that every file exists with its recorded size and checksum; it returns
// the first problem, or "".
func verifyFiles(ctx context.Context, out *store.Store, files []File) (string, error) {
	if len(files) == 0 {
		return "no files listed", nil
	}
	for _, f := range files {
		n, sum, err := hashObject(ctx, out, f.Key)
		if errors.Is(err, store.ErrNotFound) {
			return f.Key + " is gone", nil
		}
		if err != nil {
			return "", storageErr(err)
		}
		if n != f.Bytes || sum != f.SHA256 {
			return fmt.Sprintf("%s does not match its checksum", f.Key), nil
		}
	}
	return "", nil
}

// hashObject streams an object through SHA-256 and returns its size and hex digest.
func hashObject(ctx context.Context, out *store.Store, key string) (int64, string, error) {
	r, err := out.Open(ctx, key)
	if err != nil {
		return 0, "", err
	}
	defer r.Close()
	h := sha256.New()
	n, err := io.Copy(h, r)
	if err != nil {
		return 0, "", err
	}
	return n, hex.EncodeToString(h.Sum(nil)), nil
}

// add counts one entry into the totals.
func (t *Totals) add(e ManifestUnit) {
	t.Units++
	switch e.State {
	case StateTrained:
		t.Trained++
	case StateCarried:
		t.CarriedForward++
	case StateMissing:
		t.Missing++
	}
	t.Series.Series += e.Counts.Series
	t.Series.Trained += e.Counts.Trained
	t.Series.Rejected += e.Counts.Rejected
	t.Series.Carried += e.Counts.Carried
	t.Series.CarriedBroken += e.Counts.CarriedBroken
	addCounts(&t.Series.Models, e.Counts.Models)
	addCounts(&t.Series.Designs, e.Counts.Designs)
	addCounts(&t.Series.DesignsByShard, e.Counts.DesignsByShard)
	if e.Accuracy != nil {
		if t.Accuracy == nil {
			t.Accuracy = &summary.Accuracy{}
		}
		t.Accuracy.Add(*e.Accuracy)
	}
}

// addCounts adds the counts of from into *to, creating it when needed.
func addCounts(to *map[string]int, from map[string]int) {
	for k, n := range from {
		if *to == nil {
			*to = map[string]int{}
		}
		(*to)[k] += n
	}
}
