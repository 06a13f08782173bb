package pipeline

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"hash/fnv"
	"math/bits"
	"regexp"
	"sort"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

// hashedLayout reports whether a manifest's partitioning is HashBuckets. Manifests written
// before the run configuration took the API's spelling say "" for it (and "object",
// "rowGroup" for the others); previous runs' manifests are read with either.
func hashedLayout(partitioning string) bool {
	return partitioning == runconfig.PartitionHashBuckets || partitioning == ""
}

// PlanVersion is the version of plan.json this package writes and reads.
const PlanVersion = 1

// Plan is plan.json: the input objects as listed at plan time, the units cut from them and
// the shards the units are grouped into. Train and publish read it; nothing else decides
// which series belong to which shard.
type Plan struct {
	Version int    `json:"version"`
	Run     string `json:"run"`
	// Partitioning is the source's runconfig.Source.Partitioning the units were cut by.
	Partitioning string `json:"partitioning"`
	// Buckets is the hash bucket count when Partitioning is runconfig.PartitionHashBuckets, else 0.
	Buckets int `json:"buckets,omitempty"`
	// Cutoff bounds history: rows dated after it are plans, not actuals, and are dropped. It
	// is the run's scheduled time, or the time plan ran for a manual run, fixed here so that
	// every shard and every rerun uses the same one.
	Cutoff time.Time `json:"cutoff"`
	// Objects are the input objects (keys relative to the source store), sorted by key.
	Objects []Object `json:"objects"`
	// Units are sorted by ID.
	Units []Unit `json:"units"`
	// Shards[i] is the shard train --shard i works on.
	Shards []Shard `json:"shards"`
	// Series and Rows are the totals over all units.
	Series int   `json:"series"`
	Rows   int64 `json:"rows"`
	// Reconcile is true when the run's hierarchy has levels that span units: the reconcile
	// step must run between train and publish (the plan summary says so too).
	Reconcile bool `json:"reconcile,omitempty"`
	// HierarchyEnd (hierarchical runs) is the period of the newest history row of the whole
	// input: train extends every bottom series with zeros up to it, so every node of the tree
	// ends, and is forecast, at the same periods.
	HierarchyEnd time.Time `json:"hierarchyEnd,omitzero"`
	// Design (selection.design Auto) is the run's design per segment, chosen once here on a
	// sample of the portfolio's series (design.Decide on the designSample): every shard
	// applies it, and chooses by itself only for a segment it does not hold.
	Design *design.Record `json:"design,omitempty"`
}

// Object is one input object as plan saw it: train compares Size and ETag with the object it
// reads and treats one that changed as broken (source.unchanged).
type Object struct {
	Key  string `json:"key"`
	Size int64  `json:"size"`
	// ETag is the store's version tag of the object at plan time ("" when the backend has none,
	// and in plans written before it was recorded).
	ETag string `json:"etag,omitempty"`
	// Broken, when set, says why plan could not read the object (broken input: an empty or
	// UTF-16 export, a ragged row, damaged Parquet). No shard reads it; publish carries its
	// series forward and the run reports it (BrokenObject).
	Broken string `json:"broken,omitempty"`
}

// Unit is a stable piece of input. Exactly one of Object and Bucket applies: an object unit
// (Object set, Groups nil), a row-group range of a Parquet object (Object and Groups set), or
// a hash bucket of series keys across every object (Object empty, Bucket in [0, Plan.Buckets)).
type Unit struct {
	ID     string             `json:"id"`
	Object string             `json:"object,omitempty"`
	Groups *ingest.GroupRange `json:"groups,omitempty"`
	Bucket int                `json:"bucket,omitempty"`
	// Series and Rows were counted by plan; Rows weighs the unit when shards are cut.
	Series int   `json:"series"`
	Rows   int64 `json:"rows"`
}

// Shard is a group of units trained by one pod.
type Shard struct {
	Units  []string `json:"units"`
	Series int      `json:"series"`
	Rows   int64    `json:"rows"`
}

// KeyHash is the stable hash of a series key that assigns it to a bucket: 64-bit FNV-1a of
// the key's bytes (bucket = KeyHash(key) mod buckets). It never changes between releases,
// so a bucket unit holds the same series in every run with the same bucket count.
func KeyHash(key string) uint64 {
	h := fnv.New64a()
	h.Write([]byte(key))
	return h.Sum64()
}

// BucketOf returns the bucket of a series key for a power-of-two bucket count.
func BucketOf(key string, buckets int) int { return int(KeyHash(key) & uint64(buckets-1)) }

// BucketID is the unit id of a hash bucket; it names the bucket count so that units of
// different counts are never confused.
func BucketID(b, buckets int) string { return fmt.Sprintf("b%05d-of-%05d", b, buckets) }

