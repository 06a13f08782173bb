package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/tables"
)

// staleCSV is depot dunmore's daily history of item ending on end (42 days).
func staleCSV(item string, end time.Time) []byte {
	var b bytes.Buffer
	b.WriteString("item,depot,date,units,promo_flag\n")
	for d := 41; d >= 0; d-- {
		day := end.AddDate(0, 0, -d)
		fmt.Fprintf(&b, "%s,dunmore,%s,%d,0\n", item, day.Format("2006-01-02"), 10+3*int(day.Weekday())+d%5)
	}
	return b.Bytes()
}

// Issue 18 case 6: a history that ended long ago used to get forecasts dated in the past (a
// history ending in 1850 got forecasts for 1850). By default a series whose whole forecast is
// past at the cutoff is rejected ("stale: ... the whole forecast is past") and the others
// publish every step; with publish.maxStalePeriods declared, a series more than that many
// periods stale is rejected too, and a series within it publishes only the periods that end
// after the cutoff (anchor, 2026-03-02 06:00, is the test clock).
func TestStaleSeriesAndPastPeriods(t *testing.T) {
	dir := t.TempDir()
	in := mustOpen(t, "file://"+dir)
	putInput(t, in) // histories ending 2026-03-01: not stale
	ctx := context.Background()
	in.Put(ctx, "in/depot-dunmore-a.csv", staleCSV("FLP-RYE-500", time.Date(2026, 2, 27, 0, 0, 0, 0, time.UTC)))
	in.Put(ctx, "in/depot-dunmore-b.csv", staleCSV("FLP-BRAN-250", time.Date(2026, 2, 20, 0, 0, 0, 0, time.UTC)))
	in.Put(ctx, "in/depot-dunmore-c.csv", staleCSV("FLP-MALT-1850", time.Date(1850, 3, 1, 0, 0, 0, 0, time.UTC)))
	run := func(name string, limit int) map[string][]tables.ForecastRow {
		cfg := testConfig(name, "file://"+dir+"/in/", "file://"+dir+"/out")
		cfg.Source.Partitioning = runconfig.PartitionObjects
		cfg.Publish = &runconfig.Publish{MinForecastPercent: 50, MinPreviousPercent: 50, MaxCarriedForwardPercent: 50, MaxStalePeriods: limit}
		runAll(t, cfg)
		out := mustOpen(t, cfg.Output.URI)
		m := checkPublished(t, out, name)
		rows := map[string][]tables.ForecastRow{}
		for _, u := range m.Units {
			for _, f := range u.Files {
				b, _ := out.Get(ctx, f.Key)
				switch f.Table {
				case TableForecasts:
					_, fc, err := tables.ReadForecasts(bytes.NewReader(b), "csv", testKeys)
					if err != nil {
						t.Fatal(err)
					}
					for _, r := range fc {
						rows[r.Key] = append(rows[r.Key], r)
					}
				case TableRejected:
					rej, _ := tables.ReadRejected(bytes.NewReader(b), "csv", testKeys)
					for _, r := range rej {
						rows["rejected "+r.Key] = []tables.ForecastRow{{Model: r.Reason}}
					}
				}
			}
		}
		return rows
	}
	rye, bran, malt := ingest.JoinKey("FLP-RYE-500", "dunmore"), ingest.JoinKey("FLP-BRAN-250", "dunmore"), ingest.JoinKey("FLP-MALT-1850", "dunmore")
	// Not declared (the default): the 1850 series and bran (last observation 2026-02-20, its 7
	// days all ended by the cutoff) are rejected; rye, 2 periods stale, publishes all 7 steps
	// from its last observation. Before the default rule malt published 7 rows dated 1850.
	off := run("flp-0001", 0)
	if len(off[malt]) != 0 || len(off[bran]) != 0 || len(off[rye]) != 7 || off[rye][0].Step != 1 || len(off[ingest.JoinKey("FLP-TEA-80", "ashby")]) != 7 {
		t.Fatalf("default: malt %d rows, bran %d, rye %d", len(off[malt]), len(off[bran]), len(off[rye]))
	}
	for _, k := range []string{malt, bran} {
		if why := off["rejected "+k]; len(why) != 1 || !strings.Contains(why[0].Model, "the whole forecast is past") {
			t.Errorf("default: %s: %+v", k, why)
		}
	}
	if why := off["rejected "+malt]; len(why) != 1 || !strings.Contains(why[0].Model, "stale: its last observation 1850-03-01") {
		t.Errorf("default: malt: %+v", why)
	}
	on := run("flp-0002", 3)
	cutoffDay := time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)
	for key, rows := range on {
		if strings.HasPrefix(key, "rejected ") {
			continue
		}
		for _, r := range rows {
			if r.Period.Before(cutoffDay) {
				t.Errorf("%s: published period %s before the cutoff's day", key, r.Period.Format(time.DateOnly))
			}
		}
	}
	// rye ended 2026-02-27: 2026-02-28 and 2026-03-01 are past, steps 3..7 published.
	if len(on[rye]) != 5 || on[rye][0].Step != 3 || !on[rye][0].Period.Equal(cutoffDay) {
		t.Fatalf("rye: %d rows from step %d", len(on[rye]), on[rye][0].Step)
	}
	if why := on["rejected "+bran]; len(why) != 1 || !strings.Contains(why[0].Model, "stale: its last observation 2026-02-20 is at least 7 periods before the cutoff 2026-03-02T06:00:00Z") {
		t.Errorf("bran: %+v", why)
	}
	if why := on["rejected "+malt]; len(why) != 1 || !strings.Contains(why[0].Model, "stale: its last observation 1850-03-01") {
		t.Errorf("malt: %+v", why)
	}
	if len(on[ingest.JoinKey("FLP-TEA-80", "ashby")]) != 7 {
		t.Errorf("a current series lost periods: %d", len(on[ingest.JoinKey("FLP-TEA-80", "ashby")]))
	}
	// A limit of 1 period: rye, 2 periods stale, is rejected too.
	tight := run("flp-0003", 1)
	if why := tight["rejected "+rye]; len(why) != 1 || !strings.Contains(why[0].Model, "is 2 periods before the cutoff 2026-03-02T06:00:00Z, more than publish.maxStalePeriods 1") {
		t.Errorf("rye at limit 1: %+v", why)
	}
}

