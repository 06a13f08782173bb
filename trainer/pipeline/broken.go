package pipeline

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"sort"
	"strconv"
	"strings"

	"almanac.dev/almanac/trainer/ingest"
)

// BrokenObject is an input object a run could not read, and when it found out: plan (then it
// is in plan.json's objects with Broken set and no shard reads it) or train (a hash-bucket
// shard skipped it, see loadBuckets).
type BrokenObject struct {
	Key    string `json:"key"`
	Reason string `json:"reason"`
	// At is "plan" or "train".
	At string `json:"at"`
}

// brokenAtPlan returns the plan's broken objects.
func (p *Plan) brokenAtPlan() []BrokenObject {
	var out []BrokenObject
	for _, o := range p.Objects {
		if o.Broken != "" {
			out = append(out, BrokenObject{Key: o.Key, Reason: o.Broken, At: "plan"})
		}
	}
	return out
}

// isolate decides what plan does with an error reading one object: broken input (a header
// without a mapped column included: one export with a renamed column is that object's fault)
// is recorded as the object's Broken reason (clipped to 400 bytes), the first such error kept
// in first, and the plan goes on; anything else (storage, cancellation) ends the plan. When
// no object reads, plan fails with first, so a column mapping no object has stays a
// configuration error (exit 2).
func isolate(ctx context.Context, o *Object, err error, first *error) error {
	if err == nil || !errors.Is(err, ingest.ErrBrokenInput) || ctx.Err() != nil {
		return err
	}
	o.Broken = clip(err.Error(), 400)
	if *first == nil {
		*first = err
	}
	return nil
}

// brokenText names broken objects for a summary or a condition: the count, then up to three
// with their reasons, clipped so that a summary stays within its size.
func brokenText(objs []BrokenObject) string {
	if len(objs) == 0 {
		return ""
	}
	var parts []string
	for i, o := range objs {
		if i == 3 {
			parts = append(parts, fmt.Sprintf("and %d more", len(objs)-3))
			break
		}
		parts = append(parts, fmt.Sprintf("%s (at %s: %s)", clip(o.Key, 120), o.At, clip(o.Reason, 200)))
	}
	noun := "objects"
	if len(objs) == 1 {
		noun = "object"
	}
	return fmt.Sprintf("%d input %s broken, their series carried forward: %s", len(objs), noun, strings.Join(parts, "; "))
}

// mergeBroken adds objs to into, once per key (the first report wins), sorted by key.
func mergeBroken(into, objs []BrokenObject) []BrokenObject {
	for _, o := range objs {
		if !slices.ContainsFunc(into, func(b BrokenObject) bool { return b.Key == o.Key }) {
			into = append(into, o)
		}
	}
	sort.Slice(into, func(i, j int) bool { return into[i].Key < into[j].Key })
	return into
}

// loadBuckets is the hash-bucket half of loadShard: one pass over every input object, keeping
// the rows of the shard's buckets (seriesBucket: a hierarchy keeps a bucket key's series together). An object broken at plan is not read. An object that turns
// out broken now (unreadable, changed or gone since plan) is skipped, not the shard: its rows
// are held until the object has been read whole and dropped when it fails, and the series
// whose rows it held are rejected naming it (their rows elsewhere would be a partial history);
// every bucket unit of the shard records the object, and the series of the previous run that
// are absent now are carried forward (carryForward). Other errors end the shard.
func loadBuckets(ctx context.Context, src *source, p *Plan, h *hierarchy, byBucket map[int]*loaded, collectors map[string]*ingest.Collector) error {
	broken := p.brokenAtPlan()
	dropped := map[string]string{}
	var held []ingest.Row
	for _, o := range p.Objects {
		if o.Broken != "" {
			continue
		}
		held = held[:0]
		err := src.unchanged(ctx, o)
		if err == nil {
			err = src.scan(ctx, o.Key, nil, func(r ingest.Row) error {
				if _, ok := byBucket[seriesBucket(h, r.Key, p.Buckets)]; ok {
					r.Covariates = slices.Clone(r.Covariates)
					held = append(held, r)
				}
				return nil
			})
		}
		if err := fatal(ctx, err); err != nil {
			return err
		}
		if err != nil {
			why := clip(err.Error(), 400)
			broken = mergeBroken(broken, []BrokenObject{{Key: o.Key, Reason: why, At: "train"}})
			for _, r := range held {
				if _, ok := dropped[r.Key]; !ok {
					dropped[r.Key] = fmt.Sprintf("rows in %s, which broke after plan: %s", src.st.Describe(o.Key), why)
				}
			}
			continue
		}
		for _, r := range held {
			collectors[byBucket[seriesBucket(h, r.Key, p.Buckets)].unit.ID].Add(r)
		}
	}
	for _, l := range byBucket {
		l.broken = broken
		l.dropped = dropped
	}
	return nil
}

// dropBroken moves the unit's series whose rows were in a broken object (loaded.dropped) to
// its rejections, with the reason.
func (l *loaded) dropBroken() {
	if len(l.dropped) == 0 {
		return
	}
	kept := l.series[:0]
	for _, s := range l.series {
		if why, ok := l.dropped[s.Key]; ok {
			l.rejected = append(l.rejected, ingest.Rejected{Key: s.Key, Reason: why})
			continue
		}
		kept = append(kept, s)
	}
	l.series = kept
	for i, r := range l.rejected {
		if why, ok := l.dropped[r.Key]; ok && !strings.Contains(r.Reason, why) {
			l.rejected[i].Reason = why + "; " + r.Reason
		}
	}
}

// prefixed returns sep+s, or "" when s is empty.
func prefixed(sep, s string) string {
	if s == "" {
		return ""
	}
	return sep + s
}

// keepPreviousBuckets adds to units an empty unit for every bucket the previous manifest has
// (same bucket count) that units lack: with an object broken at plan, a bucket whose series
// were all in it would otherwise vanish from the run, and its series with it.
func keepPreviousBuckets(units []Unit, prev *Manifest, buckets int) []Unit {
	have := map[string]bool{}
	for _, u := range units {
		have[u.ID] = true
	}
	bucket := make(map[string]int, buckets)
	for b := 0; b < buckets; b++ {
		bucket[BucketID(b, buckets)] = b
	}
	for _, e := range prev.Units {
		if b, ok := bucket[e.ID]; ok && !have[e.ID] && e.State != StateMissing {
			units = append(units, Unit{ID: e.ID, Bucket: b})
			have[e.ID] = true
		}
	}
	return units
}

// previousGroupUnits returns, empty, the row-group units the previous manifest has for object
// key (ids ObjectID(key, groups)): the units of an object broken at plan, whose row groups
// cannot be listed now.
func previousGroupUnits(prev *Manifest, key string) []Unit {
	if prev == nil {
		return nil
	}
	var out []Unit
	for _, e := range prev.Units {
		i := strings.LastIndex(e.ID, "-g")
		if i < 0 || e.State == StateMissing {
			continue
		}
		g, err := strconv.Atoi(e.ID[i+2:])
		if err != nil || g < 0 {
			continue
		}
		gr := &ingest.GroupRange{From: g, To: g + 1}
		if ObjectID(key, gr) == e.ID {
			out = append(out, Unit{ID: e.ID, Object: key, Groups: gr})
		}
	}
	return out
}
