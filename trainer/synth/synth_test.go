package synth

import (
	"bytes"
	"context"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

var source = runconfig.Source{Format: "csv", Frequency: "Daily",
	Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: "date", Value: "units", Covariates: []string{"promo_flag"}}}

func csvOf(t *testing.T, o Options, d int) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := o.WriteCSV(&b, d); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

func TestDeterministic(t *testing.T) {
	o := Options{Items: 20, Depots: 2, Periods: 100, Seed: 7}
	a, b := csvOf(t, o, 1), csvOf(t, o, 1)
	if !bytes.Equal(a, b) {
		t.Fatal("same options gave different bytes")
	}
	o.Seed = 8
	if bytes.Equal(a, csvOf(t, o, 1)) {
		t.Fatal("another seed gave the same bytes")
	}
	// Generating more depots does not change an existing depot's rows.
	o.Seed, o.Depots = 7, 5
	if !bytes.Equal(a, csvOf(t, o, 1)) {
		t.Fatal("depot 1 depends on the depot count")
	}
}

// collect reads a depot through the trainer's own reader.
func collect(t *testing.T, data []byte, src runconfig.Source) (map[string][]float64, map[string][]float64, []ingest.Rejected) {
	t.Helper()
	c, err := ingest.NewCollector(src, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	if err := ingest.ScanCSV(context.Background(), bytes.NewReader(data), "depot.csv", src, func(r ingest.Row) error { c.Add(r); return nil }); err != nil {
		t.Fatal(err)
	}
	ok, rej := c.Finish()
	vals, promo := map[string][]float64{}, map[string][]float64{}
	for _, s := range ok {
		vals[s.Key], promo[s.Key] = s.Values, s.Covariates["promo_flag"]
	}
	return vals, promo, rej
}

func TestShapeOfTheData(t *testing.T) {
	o := Options{Items: 40, Depots: 1, Periods: 730, SpareShare: 0.25}
	vals, promo, rej := collect(t, csvOf(t, o, 0), source)
	if len(vals) != 40 || len(rej) != 0 {
		t.Fatalf("%d series, %d rejected; want 40, 0", len(vals), len(rej))
	}
	var liftOn, liftOff, nOn, nOff float64
	for key, v := range vals {
		if len(v) != 730 {
			t.Fatalf("%s: %d periods", key, len(v))
		}
		zeros := 0
		for i, x := range v {
			if x < 0 || x != float64(int(x)) {
				t.Fatalf("%s[%d] = %v, want a non-negative count", key, i, x)
			}
			if x == 0 {
				zeros++
			}
			if strings.HasPrefix(key, "FLP-SP-") {
				continue
			}
			if promo[key][i] == 1 {
				liftOn += x
				nOn++
			} else {
				liftOff += x
				nOff++
			}
		}
		// Spare parts are intermittent: most periods have no demand (the issue probability is
		// at most 15% per day by construction).
		if strings.HasPrefix(key, "FLP-SP-") && zeros < 730*7/10 {
			t.Errorf("%s: %d zeros of 730, want most periods without demand", key, zeros)
		}
	}
	if !(liftOn/nOn > 1.2*liftOff/nOff) {
		t.Errorf("promotion days average %.1f units, other days %.1f: want a clear lift", liftOn/nOn, liftOff/nOff)
	}
	if nOn < 0.05*(nOn+nOff) || nOn > 0.4*(nOn+nOff) {
		t.Errorf("promotions on %.0f of %.0f days", nOn, nOn+nOff)
	}
}

func TestBadSeriesAreRejectedWithReasons(t *testing.T) {
	o := Options{Items: 6, Depots: 1, Periods: 30, Bad: 4}
	_, _, rej := collect(t, csvOf(t, o, 0), source)
	want := map[string]string{ // defect -> words the reason must contain
		o.ItemName(0) + "/ashby": "not a number",
		o.ItemName(1) + "/ashby": "grid",
		o.ItemName(2) + "/ashby": "different values",
		o.ItemName(3) + "/ashby": "observed periods",
	}
	if len(rej) != len(want) {
		t.Fatalf("rejected %+v, want the %d bad series", rej, len(want))
	}
	for _, r := range rej {
		if w, ok := want[r.Key]; !ok || !strings.Contains(r.Reason, w) {
			t.Errorf("%s rejected with %q, want a reason containing %q", r.Key, r.Reason, w)
		}
	}
}

func TestWeeklyAndParquet(t *testing.T) {
	o := Options{Items: 5, Depots: 2, Frequency: Weekly, Periods: 60, SpareShare: -1}
	st, err := store.Open(context.Background(), "mem://synth-test/")
	if err != nil {
		t.Fatal(err)
	}
	keys, err := o.Write(context.Background(), st, "in/", Parquet)
	if err != nil || len(keys) != 2 || keys[1] != "in/depot-brill.parquet" {
		t.Fatalf("Write = %v, %v", keys, err)
	}
	src := source
	src.Format, src.Frequency, src.WeekAnchor = "parquet", "Weekly", "Monday"
	src.Columns.Date = "week_start"
	ra, size, err := st.NewReaderAt(context.Background(), keys[1])
	if err != nil {
		t.Fatal(err)
	}
	c, _ := ingest.NewCollector(src, time.Time{})
	if err := ingest.ScanParquet(context.Background(), ra, size, keys[1], src, nil, func(r ingest.Row) error { c.Add(r); return nil }); err != nil {
		t.Fatal(err)
	}
	ok, rej := c.Finish()
	if len(ok) != 5 || len(rej) != 0 || len(ok[0].Values) != 60 || ok[0].Start.Weekday() != time.Monday {
		t.Fatalf("%d series, %d rejected, first %+v", len(ok), len(rej), ok[0].Start)
	}
	// The Parquet rows equal the CSV rows.
	vals, _, _ := collect(t, csvOf(t, o, 1), runconfig.Source{Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", Columns: src.Columns})
	for _, s := range ok {
		for i, v := range s.Values {
			if vals[s.Key][i] != v {
				t.Fatalf("%s[%d]: parquet %v, csv %v", s.Key, i, v, vals[s.Key][i])
			}
		}
	}
	if err := (Options{Frequency: Weekly, End: time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC)}).Validate(); err == nil {
		t.Fatal("weekly data ending on a Tuesday accepted")
	}
}

// SpareShare < 0 is documented as "no spare parts"; withDefaults runs more than once per
// option set, so the negative value must survive it.
func TestNegativeSpareShareMeansNone(t *testing.T) {
	for _, c := range []struct {
		share float64
		want  int
	}{{-1, 0}, {0, 2}, {0.5, 10}} {
		o := Options{Items: 20, Depots: 1, Frequency: Weekly, Periods: 10, SpareShare: c.share}
		spares := 0
		for i := 0; i < o.Items; i++ {
			if strings.HasPrefix(o.ItemName(i), "FLP-SP-") {
				spares++
			}
		}
		if spares != c.want {
			t.Errorf("SpareShare %v: %d spare items of 20, want %d", c.share, spares, c.want)
		}
	}
}

// The generate command's history ends at the last complete period before its clock (issue 18
// case 6: with data ending on a fixed date, a run taking the clock as its cutoff would find the
// whole forecast past once the calendar had moved on, and reject every series as stale);
// --end still fixes it. Calendar facts (any calendar): 2026-12-04 is a Friday, 2026-11-30 and
// 2026-11-23 Mondays.
func TestGenerateEndsAtTheLastCompletePeriod(t *testing.T) {
	for _, c := range []struct {
		now, freq, want string
	}{
		{"2026-12-04T10:00:00Z", Weekly, "2026-11-23"},
		{"2026-11-30T00:00:00Z", Weekly, "2026-11-23"}, // Monday 00:00: the week before has just ended
		{"2026-11-29T23:59:59Z", Weekly, "2026-11-16"}, // Sunday: the current week began 2026-11-23
		{"2026-12-04T10:00:00+05:00", Daily, "2026-12-03"},
		{"2026-12-04T00:00:00Z", Daily, "2026-12-03"},
	} {
		now, _ := time.Parse(time.RFC3339, c.now)
		if got := LastComplete(c.freq, now).Format(time.DateOnly); got != c.want {
			t.Errorf("LastComplete(%s, %s) = %s, want %s", c.freq, c.now, got, c.want)
		}
	}
	friday := func() time.Time { return time.Date(2026, 12, 4, 10, 0, 0, 0, time.UTC) }
	lastRow := func(t *testing.T, args ...string) string {
		t.Helper()
		uri := "mem://flp-generate-" + strings.Join(args, "-") + "/"
		var out, errb bytes.Buffer
		if code := Main(context.Background(), append([]string{"--output", uri, "--items", "1", "--depots", "1", "--periods", "10"}, args...), &out, &errb, friday); code != 0 {
			t.Fatalf("generate %v: exit %d: %s", args, code, errb.String())
		}
		st, err := store.Open(context.Background(), uri)
		if err != nil {
			t.Fatal(err)
		}
		b, err := st.Get(context.Background(), ObjectKey(0, CSV))
		if err != nil {
			t.Fatal(err)
		}
		lines := strings.Split(strings.TrimSpace(string(b)), "\n")
		return strings.Split(lines[len(lines)-1], ",")[2] + " | " + out.String()
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{nil, "2026-12-03 | generate: 1 series (1 items x 1 depots, 10 daily periods ending 2026-12-03)"},
		{[]string{"--frequency", Weekly}, "2026-11-23 | generate: 1 series (1 items x 1 depots, 10 weekly periods ending 2026-11-23)"},
		{[]string{"--end", "2026-11-02", "--frequency", Weekly}, "2026-11-02 |"},
	} {
		if got := lastRow(t, c.args...); !strings.HasPrefix(got, c.want) {
			t.Errorf("generate %v: last row and output %q, want %q", c.args, got, c.want)
		}
	}
}