// A hierarchical run forecasts every node from the input's newest period; when all of its
// horizon has ended at the cutoff, plan fails (exit 3) naming that period instead of
// publishing a tree of past forecasts. The same data planned before its horizon ran out
// plans as before.
func TestStaleHierarchyFailsAtPlan(t *testing.T) {
	cfg := hierarchyRun(t, "flp-stale-tree", [][]string{{"depot"}, {}}, "BottomUp")
	ctx := context.Background()
	// History ends Monday 2026-02-23; horizon 8 weeks: the last forecast week ends 2026-04-27.
	late := Env{Now: func() time.Time { return time.Date(2026, 4, 27, 0, 0, 0, 0, time.UTC) }, Workers: 2}
	_, err := RunPlan(ctx, cfg, late)
	if ExitCode(err) != 3 || err == nil || !strings.Contains(err.Error(), "stale input: its newest period 2026-02-23 is at least 8 periods before the cutoff 2026-04-27T00:00:00Z") {
		t.Fatalf("plan at 2026-04-27: exit %d, %v", ExitCode(err), err)
	}
	inTime := Env{Now: func() time.Time { return time.Date(2026, 4, 26, 23, 0, 0, 0, time.UTC) }, Workers: 2}
	if _, err := RunPlan(ctx, cfg, inTime); err != nil {
		t.Fatalf("plan at 2026-04-26 23:00: %v", err)
	}
}
