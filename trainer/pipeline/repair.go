package pipeline

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strings"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

// latest returns the pointer latest.json holds, or, when latest.json is damaged (not a
// pointer, naming a manifest that is gone, or with another checksum: store.ErrDamaged), the
// pointer rebuilt from the manifest chain (rebuildLatest) and why it was rebuilt. ok is false
// when nothing was published (or nothing intact is left).
func latest(ctx context.Context, out *store.Store) (p store.Pointer, ok bool, damaged error, err error) {
	p, ok, err = out.ReadLatest(ctx)
	if err == nil || !errors.Is(err, store.ErrDamaged) {
		return p, ok, nil, storageErr(err)
	}
	p, ok, rerr := rebuildLatest(ctx, out)
	if rerr != nil {
		return store.Pointer{}, false, err, rerr
	}
	return p, ok, err, nil
}

// rebuildLatest finds the newest intact published run from the manifests under runs/: every
// runs/<run>/MANIFEST.json that decodes as this run's manifest is a candidate; a candidate's
// depth is the length of its chain of previousRun links through other candidates; the
// newest is the deepest (ties: the greatest run name, which for the controller's
// <portfolio>-<time> names is the latest), among those whose listed files are all present
// with their checksums. A published run's manifest is written only after all its units
// verified, so the deepest intact one is the run latest.json named or, if that one is the
// damage, its predecessor. ok is false when no manifest is intact.
func rebuildLatest(ctx context.Context, out *store.Store) (store.Pointer, bool, error) {
	objs, err := out.List(ctx, "runs/")
	if err != nil {
		return store.Pointer{}, false, storageErr(err)
	}
	manifests := map[string]*Manifest{}
	for _, o := range objs {
		run, ok := strings.CutSuffix(strings.TrimPrefix(o.Key, "runs/"), "/"+store.ManifestName)
		if !ok || strings.Contains(run, "/") || store.CheckName("run", run) != nil {
			continue
		}
		m, err := readManifest(ctx, out, run)
		if errors.Is(err, store.ErrDamaged) {
			continue
		}
		if err != nil {
			return store.Pointer{}, false, err
		}
		manifests[run] = m
	}
	depth := map[string]int{}
	var depthOf func(run string, n int) int
	depthOf = func(run string, n int) int {
		m, ok := manifests[run]
		if !ok || n > maxChain {
			return 0
		}
		if d, ok := depth[run]; ok {
			return d
		}
		d := 1 + depthOf(m.PreviousRun, n+1)
		depth[run] = d
		return d
	}
	runs := make([]string, 0, len(manifests))
	for run := range manifests {
		depthOf(run, 0)
		runs = append(runs, run)
	}
	sort.Slice(runs, func(i, j int) bool {
		if depth[runs[i]] != depth[runs[j]] {
			return depth[runs[i]] > depth[runs[j]]
		}
		return runs[i] > runs[j]
	})
	for _, run := range runs {
		intact := true
		for _, u := range manifests[run].Units {
			if u.State == StateMissing {
				continue
			}
			bad, err := verifyFiles(ctx, out, u.Files)
			if err != nil {
				return store.Pointer{}, false, err
			}
			if bad != "" {
				intact = false
				break
			}
		}
		if !intact {
			continue
		}
		key := store.RunKey(run, store.ManifestName)
		b, err := out.Get(ctx, key)
		if err != nil {
			return store.Pointer{}, false, storageErr(err)
		}
		return store.Pointer{Run: run, Manifest: key, ManifestSHA256: store.SHA256(b)}, true, nil
	}
	return store.Pointer{}, false, nil
}

// repairLatest rewrites a damaged latest.json from the manifest chain (or removes it when no
// intact run is left), so that readers following it find a published run again; it is what
// publish does first. It returns a note for the log, or "".
func repairLatest(ctx context.Context, out *store.Store) (string, error) {
	p, ok, damaged, err := latest(ctx, out)
	if err != nil || damaged == nil {
		return "", err
	}
	if !ok {
		if err := out.Delete(ctx, store.LatestKey); err != nil {
			return "", storageErr(err)
		}
		return fmt.Sprintf("%s removed: no intact published run is left (%v)", store.LatestKey, damaged), nil
	}
	if err := out.WriteLatest(ctx, p); err != nil {
		return "", storageErr(err)
	}
	return fmt.Sprintf("%s repaired from the manifest chain: it names %s again (%v)", store.LatestKey, p.Run, damaged), nil
}

// repairOutput opens the output and repairs its latest.json (repairLatest), logging what it did.
func repairOutput(ctx context.Context, cfg *runconfig.Config, env Env) error {
	out, err := openOutput(ctx, cfg)
	if err != nil {
		return err
	}
	defer out.Close()
	note, err := repairLatest(ctx, out)
	if note != "" {
		env.logf("publish: %s: %s", cfg.Run, note)
	}
	return err
}
