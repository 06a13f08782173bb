package pipeline

import (
	"context"
	"fmt"
	"sort"
	"strings"
	"sync"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
)

// RunPlan is the plan command. It lists the input, reads every object once counting rows
// and distinct series keys (the counts weigh the units and size the shards), builds the units
// the source's partitioning calls for, cuts them into shards (Cut), and writes
// runs/<run>/config.json and then runs/<run>/plan.json. The summary carries units, shards,
// series and input bytes. A broken object (isolate) is recorded in plan.json with the reason
// and the plan goes on without its rows (with partitioning Objects its unit stays, empty, for
// publish to carry forward); the summary names it. Only input with no readable row fails the
// plan (exit 3).
//
// Reading everything once costs one pass over the input, the same as training it; it buys
// exact series counts for the controller and for balancing. Memory is a set of 64-bit key
// hashes per object (all keys for hash buckets), not the rows.
//
// With selection.design Auto the same pass draws the design sample (designSample: the rows
// of at most Env.DesignSample series, design.DefaultSampleSeries by default, chosen by key
// hash), and plan decides the design of every segment it holds once for the run
// (design.Decide) and writes it into plan.json (Plan.Design); the shards apply it.
func RunPlan(ctx context.Context, cfg *runconfig.Config, env Env) (summary.Summary, error) {
	sum := summary.Summary{Kind: summary.KindPlan}
	st, err := Check(cfg)
	if err != nil {
		return sum, err // before any input or output is touched
	}
	out, err := openOutput(ctx, cfg)
	if err != nil {
		return sum, err
	}
	defer out.Close()
	p, err := buildPlan(ctx, cfg, st, out, env)
	if err != nil {
		return sum, err
	}
	for _, o := range p.Objects {
		sum.Bytes += o.Size
	}
	sum.Units, sum.Shards, sum.Series, sum.Reconcile = len(p.Units), len(p.Shards), p.Series, p.Reconcile
	sum.Broken = brokenText(p.brokenAtPlan())
	if p.Design != nil {
		sum.DroppedMembers, sum.HeldMembers = p.Design.DroppedMembers, p.Design.HeldMembers
	}
	cb, err := runconfig.Encode(cfg)
	if err != nil {
		return sum, err
	}
	if err := out.Put(ctx, store.RunKey(cfg.Run, store.ConfigName), cb); err != nil {
		return sum, storageErr(err)
	}
	pb, err := EncodePlan(p)
	if err != nil {
		return sum, err
	}
	if err := out.Put(ctx, store.RunKey(cfg.Run, store.PlanName), pb); err != nil {
		return sum, storageErr(err)
	}
	env.logf("plan: %d objects, %d series, %d units, %d shards", len(p.Objects), p.Series, len(p.Units), len(p.Shards))
	return sum, nil
}

