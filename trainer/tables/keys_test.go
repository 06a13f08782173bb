package tables

import (
	"bytes"
	"encoding/csv"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
)

// hostileKeys are key tuples whose cells hold what a join would trip over: the old "/"
// separator (item A/1 at depot x against item A at depot 1/x, one series when joined), quotes,
// commas, a newline, a tab and non-ASCII text.
var hostileKeys = [][]string{
	{"x", "A/1"},
	{"1/x", "A"},
	{`say "hi"`, "a,b\nc"},
	{"tab\there", "Käse/Brot"},
	{`"`, `/`},
}

// Every table keeps each key column under its own name in both formats, the cells as they
// were, and reads back to the same keys.
func TestKeyCellsSurviveEveryTable(t *testing.T) {
	var fc []ForecastRow
	var mr []ModelRow
	var ev []EvaluationRow
	var rej []RejectedRow
	for i, k := range hostileKeys {
		key := ingest.JoinKey(k...)
		for s := 1; s <= 2; s++ {
			fc = append(fc, ForecastRow{Key: key, Period: week(s), Step: s, Model: "Naive", Mean: float64(i), Quantiles: []float64{0, float64(i)}})
		}
		mr = append(mr, ModelRow{Key: key, Model: "Naive", Metric: "MASE", Score: 1})
		ev = append(ev, EvaluationRow{Key: key, Points: 2, Metric: "MASE", Expected: 1, Realized: 2, PreviousRun: "weekly-1"})
		rej = append(rej, RejectedRow{Key: key, Reason: "2 observed periods"})
	}
	h := Header{Keys: keys, Quantiles: []float64{0.1, 0.9}}
	for _, f := range formats {
		var b [4]bytes.Buffer
		if err := WriteForecasts(&b[0], f, h, fc); err != nil {
			t.Fatal(err)
		}
		if err := WriteModels(&b[1], f, keys, mr); err != nil {
			t.Fatal(err)
		}
		if err := WriteEvaluation(&b[2], f, keys, ev); err != nil {
			t.Fatal(err)
		}
		if err := WriteRejected(&b[3], f, keys, rej); err != nil {
			t.Fatal(err)
		}
		if f == CSV {
			for ti := range b {
				checkCSVKeyCells(t, b[ti].Bytes())
			}
		}
		_, gotFc, err := ReadForecasts(bytes.NewReader(b[0].Bytes()), f, keys)
		if err != nil {
			t.Fatal(err)
		}
		gotMr, err := ReadModels(bytes.NewReader(b[1].Bytes()), f, keys)
		if err != nil {
			t.Fatal(err)
		}
		gotEv, err := ReadEvaluation(bytes.NewReader(b[2].Bytes()), f, keys)
		if err != nil {
			t.Fatal(err)
		}
		gotRej, err := ReadRejected(bytes.NewReader(b[3].Bytes()), f, keys)
		if err != nil {
			t.Fatal(err)
		}
		if len(gotFc) != len(fc) || len(gotMr) != len(mr) || len(gotEv) != len(ev) || !reflect.DeepEqual(gotRej, rej) {
			t.Fatalf("%s: read %d/%d/%d/%v rows", f, len(gotFc), len(gotMr), len(gotEv), gotRej)
		}
		for i := range fc {
			if gotFc[i].Key != fc[i].Key {
				t.Errorf("%s forecasts row %d: key %q, want %q", f, i, gotFc[i].Key, fc[i].Key)
			}
		}
		for i := range mr {
			if gotMr[i].Key != mr[i].Key || gotEv[i].Key != ev[i].Key {
				t.Errorf("%s row %d: keys %q, %q, want %q", f, i, gotMr[i].Key, gotEv[i].Key, mr[i].Key)
			}
		}
		// Deterministic bytes with such keys too.
		var again bytes.Buffer
		if err := WriteForecasts(&again, f, h, fc); err != nil || !bytes.Equal(again.Bytes(), b[0].Bytes()) {
			t.Errorf("%s: a second write differs (%v)", f, err)
		}
	}
}

// checkCSVKeyCells reads a CSV table as plain CSV: its first columns are depot and item and
// row i (of each key's rows, in order) holds hostileKeys' cells unchanged.
func checkCSVKeyCells(t *testing.T, b []byte) {
	t.Helper()
	recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if recs[0][0] != "depot" || recs[0][1] != "item" {
		t.Fatalf("header %q, want depot, item first", recs[0])
	}
	seen := 0
	for _, r := range recs[1:] {
		want := hostileKeys[seen]
		if r[0] != want[0] || r[1] != want[1] {
			if seen+1 < len(hostileKeys) && r[0] == hostileKeys[seen+1][0] && r[1] == hostileKeys[seen+1][1] {
				seen++
				continue
			}
			t.Errorf("row %q: key cells %q, want %q", r, r[:2], want)
		}
	}
	if seen != len(hostileKeys)-1 {
		t.Errorf("%d keys in the table, want %d", seen+1, len(hostileKeys))
	}
}

