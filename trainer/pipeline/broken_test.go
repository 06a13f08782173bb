package pipeline

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
	"unicode/utf16"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/synth"
)

// utf16LE encodes b as UTF-16 little-endian without a byte-order mark, as some spreadsheet
// exports write text.
func utf16LE(b []byte) []byte {
	var out bytes.Buffer
	for _, u := range utf16.Encode([]rune(string(b))) {
		binary.Write(&out, binary.LittleEndian, u)
	}
	return out.Bytes()
}

// brokenExports are the audit's broken CSV objects (issue 18 case 4), each made from depot
// brill's good history.
var brokenExports = map[string]func(good []byte) []byte{
	"an empty export": func([]byte) []byte { return nil },
	"a UTF-16 export": utf16LE,
	"a ragged row": func(good []byte) []byte {
		i := bytes.IndexByte(good, '\n') + 1
		return append(append(append([]byte{}, good[:i]...), "FLP-OATS-1KG,brill,2026-01-01,12,0,extra\n"...), good[i:]...)
	},
}

// Issue 18 case 4: an object broken at plan used to fail the plan, so one bad export stopped
// every depot. Now plan records it and goes on; with partitioning Objects its unit is carried
// forward whole, with hash buckets its series are carried forward one by one; the publish
// summary names it (the controller's Degraded condition quotes it) and exit is 0.
func TestBrokenObjectAtPlanIsCarriedForward(t *testing.T) {
	for name, damage := range brokenExports {
		for _, layout := range []string{runconfig.PartitionObjects, runconfig.PartitionHashBuckets} {
			t.Run(name+"/"+layout, func(t *testing.T) {
				dir := t.TempDir()
				putInput(t, mustOpen(t, "file://"+dir))
				cfg := func(run string) *runconfig.Config {
					c := testConfig(run, "file://"+dir+"/in/", "file://"+dir+"/out")
					c.Source.Partitioning = layout
					// The default guard for both layouts: hash buckets carry brill's series one
					// by one, and those count as forecast as brill's unit carried whole does
					// with Objects (6 of the 6 the first run published; before they counted,
					// 4 of 6 fell below minPreviousPercent 80 and the run was refused).
					c.Publish = nil
					return c
				}
				runAll(t, cfg("flp-0001"))
				brill := filepath.Join(dir, "in", "depot-brill.csv")
				good, err := os.ReadFile(brill)
				if err != nil {
					t.Fatal(err)
				}
				os.WriteFile(brill, damage(good), 0o644)
				ctx := context.Background()
				ps, err := RunPlan(ctx, cfg("flp-0002"), testEnv())
				if err != nil {
					t.Fatalf("plan: exit %d, %v; want it to go on without the broken object", ExitCode(err), err)
				}
				if !strings.Contains(ps.Broken, "depot-brill.csv (at plan: ") {
					t.Fatalf("plan summary broken %q", ps.Broken)
				}
				for i := 0; i < ps.Shards; i++ {
					if s, err := RunTrain(ctx, cfg("flp-0002"), i, testEnv()); err != nil {
						t.Fatalf("shard %d: exit %d, %v (%+v)", i, ExitCode(err), err, s)
					}
				}
				s, err := RunPublish(ctx, cfg("flp-0002"), testEnv())
				if err != nil || !strings.Contains(s.Broken, "1 input object broken, their series carried forward: depot-brill.csv (at plan: ") {
					t.Fatalf("publish: %v; summary broken %q", err, s.Broken)
				}
				m := checkPublished(t, mustOpen(t, cfg("flp-0002").Output.URI), "flp-0002")
				if len(m.Broken) != 1 || m.Broken[0].Key != "depot-brill.csv" || m.Broken[0].At != "plan" {
					t.Fatalf("manifest broken %+v", m.Broken)
				}
				if layout == runconfig.PartitionObjects {
					u, _ := m.unit(ObjectID("depot-brill.csv", nil))
					if u.State != StateCarried || u.Source != "flp-0001" || !strings.Contains(u.Reason, "depot-brill.csv was broken at plan") {
						t.Fatalf("brill's unit %+v", u)
					}
					return
				}
				// OATS and HONEY of brill were forecast by flp-0001; JAM never was.
				if m.Totals.Series.Carried != 2 || m.Totals.Series.CarriedBroken != 2 || m.Totals.Series.Trained != 4 {
					t.Fatalf("totals %+v, want 2 series carried for the broken object and 4 forecast", m.Totals.Series)
				}
			})
		}
	}
}

// An object that breaks after plan on hash buckets fails no shard (it used to fail every
// one): each shard goes on without it, the series whose rows it held are carried forward,
// and the summaries name it.
func TestObjectBrokenAfterPlanFailsNoHashShard(t *testing.T) {
	dir := t.TempDir()
	putInput(t, mustOpen(t, "file://"+dir))
	cfg := func(run string) *runconfig.Config {
		c := testConfig(run, "file://"+dir+"/in/", "file://"+dir+"/out")
		c.Publish = nil // the default guard: brill's carried series count as forecast
		return c
	}
	runAll(t, cfg("flp-0001"))
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg("flp-0002"), testEnv())
	if err != nil {
		t.Fatal(err)
	}
	if ps.Shards < 2 {
		t.Fatalf("%d shards; the test needs several", ps.Shards)
	}
	os.WriteFile(filepath.Join(dir, "in", "depot-brill.csv"), utf16LE(depotCSV("brill", []string{"FLP-OATS-1KG"}, 42, "")), 0o644)
	for i := 0; i < ps.Shards; i++ {
		s, err := RunTrain(ctx, cfg("flp-0002"), i, testEnv())
		if err != nil || !strings.Contains(s.Broken, "depot-brill.csv (at train: ") {
			t.Fatalf("shard %d: exit %d, %v; broken %q", i, ExitCode(err), err, s.Broken)
		}
	}
	s, err := RunPublish(ctx, cfg("flp-0002"), testEnv())
	if err != nil || s.CarriedForward != 0 || !strings.Contains(s.Broken, "depot-brill.csv (at train: ") {
		t.Fatalf("publish %+v, %v", s, err)
	}
	m := checkPublished(t, mustOpen(t, cfg("flp-0002").Output.URI), "flp-0002")
	if m.Totals.Series.Carried != 2 || m.Totals.Series.CarriedBroken != 2 || m.Totals.Series.Trained != 4 || m.Totals.Trained != m.Totals.Units {
		t.Fatalf("totals %+v", m.Totals)
	}
}

