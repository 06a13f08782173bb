package pipeline

import (
	"reflect"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

func TestCut(t *testing.T) {
	u := func(id string, series int, rows int64) Unit { return Unit{ID: id, Series: series, Rows: rows} }
	cases := map[string]struct {
		units  []Unit
		target int
		want   []Shard
	}{
		"no units": {nil, 10, nil},
		"one unit, small": {[]Unit{u("a", 3, 30)}, 10,
			[]Shard{{Units: []string{"a"}, Series: 3, Rows: 30}}},
		"one shard holds everything under target": {[]Unit{u("a", 3, 30), u("b", 4, 40)}, 10,
			[]Shard{{Units: []string{"a", "b"}, Series: 7, Rows: 70}}},
		// 12 series / target 4 = 3 shards; largest first onto the lightest shard:
		// d(50)->0, c(40)->1, b(30)->2, a(20)->2 (30 < 40 < 50), e(10)->1 (40 < 50) .
		"longest processing time": {[]Unit{u("a", 2, 20), u("b", 3, 30), u("c", 3, 40), u("d", 3, 50), u("e", 1, 10)}, 4,
			[]Shard{{Units: []string{"d"}, Series: 3, Rows: 50}, {Units: []string{"c", "e"}, Series: 4, Rows: 50},
				{Units: []string{"a", "b"}, Series: 5, Rows: 50}}},
		"never more shards than units": {[]Unit{u("a", 100, 1000), u("b", 100, 1000)}, 1,
			[]Shard{{Units: []string{"a"}, Series: 100, Rows: 1000}, {Units: []string{"b"}, Series: 100, Rows: 1000}}},
		"equal rows tie by id": {[]Unit{u("z", 1, 10), u("y", 1, 10), u("x", 1, 10)}, 1,
			[]Shard{{Units: []string{"x"}, Series: 1, Rows: 10}, {Units: []string{"y"}, Series: 1, Rows: 10},
				{Units: []string{"z"}, Series: 1, Rows: 10}}},
		"empty units still placed": {[]Unit{u("a", 0, 0), u("b", 2, 20)}, 1,
			[]Shard{{Units: []string{"b"}, Series: 2, Rows: 20}, {Units: []string{"a"}, Series: 0, Rows: 0}}},
	}
	for name, tc := range cases {
		t.Run(name, func(t *testing.T) {
			got := Cut(tc.units, tc.target)
			if !reflect.DeepEqual(got, tc.want) {
				t.Fatalf("Cut =\n%+v\nwant\n%+v", got, tc.want)
			}
			// Order of the input must not matter.
			rev := append([]Unit(nil), tc.units...)
			for i, j := 0, len(rev)-1; i < j; i, j = i+1, j-1 {
				rev[i], rev[j] = rev[j], rev[i]
			}
			if again := Cut(rev, tc.target); !reflect.DeepEqual(again, got) {
				t.Fatalf("Cut depends on input order:\n%+v\n%+v", again, got)
			}
		})
	}
}

func TestChooseBuckets(t *testing.T) {
	cases := map[string]struct{ configured, previous, series, target, want int }{
		"configured wins":           {64, 8, 1_000_000, 10, 64},
		"previous kept":             {0, 8, 1_000_000, 10, 8},
		"first run, one shard":      {0, 0, 5, 10, 4},
		"first run, 3 shards -> 16": {0, 0, 25, 10, 16}, // 4*3 = 12 -> next power of two 16
		"first run, 4 shards -> 16": {0, 0, 40, 10, 16},
		"capped":                    {0, 0, 1 << 30, 1, runconfig.MaxBuckets},
		"no series":                 {0, 0, 0, 10, 4},
	}
	for name, tc := range cases {
		if got := ChooseBuckets(tc.configured, tc.previous, tc.series, tc.target); got != tc.want {
			t.Errorf("%s: ChooseBuckets = %d, want %d", name, got, tc.want)
		}
	}
}

func TestKeyHashIsFNV1a(t *testing.T) {
	// FNV-1a 64 values (Fowler, Noll, Vo; IETF draft-eastlake-fnv): "" gives the offset basis
	// cbf29ce484222325, "a" gives af63dc4c8601ec8c (from memory of the published test vectors;
	// Go's hash/fnv agrees).
	if got := KeyHash(""); got != 0xcbf29ce484222325 {
		t.Errorf("KeyHash(\"\") = %x", got)
	}
	if got := KeyHash("a"); got != 0xaf63dc4c8601ec8c {
		t.Errorf("KeyHash(\"a\") = %x", got)
	}
	if BucketOf("a", 16) != 0xc {
		t.Errorf("BucketOf(a, 16) = %d, want 12 (low 4 bits of ...8c)", BucketOf("a", 16))
	}
}

func TestObjectIDIsSafeAndDistinct(t *testing.T) {
	keys := []string{"in/Depot North.csv", "in/depot-north.csv", "in/" + strings.Repeat("x", 300) + ".parquet", "a.csv"}
	seen := map[string]string{}
	for _, k := range keys {
		for _, g := range []*ingest.GroupRange{nil, {From: 3, To: 4}} {
			id := ObjectID(k, g)
			if err := store.CheckName("unit", id); err != nil {
				t.Fatalf("ObjectID(%q) = %q: %v", k, id, err)
			}
			if other, dup := seen[id]; dup {
				t.Fatalf("ObjectID(%q) = ObjectID(%q) = %q", k, other, id)
			}
			seen[id] = k
		}
	}
}

// validPlan is a small consistent plan for the decoder tests.
func validPlan() *Plan {
	units := []Unit{{ID: BucketID(1, 4), Bucket: 1, Series: 2, Rows: 20}, {ID: BucketID(3, 4), Bucket: 3, Series: 1, Rows: 5}}
	return &Plan{Version: PlanVersion, Run: "flp-0001", Partitioning: runconfig.PartitionHashBuckets, Buckets: 4, Cutoff: anchor, Objects: []Object{{Key: "in/a.csv", Size: 10}},
		Units: units, Shards: Cut(units, 2), Series: 3, Rows: 25}
}

func TestDecodePlanRejects(t *testing.T) {
	cases := map[string]struct {
		edit func(p *Plan)
		want string
	}{
		"version":          {func(p *Plan) { p.Version = 2 }, "plan version 2"},
		"no cutoff":        {func(p *Plan) { p.Cutoff = time.Time{} }, "cutoff"},
		"bad run name":     {func(p *Plan) { p.Run = "Run One" }, "run name"},
		"buckets not pow2": {func(p *Plan) { p.Buckets = 3 }, "buckets 3"},
		"unit twice":       {func(p *Plan) { p.Shards = append(p.Shards, Shard{Units: []string{p.Units[0].ID}}) }, "already in shard"},
		"unit in no shard": {func(p *Plan) { p.Shards = p.Shards[:1] }, "in no shard"},
		"unknown unit":     {func(p *Plan) { p.Shards[0].Units = append(p.Shards[0].Units, "b00009-of-00004") }, "unknown unit"},
		"totals":           {func(p *Plan) { p.Series = 9 }, "totals"},
		"bucket mismatch":  {func(p *Plan) { p.Units[0].Bucket = 2 }, "does not match bucket"},
		"object in hash":   {func(p *Plan) { p.Units[0].Object = "in/a.csv" }, "names an object"},
		"partitioning":     {func(p *Plan) { p.Partitioning = "series" }, "unknown partitioning"},
	}
	for name, tc := range cases {
		t.Run(name, func(t *testing.T) {
			p := validPlan()
			tc.edit(p)
			b, err := EncodePlan(p)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := DecodePlan(b, "runs/flp-0001/plan.json"); err == nil || !strings.Contains(err.Error(), tc.want) ||
				!strings.Contains(err.Error(), "runs/flp-0001/plan.json") {
				t.Fatalf("DecodePlan = %v, want an error naming the file and containing %q", err, tc.want)
			}
		})
	}
	b, _ := EncodePlan(validPlan())
	if _, err := DecodePlan(b, "ok"); err != nil {
		t.Fatalf("valid plan rejected: %v", err)
	}
	if _, err := DecodePlan([]byte(`{"version":1,"surprise":true}`), "x"); err == nil {
		t.Fatal("unknown field accepted")
	}
}

// FuzzPlanJSON checks that DecodePlan never panics and that whatever it accepts is valid and
// survives an encode/decode round trip unchanged.
func FuzzPlanJSON(f *testing.F) {
	b, _ := EncodePlan(validPlan())
	f.Add(b)
	f.Add([]byte(`{"version":1,"run":"r","partitioning":"object","objects":[{"key":"a.csv","size":1}],"units":[],"shards":[]}`))
	f.Add([]byte(`{}`))
	f.Add([]byte(`{"version":1,"run":"r","buckets":1,"units":[{"id":"b00000-of-00001","series":-1}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := DecodePlan(data, "fuzz")
		if err != nil {
			return
		}
		if err := p.Validate(); err != nil {
			t.Fatalf("accepted an invalid plan: %v", err)
		}
		b, err := EncodePlan(p)
		if err != nil {
			t.Fatal(err)
		}
		q, err := DecodePlan(b, "again")
		if err != nil {
			t.Fatalf("re-encoded plan rejected: %v", err)
		}
		if !reflect.DeepEqual(p, q) {
			t.Fatalf("round trip changed the plan:\n%+v\n%+v", p, q)
		}
	})
}