// A table written before key columns (one "series" column joining the cells with "/") reads
// with the portfolio's key columns; a row whose cells held "/" was ambiguous and is skipped.
func TestTablesWithASeriesColumnStillRead(t *testing.T) {
	at := time.Date(2026, 11, 30, 0, 0, 0, 0, time.UTC)
	old := map[string]grid{
		"forecasts": {cols: []column{{"series", text}, {colPeriod, instant}, {colStep, integer}, {colModel, text}, {colMean, number}, {"q50", number}},
			rows: [][]cell{{{s: "north/oats"}, {t: at}, {n: 1}, {s: "Naive"}, {f: 3}, {f: 3}}, {{s: "A/1/x"}, {t: at}, {n: 1}, {s: "Naive"}, {f: 1}, {f: 1}}}},
		"models": {cols: []column{{"series", text}, {colModel, text}, {colParams, text}, {colMetric, text}, {colScore, number}, {"err_h1", optNumber}, {colNotes, text}},
			rows: [][]cell{{{s: "north/oats"}, {s: "Naive"}, {s: "Naive"}, {s: "MASE"}, {f: 0.9}, {f: 0.9}, {s: ""}}, {{s: "A/1/x"}, {s: "Naive"}, {}, {s: "MASE"}, {f: 1}, {f: 1}, {}}}},
		"evaluation": {cols: append([]column{{"series", text}}, evaluationColumns...),
			rows: [][]cell{{{s: "north/oats"}, {n: 4}, {s: "MASE"}, {f: 0.9}, {f: 1.2}, {b: false}, {s: "weekly-1"}}}},
		"rejected": {cols: []column{{"series", text}, {colReason, text}},
			rows: [][]cell{{{s: "north/oats"}, {s: "1 observed periods"}}, {{s: `"q"/x`}, {s: "1 observed periods"}}}},
	}
	want := ingest.JoinKey("north", "oats")
	for _, f := range formats {
		for name, g := range old {
			var buf bytes.Buffer
			if err := write(&buf, f, g); err != nil {
				t.Fatal(err)
			}
			var got []string
			var err error
			switch name {
			case "forecasts":
				var rows []ForecastRow
				_, rows, err = ReadForecasts(&buf, f, keys)
				for _, r := range rows {
					got = append(got, r.Key)
				}
			case "models":
				var rows []ModelRow
				rows, err = ReadModels(&buf, f, keys)
				for _, r := range rows {
					got = append(got, r.Key)
				}
			case "evaluation":
				var rows []EvaluationRow
				rows, err = ReadEvaluation(&buf, f, keys)
				for _, r := range rows {
					got = append(got, r.Key)
				}
			case "rejected":
				var rows []RejectedRow
				rows, err = ReadRejected(&buf, f, keys)
				for _, r := range rows {
					got = append(got, r.Key)
				}
			}
			if err != nil || len(got) != 1 || got[0] != want {
				t.Errorf("%s %s: keys %q, %v; want [%q]", f, name, got, err, want)
			}
		}
		// One key column: the series cell is the key, whatever it holds.
		var buf bytes.Buffer
		if err := write(&buf, f, old["forecasts"]); err != nil {
			t.Fatal(err)
		}
		_, rows, err := ReadForecasts(&buf, f, []string{"sku"})
		if err != nil || len(rows) != 2 || rows[1].Key != "A/1/x" {
			t.Errorf("%s: one key column: %+v, %v", f, rows, err)
		}
	}
}

func TestCheckKeys(t *testing.T) {
	for _, ok := range [][]string{{"series"}, {"item", "depot"}, {"item", "series"}, {"q"}, {"Period"}, {"err_h0"}, {"sku code"}} {
		if err := CheckKeys(ok); err != nil {
			t.Errorf("CheckKeys(%q): %v", ok, err)
		}
	}
	for _, c := range []struct {
		keys []string
		want string
	}{
		{nil, "no series key column"},
		{[]string{"item", ""}, "column 1: empty name"},
		{[]string{"item", "depot", "item"}, `column 2: "item" named twice`},
		{[]string{"item", "period"}, `column 1: "period" is the name of an output table column`},
		{[]string{"reason"}, `"reason" is the name`},
		{[]string{"q50"}, `"q50" is the name`},
		{[]string{"q97.5"}, `"q97.5" is the name`},
		{[]string{"err_h3"}, `"err_h3" is the name`},
		{[]string{"kept_features"}, `"kept_features" is the name`},
	} {
		err := CheckKeys(c.keys)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("CheckKeys(%q) = %v, want %q", c.keys, err, c.want)
		}
	}
	// Writers and readers refuse such names.
	if err := WriteRejected(&bytes.Buffer{}, CSV, []string{"reason"}, nil); err == nil || !strings.Contains(err.Error(), "tables: rejected") {
		t.Errorf("WriteRejected with a key column named reason: %v", err)
	}
	if _, err := ReadModels(strings.NewReader("model\n"), CSV, []string{"model"}); err == nil {
		t.Error("ReadModels with a key column named model: no error")
	}
}

// A row key that is not the encoding of len(keys) cells is an error naming the row.
func TestWriterRefusesKeysOfAnotherLength(t *testing.T) {
	rows := []ModelRow{{Key: ingest.JoinKey("north", "oats"), Model: "Naive", Score: math.NaN()}, {Key: "north", Model: "Naive"}}
	err := WriteModels(&bytes.Buffer{}, CSV, keys, rows)
	if err == nil || !strings.Contains(err.Error(), `models row 1: series "north"`) {
		t.Errorf("err = %v", err)
	}
}