// buildPlan does RunPlan's work short of writing; st is Check(cfg).
func buildPlan(ctx context.Context, cfg *runconfig.Config, st Settings, out *store.Store, env Env) (*Plan, error) {
	src, err := openSource(ctx, cfg.Source)
	if err != nil {
		return nil, err
	}
	defer src.st.Close()
	objs, err := src.list(ctx)
	if err != nil {
		return nil, err
	}
	cutoff := cfg.ScheduledTime
	if cutoff.IsZero() {
		cutoff = env.now()
	}
	cutoff = cutoff.UTC().Truncate(time.Second)
	var firstBroken error
	h := newHierarchy(cfg)
	smp, err := planSample(cfg, st, cutoff, env)
	if err != nil {
		return nil, err
	}
	p := &Plan{Version: PlanVersion, Run: cfg.Run, Partitioning: cfg.Source.Partitioning, Objects: objs, Cutoff: cutoff,
		Reconcile: h != nil && h.spanning}
	// prevRun is the previous run's manifest (nil on a first run), read once when first needed:
	// by a broken object's row groups, the bucket count, and the design's cost verdict.
	prevRun := sync.OnceValues(func() (*Manifest, error) { return previous(ctx, out, cfg) })
	// latest records the newest history row's date (not after the cutoff) for a hierarchy.
	// (and every row goes to the design sample, when there is one).
	latest := func(r ingest.Row) {
		if smp != nil {
			smp.add(r)
		}
		if h != nil && r.Problem == "" && !r.Date.After(p.Cutoff) && r.Date.After(p.HierarchyEnd) {
			p.HierarchyEnd = r.Date
		}
	}
	switch cfg.Source.Partitioning {
	case runconfig.PartitionObjects:
		for i, o := range objs {
			// A broken object keeps its unit (no series counted): train skips it and publish
			// carries the unit's previous forecast forward.
			u := Unit{ID: ObjectID(o.Key, nil), Object: o.Key}
			if u.Series, u.Rows, err = countKeys(ctx, src, o.Key, nil, latest); isolate(ctx, &objs[i], err, &firstBroken) != nil {
				return nil, err
			}
			smp.commit(objs[i].Broken != "")
			if objs[i].Broken != "" {
				u.Series, u.Rows = 0, 0
			}
			p.Units = append(p.Units, u)
		}
	case runconfig.PartitionRowGroups:
		for i, o := range objs {
			groups, err := src.rowGroups(ctx, o.Key)
			if isolate(ctx, &objs[i], err, &firstBroken) != nil {
				return nil, err
			}
			var units []Unit
			for g, info := range groups {
				if info.Rows == 0 || objs[i].Broken != "" {
					continue
				}
				gr := &ingest.GroupRange{From: g, To: g + 1}
				u := Unit{ID: ObjectID(o.Key, gr), Object: o.Key, Groups: gr}
				if u.Series, u.Rows, err = countKeys(ctx, src, o.Key, gr, latest); isolate(ctx, &objs[i], err, &firstBroken) != nil {
					return nil, err
				}
				smp.commit(objs[i].Broken != "")
				units = append(units, u)
			}
			if objs[i].Broken == "" {
				p.Units = append(p.Units, units...)
				continue
			}
			// The row groups of a broken object cannot be read: its units are the previous
			// run's for the object, kept empty so that publish carries them forward.
			prev, err := prevRun()
			if err != nil {
				return nil, err
			}
			p.Units = append(p.Units, previousGroupUnits(prev, o.Key)...)
		}
	default:
		rows := map[uint64]int64{}
		group := map[uint64]uint64{} // series key hash -> the hash its bucket is taken from
		for i, o := range objs {
			// Counted apart and merged only when the object reads whole, so a broken one adds nothing.
			own := map[uint64]int64{}
			err := src.scan(ctx, o.Key, nil, func(r ingest.Row) error {
				k := KeyHash(r.Key)
				own[k]++
				latest(r)
				if h != nil {
					if _, ok := group[k]; !ok {
						group[k] = KeyHash(h.bucketKey(r.Key))
					}
				}
				return nil
			})
			if isolate(ctx, &objs[i], err, &firstBroken) != nil {
				return nil, err
			}
			smp.commit(objs[i].Broken != "")
			if objs[i].Broken != "" {
				continue
			}
			for h, n := range own {
				rows[h] += n
			}
		}
		prevBuckets := 0
		var prev *Manifest
		if cfg.Sharding.Buckets == 0 || firstBroken != nil {
			if prev, err = prevRun(); err != nil {
				return nil, err
			}
			if prev != nil && hashedLayout(prev.Partitioning) {
				prevBuckets = prev.Buckets
			}
		}
		p.Buckets = ChooseBuckets(cfg.Sharding.Buckets, prevBuckets, len(rows), cfg.Sharding.TargetSeriesPerShard)
		p.Units = bucketUnits(rows, group, p.Buckets)
		if firstBroken != nil && prevBuckets == p.Buckets {
			// The previous run's buckets that only broken objects filled stay, empty, so that
			// train carries their series forward (carryForward).
			p.Units = keepPreviousBuckets(p.Units, prev, p.Buckets)
		}
	}
	sort.Slice(p.Units, func(i, j int) bool { return p.Units[i].ID < p.Units[j].ID })
	for _, u := range p.Units {
		p.Series += u.Series
		p.Rows += u.Rows
	}
	if p.Series == 0 && firstBroken != nil && len(p.brokenAtPlan()) == len(p.Objects) {
		return nil, fmt.Errorf("every input object is broken; the first: %w", firstBroken)
	}
	if p.Series == 0 {
		return nil, fmt.Errorf("%s: the input has no rows%s: %w", store.Redact(cfg.Source.URI), prefixed("; ", brokenText(p.brokenAtPlan())), ingest.ErrBrokenInput)
	}
	for _, b := range p.brokenAtPlan() {
		env.logf("plan: %s is broken, its series are carried forward: %s", b.Key, b.Reason)
	}
	if h != nil {
		if p.HierarchyEnd, err = lastPeriod(cfg.Source, p.HierarchyEnd); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrConfig, err)
		}
		if err := hierarchyStale(cfg, p.HierarchyEnd, p.Cutoff); err != nil {
			return nil, err
		}
	}
	p.Shards = Cut(p.Units, cfg.Sharding.TargetSeriesPerShard)
	if smp != nil {
		prev, err := prevRun()
		if err != nil {
			return nil, err
		}
		before := previousVerdict(ctx, out, prev, env)
		if err := decidePlanDesign(ctx, st, h != nil, p, smp, before, env); err != nil {
			return nil, err
		}
	}
	if err := p.Validate(); err != nil {
		return nil, fmt.Errorf("pipeline: built an invalid plan: %w", err)
	}
	return p, nil
}

