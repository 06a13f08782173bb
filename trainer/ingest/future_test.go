package ingest

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"
)

// A promotion calendar: history to 2026-11-23 (now is Wednesday 2026-11-25), then planned
// promotions for the next weeks with the units cell empty.
const planned = `depot,item,week,units,promo
north,oat-flakes-1kg,2026-11-09,31,0
north,oat-flakes-1kg,2026-11-16,58,1
north,oat-flakes-1kg,2026-11-23,30,0
north,oat-flakes-1kg,2026-11-30,,1
north,oat-flakes-1kg,2026-12-07,,0
north,oat-flakes-1kg,2026-12-14,,1
harbour,rye-loaf,2026-11-16,12,0
harbour,rye-loaf,2026-11-23,14,0
`

var nowWednesday = time.Date(2026, 11, 25, 0, 0, 0, 0, time.UTC)

func collectPlanned(t *testing.T, data string, keep int) (map[string][]float64, map[string][]float64, map[string][]string, []Rejected) {
	t.Helper()
	src := fenwickSource()
	c, err := NewCollector(src, nowWednesday)
	if err != nil {
		t.Fatal(err)
	}
	c.KeepFuture(keep)
	if err := ScanCSV(context.Background(), strings.NewReader(data), "plan.csv", src, func(r Row) error { c.Add(r); return nil }); err != nil {
		t.Fatal(err)
	}
	ok, rej := c.Finish()
	vals, promo, notes := map[string][]float64{}, map[string][]float64{}, map[string][]string{}
	for _, s := range ok {
		vals[s.Key], promo[s.Key], notes[s.Key] = s.Values, s.Covariates["promo"], s.Notes
	}
	return vals, promo, notes, rej
}

func TestKeepFutureCovariates(t *testing.T) {
	vals, promo, notes, rej := collectPlanned(t, planned, 2)
	if len(rej) != 0 {
		t.Fatalf("rejected %v", rej)
	}
	k := "north/oat-flakes-1kg"
	if len(vals[k]) != 3 {
		t.Fatalf("values %v: the future rows must not become history", vals[k])
	}
	// Two periods kept (the horizon), the third future week dropped with the old note.
	if want := []float64{0, 1, 0, 1, 0}; !equalNaN(promo[k], want) {
		t.Errorf("promo %v, want %v", promo[k], want)
	}
	joined := strings.Join(notes[k], "; ")
	if !strings.Contains(joined, "kept the covariates of 2 planned periods") || !strings.Contains(joined, "dropped 1 planned rows more than 2 periods after 2026-11-23") {
		t.Errorf("notes %q", joined)
	}
	if h := promo["harbour/rye-loaf"]; len(h) != 2 {
		t.Errorf("series without a plan: promo %v, want the history only", h)
	}
}

// Without KeepFuture the behaviour is the earlier one: an empty value rejects the series,
// wherever the row is dated.
func TestFutureRowsWithoutKeepFuture(t *testing.T) {
	_, _, _, rej := collectPlanned(t, planned, 0)
	if len(rej) != 1 || rej[0].Key != "north/oat-flakes-1kg" || !strings.Contains(rej[0].Reason, `plan.csv line 5: column "units": empty value`) {
		t.Fatalf("rejected %v, want the oat flakes with the empty value located", rej)
	}
}

func TestEmptyHistoryValueStillRejects(t *testing.T) {
	data := strings.Replace(planned, "2026-11-16,58,1", "2026-11-16,,1", 1)
	_, _, _, rej := collectPlanned(t, data, 4)
	if len(rej) != 1 || !strings.Contains(rej[0].Reason, `line 3: column "units": empty value`) {
		t.Fatalf("rejected %v, want the history row's empty value", rej)
	}
}

func TestConflictingFutureRowsReject(t *testing.T) {
	data := planned + "north,oat-flakes-1kg,2026-11-30,,0\n"
	_, _, _, rej := collectPlanned(t, data, 4)
	if len(rej) != 1 || !strings.Contains(rej[0].Reason, "two planned rows for period 2026-11-30") {
		t.Fatalf("rejected %v", rej)
	}
}

// A bad covariate on a future row is still a problem: only the empty value is excused.
func TestFutureRowWithBadCovariateRejects(t *testing.T) {
	data := strings.Replace(planned, "2026-12-07,,0", "2026-12-07,,maybe", 1)
	_, _, _, rej := collectPlanned(t, data, 4)
	if len(rej) != 1 || !strings.Contains(rej[0].Reason, `column "promo"`) {
		t.Fatalf("rejected %v", rej)
	}
}

type plannedRow struct {
	Depot string   `parquet:"depot"`
	Item  string   `parquet:"item"`
	Week  int32    `parquet:"week,date"`
	Units *float64 `parquet:"units,optional"`
	Promo float64  `parquet:"promo"`
}

// Parquet: a null value on a future row is the same as an empty CSV cell.
func TestKeepFutureParquet(t *testing.T) {
	v := func(x float64) *float64 { return &x }
	mon := time.Date(2026, 11, 16, 0, 0, 0, 0, time.UTC)
	b := writeParquet(t, []plannedRow{
		{"north", "oat-flakes-1kg", days(mon), v(58), 1},
		{"north", "oat-flakes-1kg", days(mon.AddDate(0, 0, 7)), v(30), 0},
		{"north", "oat-flakes-1kg", days(mon.AddDate(0, 0, 14)), nil, 1},
	}, parquet.MaxRowsPerRowGroup(10))
	src := fenwickSource()
	src.Format = "parquet"
	c, err := NewCollector(src, nowWednesday)
	if err != nil {
		t.Fatal(err)
	}
	c.KeepFuture(2)
	rows, err := scanParquet(t, b, src, nil)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows {
		c.Add(r)
	}
	ok, rej := c.Finish()
	if len(rej) != 0 || len(ok) != 1 {
		t.Fatalf("ok %d rejected %v", len(ok), rej)
	}
	if s := ok[0]; len(s.Values) != 2 || !equalNaN(s.Covariates["promo"], []float64{1, 0, 1}) {
		t.Errorf("values %v promo %v", s.Values, s.Covariates["promo"])
	}
}

func equalNaN(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] && !(math.IsNaN(a[i]) && math.IsNaN(b[i])) {
			return false
		}
	}
	return true
}

// A plan whose first weeks are already past now (the history stopped before now, as when the
// latest actuals are not loaded yet) is still the plan: empty values after the last observed
// week are planned weeks, not missing actuals.
func TestPlanAfterAStaleHistory(t *testing.T) {
	data := strings.Replace(planned, "north,oat-flakes-1kg,2026-11-23,30,0\n", "north,oat-flakes-1kg,2026-11-23,,0\n", 1)
	vals, promo, _, rej := collectPlanned(t, data, 4)
	k := "north/oat-flakes-1kg"
	if len(rej) != 0 || len(vals[k]) != 2 {
		t.Fatalf("rejected %v, values %v: want 2 weeks of history", rej, vals[k])
	}
	if want := []float64{0, 1, 0, 1, 0, 1}; !equalNaN(promo[k], want) {
		t.Errorf("promo %v, want the history and 4 planned weeks %v", promo[k], want)
	}
}