// A damaged Parquet object (its footer cut off) is isolated the same way, and input with no
// readable object still fails the plan, with the first object's error.
func TestDamagedParquetAtPlan(t *testing.T) {
	ctx := context.Background()
	in := mustOpen(t, "mem://flp-damaged-pq-in/")
	putParquet(t, in, synth.Options{Items: 4, Depots: 2, Periods: 60, End: anchor.Truncate(24*time.Hour).AddDate(0, 0, -1)}, 4*60)
	cfg := func(run string) *runconfig.Config {
		c := testConfig(run, "mem://flp-damaged-pq-in/", "mem://flp-damaged-pq-out/")
		c.Source.Format, c.Source.Partitioning, c.Output.Format = "parquet", runconfig.PartitionObjects, "parquet"
		return c
	}
	runAll(t, cfg("flp-0001"))
	key := synth.ObjectKey(1, synth.Parquet)
	b, err := in.Get(ctx, key)
	if err != nil {
		t.Fatal(err)
	}
	in.Put(ctx, key, b[:len(b)-12])
	shards, errs := runAll(t, cfg("flp-0002"))
	for i, err := range errs {
		if err != nil {
			t.Fatalf("shard %d of %d: %v", i, shards, err)
		}
	}
	m := checkPublished(t, mustOpen(t, cfg("flp-0002").Output.URI), "flp-0002")
	if u, _ := m.unit(ObjectID(key, nil)); u.State != StateCarried || len(m.Broken) != 1 || m.Broken[0].Key != key {
		t.Fatalf("unit %+v, broken %+v", u, m.Broken)
	}
	b0, _ := in.Get(ctx, synth.ObjectKey(0, synth.Parquet))
	in.Put(ctx, synth.ObjectKey(0, synth.Parquet), b0[:len(b0)/2])
	_, err = RunPlan(ctx, cfg("flp-0003"), testEnv())
	if ExitCode(err) != exitcode.Data || !strings.Contains(err.Error(), "every input object is broken") {
		t.Fatalf("plan of nothing readable: exit %d, %v", ExitCode(err), err)
	}
	// A column mapping no object has is the configuration's fault, not the objects'.
	c := cfg("flp-0004")
	in.Put(ctx, synth.ObjectKey(0, synth.Parquet), b0)
	c.Source.Columns.Value = "qty"
	_, err = RunPlan(ctx, c, testEnv())
	if ExitCode(err) != exitcode.Config || !errors.Is(err, ingest.ErrColumns) {
		t.Fatalf("plan with a column no object has: exit %d, %v", ExitCode(err), err)
	}
}

// With partitioning RowGroups an object broken at plan has no row groups to list: its units
// are the previous run's for the object, carried forward whole.
func TestDamagedParquetAtPlanRowGroups(t *testing.T) {
	ctx := context.Background()
	in := mustOpen(t, "mem://flp-damaged-rg-in/")
	putParquet(t, in, synth.Options{Items: 8, Depots: 2, Periods: 60, End: anchor.Truncate(24*time.Hour).AddDate(0, 0, -1)}, 4*60)
	cfg := func(run string) *runconfig.Config {
		c := testConfig(run, "mem://flp-damaged-rg-in/", "mem://flp-damaged-rg-out/")
		c.Source.Format, c.Source.Partitioning, c.Output.Format = "parquet", runconfig.PartitionRowGroups, "parquet"
		c.Sharding.TargetSeriesPerShard = 4
		return c
	}
	runAll(t, cfg("flp-0001"))
	key := synth.ObjectKey(1, synth.Parquet)
	b, err := in.Get(ctx, key)
	if err != nil {
		t.Fatal(err)
	}
	in.Put(ctx, key, b[:len(b)-12])
	_, errs := runAll(t, cfg("flp-0002"))
	for i, err := range errs {
		if err != nil {
			t.Fatalf("shard %d: %v", i, err)
		}
	}
	m := checkPublished(t, mustOpen(t, cfg("flp-0002").Output.URI), "flp-0002")
	carried := 0
	for _, u := range m.Units {
		if u.State == StateCarried && strings.HasPrefix(u.ID, ObjectID(key, nil)+"-g") && strings.Contains(u.Reason, "was broken at plan") {
			carried++
		}
	}
	// 8 items in row groups of 4 series: 2 units per depot object.
	if carried != 2 || m.Totals.Series.Trained != 16 || len(m.Broken) != 1 {
		t.Fatalf("%d units of the broken object carried, totals %+v, broken %+v", carried, m.Totals.Series, m.Broken)
	}
}