// bucketUnits turns row counts by key hash into the non-empty bucket units; group maps a key
// hash to the hash its bucket is taken from when that is not the key's own (a hierarchy's
// shardBy cells, see hierarchy.bucketKey).
func bucketUnits(rows map[uint64]int64, group map[uint64]uint64, buckets int) []Unit {
	us := make([]Unit, buckets)
	for h, n := range rows {
		g, ok := group[h]
		if !ok {
			g = h
		}
		b := int(g & uint64(buckets-1))
		us[b].Series++
		us[b].Rows += n
	}
	var out []Unit
	for b, u := range us {
		if u.Series > 0 {
			u.ID, u.Bucket = BucketID(b, buckets), b
			out = append(out, u)
		}
	}
	return out
}

// countKeys counts the rows and distinct series keys of one object or row-group range.
func countKeys(ctx context.Context, src *source, key string, groups *ingest.GroupRange, latest func(ingest.Row)) (series int, rows int64, err error) {
	seen := map[uint64]struct{}{}
	err = src.scan(ctx, key, groups, func(r ingest.Row) error {
		latest(r)
		seen[KeyHash(r.Key)] = struct{}{}
		rows++
		return nil
	})
	return len(seen), rows, err
}

// planSample returns the design sample plan draws (nil unless selection.design is Auto).
func planSample(cfg *runconfig.Config, st Settings, cutoff time.Time, env Env) (*designSample, error) {
	if st.DesignMode != design.Auto {
		return nil, nil
	}
	s, err := newDesignSample(cfg, cutoff, env.designSample())
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrConfig, err)
	}
	return s, nil
}

// decidePlanDesign chooses the run's design per segment on the plan's design sample (after
// the same extension to the hierarchy's last period train gives bottom series, when the run
// has a hierarchy) and records it in p.Design; before is the previous run's cost verdict
// (previousVerdict; nil: none).
func decidePlanDesign(ctx context.Context, st Settings, hierarchical bool, p *Plan, smp *designSample, before *design.Before, env Env) error {
	in := smp.finish()
	if hierarchical {
		extendTo(in, p.HierarchyEnd)
	}
	opts := st.Design(env.Workers)
	opts.Before = before
	out, err := design.Decide(ctx, in, opts)
	if err != nil {
		return err
	}
	p.Design = design.NewRecord(out, opts.Rule, env.designSample())
	env.logf("plan: design chosen once for the run on a sample of %d series (%d inner-holdout series, %.1fs CPU): %s",
		len(in), out.InnerSeries, out.InnerCPU.Seconds(), choicesText(out))
	if len(out.NearBudget) > 0 || len(out.HeldMembers) > 0 {
		held := "none"
		if len(out.HeldMembers) > 0 {
			held = strings.Join(out.HeldMembers, ", ")
		}
		env.logf("plan: within %.0f%% of the cost budget: %s; kept the previous run's verdict: %s (member costs, ms/series: %s)",
			100*design.CostMargin, strings.Join(out.NearBudget, ", "), held, out.MemberCosts())
	}
	return nil
}

// previousVerdict returns the cost verdict of the design of prev, the previous run's manifest
// (design.Record.Before), so that a member whose cost lies near the budget does not leave the
// zoo in one run and come back in the next (design.Options.Before). It is nil on a first run
// (prev nil), when the previous run decided no design, and when its plan is gone or damaged
// (said in the log): the verdict only steadies the choice, and the plain rule stands without it.
func previousVerdict(ctx context.Context, out *store.Store, prev *Manifest, env Env) *design.Before {
	if prev == nil {
		return nil
	}
	p, err := ReadPlan(ctx, out, prev.Run)
	if err != nil {
		env.logf("plan: the previous run %s's plan cannot be read, so its cost verdict is not kept: %v", prev.Run, err)
		return nil
	}
	if p.Design == nil {
		return nil
	}
	return p.Design.Before()
}

// choicesText lists the decided design per segment: "monthly/smooth/long ets-theta, ...".
func choicesText(out *design.Outcome) string {
	var parts []string
	for _, ch := range out.Choices {
		parts = append(parts, ch.Segment.String()+" "+ch.Design)
	}
	if len(parts) == 0 {
		return "no segment (no usable series in the sample)"
	}
	return strings.Join(parts, ", ")
}
