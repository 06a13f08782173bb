package ingest

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
)

// fenwick is a small extract in the shape of Fenwick Lane Provisions' weekly depot demand
// export (invented data): two key columns, one covariate, an unmapped column.
const fenwick = `depot,item,week,units,promo,comment
north,oat-flakes-1kg,2026-10-05,31,0,
north,oat-flakes-1kg,2026-10-12,28,1,"promo, end cap"
north,oat-flakes-1kg,2026-10-26,35,0,
harbour,rye-loaf,2026-10-05,12,,
harbour,rye-loaf,2026-10-12,14.5,0,
`

func fenwickSource() runconfig.Source {
	return runconfig.Source{
		Format:     "csv",
		Columns:    runconfig.Columns{Series: []string{"depot", "item"}, Date: "week", Value: "units", Covariates: []string{"promo"}},
		Frequency:  "Weekly",
		WeekAnchor: "Monday",
	}
}

func scanAll(t *testing.T, data string, src runconfig.Source) ([]Row, error) {
	t.Helper()
	var rows []Row
	err := ScanCSV(context.Background(), strings.NewReader(data), "mem://in/demand.csv", src, func(r Row) error {
		rows = append(rows, r)
		return nil
	})
	return rows, err
}

func TestScanCSVMapsColumns(t *testing.T) {
	rows, err := scanAll(t, fenwick, fenwickSource())
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 5 {
		t.Fatalf("%d rows, want 5", len(rows))
	}
	r := rows[1]
	if r.Key != "north/oat-flakes-1kg" || r.Value != 28 || !r.Date.Equal(time.Date(2026, 10, 12, 0, 0, 0, 0, time.UTC)) ||
		len(r.Covariates) != 1 || r.Covariates[0] != 1 || r.Problem != "" {
		t.Errorf("row 2 = %+v", r)
	}
	if c := rows[3].Covariates[0]; !math.IsNaN(c) {
		t.Errorf("empty covariate = %v, want NaN", c)
	}
}

func TestCollectorBuildsWeeklyGrid(t *testing.T) {
	src := fenwickSource()
	c, err := NewCollector(src, time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	err = ScanCSV(context.Background(), strings.NewReader(fenwick), "demand.csv", src, func(r Row) error { c.Add(r); return nil })
	if err != nil {
		t.Fatal(err)
	}
	ok, rej := c.Finish()
	if len(rej) != 0 || len(ok) != 2 {
		t.Fatalf("ok %d rejected %v", len(ok), rej)
	}
	if ok[0].Key != "harbour/rye-loaf" || ok[1].Key != "north/oat-flakes-1kg" {
		t.Errorf("keys %q %q, want sorted", ok[0].Key, ok[1].Key)
	}
	n := ok[1]
	want := []float64{31, 28, math.NaN(), 35} // 2026-10-19 missing
	if n.Freq != series.Weekly || !n.Start.Equal(time.Date(2026, 10, 5, 0, 0, 0, 0, time.UTC)) || len(n.Values) != 4 {
		t.Fatalf("series %+v", n)
	}
	for i, w := range want {
		if n.Values[i] != w && !(math.IsNaN(w) && math.IsNaN(n.Values[i])) {
			t.Errorf("value %d = %v, want %v", i, n.Values[i], w)
		}
	}
	if p := n.Covariates["promo"]; len(p) != 4 || p[1] != 1 || !math.IsNaN(p[2]) {
		t.Errorf("promo %v", p)
	}
	if len(n.Notes) != 1 || !strings.Contains(n.Notes[0], "1 missing periods") {
		t.Errorf("notes %q", n.Notes)
	}
}

func TestScanCSVStopsOnCallbackError(t *testing.T) {
	stop := errors.New("stop")
	calls := 0
	err := ScanCSV(context.Background(), strings.NewReader(fenwick), "x", fenwickSource(), func(Row) error { calls++; return stop })
	if !errors.Is(err, stop) || calls != 1 {
		t.Errorf("err %v after %d calls", err, calls)
	}
}

func TestScanCSVHonoursContext(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	err := ScanCSV(ctx, strings.NewReader(fenwick), "x", fenwickSource(), func(Row) error { return nil })
	if !errors.Is(err, context.Canceled) {
		t.Errorf("err %v, want context.Canceled", err)
	}
}