var slugRE = regexp.MustCompile(`[^a-z0-9]+`)

// ObjectID is the unit id of an input object (groups nil) or of a row-group range: a readable
// slug of the key, then 10 hex digits of the key's SHA-256 so that keys with the same slug
// differ, then the first row group.
func ObjectID(key string, groups *ingest.GroupRange) string {
	slug := strings.Trim(slugRE.ReplaceAllString(strings.ToLower(key), "-"), "-")
	if len(slug) > 48 {
		slug = strings.Trim(slug[len(slug)-48:], "-")
	}
	sum := sha256.Sum256([]byte(key))
	id := "o-" + slug + "-" + hex.EncodeToString(sum[:5])
	if groups != nil {
		id += fmt.Sprintf("-g%d", groups.From)
	}
	return strings.ReplaceAll(id, "--", "-")
}

// ChooseBuckets returns the hash bucket count for unpartitioned input: the configured count
// when set, else the previous run's (so unit ids stay stable), else the smallest power of two
// giving about four buckets per shard, so the shards can be balanced. It never exceeds
// runconfig.MaxBuckets.
func ChooseBuckets(configured, previous, series, target int) int {
	switch {
	case configured > 0:
		return configured
	case previous > 0:
		return previous
	}
	shards := max(1, (series+target-1)/max(target, 1))
	b := 1 << bits.Len(uint(4*shards-1))
	return min(b, runconfig.MaxBuckets)
}

// Cut groups units into shards whose series total is close to target: the shard count is
// ceil(total series / target), at least 1 and at most len(units) (a unit is never split).
// Units are placed largest first (by Rows, ties by ID) on the shard with the fewest rows so
// far (ties to the lower index), the longest-processing-time rule (Graham 1969, "Bounds on
// multiprocessing timing anomalies", SIAM J. Appl. Math. 17: within 4/3 of the best
// makespan). Each shard lists its units by ID. Cut returns nil for no units. The result
// depends only on the units, not on their order.
func Cut(units []Unit, target int) []Shard {
	if len(units) == 0 {
		return nil
	}
	if target < 1 {
		panic("pipeline: Cut needs target >= 1")
	}
	total := 0
	for _, u := range units {
		total += u.Series
	}
	k := min(len(units), max(1, (total+target-1)/target))
	order := make([]Unit, len(units))
	copy(order, units)
	sort.Slice(order, func(i, j int) bool {
		if order[i].Rows != order[j].Rows {
			return order[i].Rows > order[j].Rows
		}
		return order[i].ID < order[j].ID
	})
	shards := make([]Shard, k)
	for _, u := range order {
		best := 0
		for i := 1; i < k; i++ {
			if shards[i].Rows < shards[best].Rows {
				best = i
			}
		}
		s := &shards[best]
		s.Units = append(s.Units, u.ID)
		s.Rows += u.Rows
		s.Series += u.Series
	}
	for i := range shards {
		sort.Strings(shards[i].Units)
	}
	return shards
}

