package synth

import (
	"bytes"
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
)

var promoSource = runconfig.Source{Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday",
	Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: "week_start", Value: "units", Covariates: []string{"promo_flag", "price"}}}

// collectPlan reads a promotion-scenario depot through the trainer's reader with the history
// ending at end and the plan kept for future periods.
func collectPlan(t *testing.T, data []byte, src runconfig.Source, end time.Time, future int) []series.Series {
	t.Helper()
	c, err := ingest.NewCollector(src, end)
	if err != nil {
		t.Fatal(err)
	}
	c.KeepFuture(future)
	if err := ingest.ScanCSV(context.Background(), bytes.NewReader(data), "depot.csv", src, func(r ingest.Row) error { c.Add(r); return nil }); err != nil {
		t.Fatal(err)
	}
	ok, rej := c.Finish()
	if len(rej) != 0 {
		t.Fatalf("rejected %v", rej)
	}
	return ok
}

func TestHarvestFair(t *testing.T) {
	// Calendar facts (any calendar): 1 Sep 2026 is a Tuesday, 1 Sep 2025 a Monday, 1 Sep 2029 a Saturday.
	for y, want := range map[int]string{2025: "2025-09-06", 2026: "2026-09-05", 2029: "2029-09-01"} {
		if got := HarvestFair(y).Format("2006-01-02"); got != want {
			t.Errorf("HarvestFair(%d) = %s, want %s", y, got, want)
		}
	}
}

// The plan written after the history is the plan that happens: a dataset whose history is
// longer by the plan's length has the same promotions and prices in those periods (as history).
func TestPromotionPlanIsKnownInAdvance(t *testing.T) {
	end := time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC)
	short := Options{Items: 12, Depots: 1, Frequency: Weekly, Periods: 100, End: end, Scenario: ScenarioPromotions, Future: 4, SpareShare: 0.25}
	long := short
	long.Periods, long.End, long.Future = 104, end.AddDate(0, 0, 28), 0

	csv := csvOf(t, short, 0)
	header, rest, _ := strings.Cut(string(csv), "\n")
	if header != "item,depot,week_start,units,promo_flag,price" { // the samples' source.columns
		t.Fatalf("header %q", header)
	}
	planned := 0
	for _, line := range strings.Split(strings.TrimSpace(rest), "\n") {
		f := strings.Split(line, ",")
		if f[2] > end.Format("2006-01-02") {
			planned++
			if f[3] != "" {
				t.Fatalf("planned row %q has units", line)
			}
		}
	}
	if planned != 12*4 {
		t.Fatalf("%d planned rows, want 4 per series", planned)
	}
	a := collectPlan(t, csv, promoSource, end, 4)
	b := collectPlan(t, csvOf(t, long, 0), promoSource, long.End, 0)
	for i := range a {
		if len(a[i].Values) != 100 || len(a[i].Covariates["promo_flag"]) != 104 {
			t.Fatalf("%s: %d values, %d promo entries; want 100 and 104", a[i].Key, len(a[i].Values), len(a[i].Covariates["promo_flag"]))
		}
		for _, name := range []string{"promo_flag", "price"} {
			for k := range 104 {
				if a[i].Covariates[name][k] != b[i].Covariates[name][k] {
					t.Fatalf("%s %s[%d]: planned %v, happened %v", a[i].Key, name, k, a[i].Covariates[name][k], b[i].Covariates[name][k])
				}
			}
		}
		for k := range 100 {
			if a[i].Values[k] != b[i].Values[k] {
				t.Fatalf("%s[%d]: the longer history does not repeat the shorter one", a[i].Key, k)
			}
		}
	}
}