// EncodePlan returns plan.json's bytes (indented, with a final newline).
func EncodePlan(p *Plan) ([]byte, error) {
	b, err := json.MarshalIndent(p, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

// DecodePlan parses plan.json and validates it (see Plan.Validate); name is used in errors.
// Its errors wrap store.ErrDamaged: plan.json is run state the plan step wrote, so one that
// does not parse or validate is damaged state, a permanent failure for every shard (exit 3),
// not an internal error the Job would retry.
func DecodePlan(b []byte, name string) (*Plan, error) {
	var p Plan
	dec := json.NewDecoder(strings.NewReader(string(b)))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&p); err != nil {
		return nil, fmt.Errorf("%s: %w: %w", name, err, store.ErrDamaged)
	}
	if err := p.Validate(); err != nil {
		return nil, fmt.Errorf("%s: %w: %w", name, err, store.ErrDamaged)
	}
	return &p, nil
}

// Validate checks a plan's internal consistency: the version; unit ids are safe names, unique
// and sorted; each unit is exactly one kind and refers to a listed object or a bucket in
// range; every unit is in exactly one shard; counts add up.
func (p *Plan) Validate() error {
	if p.Version != PlanVersion {
		return fmt.Errorf("plan version %d, this trainer reads %d", p.Version, PlanVersion)
	}
	if err := store.CheckName("run", p.Run); err != nil {
		return err
	}
	if p.Cutoff.IsZero() {
		return fmt.Errorf("cutoff must be set")
	}
	hashed := p.Partitioning == runconfig.PartitionHashBuckets
	switch p.Partitioning {
	case runconfig.PartitionHashBuckets:
		if p.Buckets < 1 || p.Buckets > runconfig.MaxBuckets || p.Buckets&(p.Buckets-1) != 0 {
			return fmt.Errorf("buckets %d is not a power of two up to %d", p.Buckets, runconfig.MaxBuckets)
		}
	case runconfig.PartitionObjects, runconfig.PartitionRowGroups:
		if p.Buckets != 0 {
			return fmt.Errorf("buckets %d set for partitioning %q", p.Buckets, p.Partitioning)
		}
	default:
		return fmt.Errorf("unknown partitioning %q", p.Partitioning)
	}
	objects := map[string]bool{}
	for i, o := range p.Objects {
		if _, err := store.CleanKey(o.Key); err != nil {
			return fmt.Errorf("objects[%d]: %w", i, err)
		}
		if i > 0 && o.Key <= p.Objects[i-1].Key {
			return fmt.Errorf("objects[%d]: %q is not after %q", i, o.Key, p.Objects[i-1].Key)
		}
		if o.Size < 0 {
			return fmt.Errorf("objects[%d]: negative size", i)
		}
		objects[o.Key] = true
	}
	inShard := map[string]int{}
	series, rows := 0, int64(0)
	for i, u := range p.Units {
		if err := store.CheckName("unit", u.ID); err != nil {
			return fmt.Errorf("units[%d]: %w", i, err)
		}
		if i > 0 && u.ID <= p.Units[i-1].ID {
			return fmt.Errorf("units[%d]: id %q is not after %q", i, u.ID, p.Units[i-1].ID)
		}
		if u.Series < 0 || u.Rows < 0 {
			return fmt.Errorf("units[%d]: negative count", i)
		}
		switch {
		case hashed && (u.Object != "" || u.Groups != nil):
			return fmt.Errorf("units[%d]: %s names an object in a hash-bucket plan", i, u.ID)
		case hashed && (u.Bucket < 0 || u.Bucket >= p.Buckets || u.ID != BucketID(u.Bucket, p.Buckets)):
			return fmt.Errorf("units[%d]: %s does not match bucket %d of %d", i, u.ID, u.Bucket, p.Buckets)
		case !hashed && !objects[u.Object]:
			return fmt.Errorf("units[%d]: %s names object %q, not in the plan's objects", i, u.ID, u.Object)
		case !hashed && u.Bucket != 0:
			return fmt.Errorf("units[%d]: %s has a bucket in an object plan", i, u.ID)
		case !hashed && (u.Groups != nil) != (p.Partitioning == runconfig.PartitionRowGroups):
			return fmt.Errorf("units[%d]: %s: row groups must be set exactly for partitioning %q", i, u.ID, runconfig.PartitionRowGroups)
		case u.Groups != nil && (u.Groups.From < 0 || u.Groups.To <= u.Groups.From):
			return fmt.Errorf("units[%d]: %s: empty or negative row-group range [%d,%d)", i, u.ID, u.Groups.From, u.Groups.To)
		case !hashed && u.ID != ObjectID(u.Object, u.Groups):
			return fmt.Errorf("units[%d]: id %q does not match its object", i, u.ID)
		}
		inShard[u.ID] = -1
		series += u.Series
		rows += u.Rows
	}
	if series != p.Series || rows != p.Rows {
		return fmt.Errorf("totals %d series, %d rows; units add up to %d, %d", p.Series, p.Rows, series, rows)
	}
	if len(p.Units) > 0 && len(p.Shards) == 0 {
		return fmt.Errorf("%d units and no shards", len(p.Units))
	}
	for i, s := range p.Shards {
		if len(s.Units) == 0 {
			return fmt.Errorf("shards[%d]: no units", i)
		}
		for _, id := range s.Units {
			at, ok := inShard[id]
			if !ok {
				return fmt.Errorf("shards[%d]: unknown unit %q", i, id)
			}
			if at >= 0 {
				return fmt.Errorf("shards[%d]: unit %q is already in shard %d", i, id, at)
			}
			inShard[id] = i
		}
	}
	for id, at := range inShard {
		if at < 0 {
			return fmt.Errorf("unit %q is in no shard", id)
		}
	}
	if p.Design != nil {
		if _, err := p.Design.Outcome(); err != nil {
			return fmt.Errorf("design: %w", err)
		}
	}
	return nil
}

// object returns the listed object with the given key.
func (p *Plan) object(key string) (Object, bool) {
	i := sort.Search(len(p.Objects), func(i int) bool { return p.Objects[i].Key >= key })
	if i < len(p.Objects) && p.Objects[i].Key == key {
		return p.Objects[i], true
	}
	return Object{}, false
}

// unit returns the unit with the given id.
func (p *Plan) unit(id string) (Unit, bool) {
	i := sort.Search(len(p.Units), func(i int) bool { return p.Units[i].ID >= id })
	if i < len(p.Units) && p.Units[i].ID == id {
		return p.Units[i], true
	}
	return Unit{}, false
}