// Promotions and price cuts drive demand strongly: on pantry series, promotion weeks sell far
// more than other weeks, and outside promotions a lower price sells more (negative log-log
// slope, the constant-elasticity demand curve; common practice).
func TestPromotionsDriveDemand(t *testing.T) {
	o := Options{Items: 30, Depots: 1, Frequency: Weekly, Periods: 156, Scenario: ScenarioPromotions}
	ss := collectPlan(t, csvOf(t, o, 0), promoSource, o.withDefaults().End, 0)
	var on, off, nOn, nOff float64
	var sxy, sxx, sx, sy, n float64
	for _, s := range ss {
		if strings.HasPrefix(s.Key, "FLP-SP-") {
			continue // spare parts: intermittent, never on promotion
		}
		lvl := 0.0
		for _, v := range s.Values {
			lvl += v / float64(len(s.Values))
		}
		for k, v := range s.Values {
			p, price := s.Covariates["promo_flag"][k], s.Covariates["price"][k]
			if p == 1 {
				on, nOn = on+v/lvl, nOn+1
				continue
			}
			off, nOff = off+v/lvl, nOff+1
			if v > 0 {
				x, y := math.Log(price/ListPrice), math.Log(v/lvl)
				sx, sy, sxy, sxx, n = sx+x, sy+y, sxy+x*y, sxx+x*x, n+1
			}
		}
	}
	if ratio := (on / nOn) / (off / nOff); ratio < 1.8 {
		t.Errorf("promotion weeks sell %.2f times other weeks, want a strong lift (>= 1.8)", ratio)
	}
	if share := nOn / (nOn + nOff); share < 0.15 || share > 0.5 {
		t.Errorf("promotions in %.0f%% of weeks", 100*share)
	}
	if slope := (n*sxy - sx*sy) / (n*sxx - sx*sx); !(slope < -0.5) {
		t.Errorf("log units on log price slope %.2f outside promotions, want clearly negative", slope)
	}
}

// The scenario's Parquet rows equal its CSV rows, price and plan included.
func TestPromotionParquetMatchesCSV(t *testing.T) {
	o := Options{Items: 6, Depots: 1, Frequency: Weekly, Periods: 60, Scenario: ScenarioPromotions, Future: 3}
	var b bytes.Buffer
	if err := o.WriteParquet(&b, 0, 0); err != nil {
		t.Fatal(err)
	}
	src := promoSource
	src.Format = "parquet"
	c, _ := ingest.NewCollector(src, o.withDefaults().End)
	c.KeepFuture(3)
	if err := ingest.ScanParquet(context.Background(), bytes.NewReader(b.Bytes()), int64(b.Len()), "depot.parquet", src, nil, func(r ingest.Row) error { c.Add(r); return nil }); err != nil {
		t.Fatal(err)
	}
	pq, rej := c.Finish()
	cs := collectPlan(t, csvOf(t, o, 0), promoSource, o.withDefaults().End, 3)
	if len(rej) != 0 || len(pq) != len(cs) {
		t.Fatalf("parquet %d series (rejected %v), csv %d", len(pq), rej, len(cs))
	}
	for i := range pq {
		if !sameSeries(pq[i], cs[i]) {
			t.Fatalf("%s: parquet and csv differ", pq[i].Key)
		}
	}
}

func sameSeries(a, b series.Series) bool {
	eq := func(x, y []float64) bool {
		if len(x) != len(y) {
			return false
		}
		for i := range x {
			if x[i] != y[i] && !(math.IsNaN(x[i]) && math.IsNaN(y[i])) {
				return false
			}
		}
		return true
	}
	return a.Key == b.Key && eq(a.Values, b.Values) && eq(a.Covariates["promo_flag"], b.Covariates["promo_flag"]) && eq(a.Covariates["price"], b.Covariates["price"])
}

func TestScenarioOptionsValidate(t *testing.T) {
	if err := (Options{Scenario: "holidays"}).Validate(); err == nil || !strings.Contains(err.Error(), "scenario") {
		t.Errorf("unknown scenario: %v", err)
	}
	if err := (Options{Future: 4}).Validate(); err == nil || !strings.Contains(err.Error(), "future") {
		t.Errorf("a plan on the baseline: %v", err)
	}
}
