package tables

import (
	"bytes"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/ingest"
)

var formats = []string{CSV, Parquet}

// keys are the sample tables' key columns, as a portfolio's source.columns.series names them.
var keys = []string{"depot", "item"}

func key(depot, item string) string { return ingest.JoinKey(depot, item) }

func week(d int) time.Time { return time.Date(2026, 12, 7+7*d, 0, 0, 0, 0, time.UTC) }

// Fenwick Lane Provisions (invented): weekly forecasts for two depot items.
func sampleForecasts() (Header, []ForecastRow) {
	h := Header{Keys: keys, Quantiles: []float64{0.05, 0.1, 0.5, 0.9, 0.975}}
	rows := []ForecastRow{
		{Key: key("harbour", "rye-loaf"), Period: week(0), Step: 1, Model: "ETS(A,N,N)", Mean: 13.25, Quantiles: []float64{9, 10.1, 13.25, 16.4, 17.5}},
		{Key: key("harbour", "rye-loaf"), Period: week(1), Step: 2, Model: "ETS(A,N,N)", Mean: 13.25, Quantiles: []float64{8.5, 9.75, 13.25, 16.75, 18}},
		{Key: key("north", "oat-flakes-1kg"), Period: week(0), Step: 1, Model: "Theta", Mean: 1.0 / 3, Quantiles: []float64{0, 0, 1.0 / 3, math.Inf(1), math.NaN()}},
	}
	return h, rows
}

func sameFloat(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }

func TestForecastsRoundTrip(t *testing.T) {
	h, rows := sampleForecasts()
	for _, f := range formats {
		var buf bytes.Buffer
		if err := WriteForecasts(&buf, f, h, rows); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		gh, got, err := ReadForecasts(bytes.NewReader(buf.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if !reflect.DeepEqual(gh, h) {
			t.Errorf("%s: header %v, want %v", f, gh, h)
		}
		if len(got) != len(rows) {
			t.Fatalf("%s: %d rows, want %d", f, len(got), len(rows))
		}
		for i := range rows {
			w, g := rows[i], got[i]
			if g.Key != w.Key || !g.Period.Equal(w.Period) || g.Step != w.Step || g.Model != w.Model || !sameFloat(g.Mean, w.Mean) {
				t.Errorf("%s row %d: %+v, want %+v", f, i, g, w)
			}
			for j := range w.Quantiles {
				if !sameFloat(g.Quantiles[j], w.Quantiles[j]) {
					t.Errorf("%s row %d q%d: %v, want %v", f, i, j, g.Quantiles[j], w.Quantiles[j])
				}
			}
		}
	}
}

// The CSV layout is our documented one; checked byte for byte.
func TestForecastsCSVLayout(t *testing.T) {
	h, rows := sampleForecasts()
	var buf bytes.Buffer
	if err := WriteForecasts(&buf, CSV, h, rows[2:]); err != nil {
		t.Fatal(err)
	}
	want := "depot,item,period,step,model,mean,q5,q10,q50,q90,q97.5\n" +
		"north,oat-flakes-1kg,2026-12-07T00:00:00Z,1,Theta,0.3333333333333333,0,0,0.3333333333333333,+Inf,NaN\n"
	if buf.String() != want {
		t.Errorf("got\n%s\nwant\n%s", buf.String(), want)
	}
}

func TestWritersAreDeterministic(t *testing.T) {
	h, rows := sampleForecasts()
	for _, f := range formats {
		var a, b bytes.Buffer
		if err := WriteForecasts(&a, f, h, rows); err != nil {
			t.Fatal(err)
		}
		if err := WriteForecasts(&b, f, h, rows); err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(a.Bytes(), b.Bytes()) {
			t.Errorf("%s: two writes of the same rows differ", f)
		}
		var m1, m2 bytes.Buffer
		if err := WriteModels(&m1, f, keys, sampleModels()); err != nil {
			t.Fatal(err)
		}
		if err := WriteModels(&m2, f, keys, sampleModels()); err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(m1.Bytes(), m2.Bytes()) {
			t.Errorf("%s: two writes of the same models differ", f)
		}
	}
}

func sampleModels() []ModelRow {
	return []ModelRow{
		{Key: key("harbour", "rye-loaf"), Model: "ETS(A,N,N)", Params: "alpha=0.31", BacktestErrors: []float64{0.8, 0.9, 1.1}, Metric: "MASE", Score: 0.93, Notes: "filled 1 interior missing values by linear interpolation"},
		{Key: key("north", "oat-flakes-1kg"), Model: "Naive", Params: "", BacktestErrors: []float64{1.2}, Metric: "MASE", Score: 1.2, Notes: "backtest horizon shortened to 1, \"short\""},
		{Key: key("south", "barley-5kg"), Model: "Mean", Metric: "MASE", Score: math.NaN(), Notes: "constant series: backtest skipped"},
	}
}

func TestModelsRoundTrip(t *testing.T) {
	for _, f := range formats {
		var buf bytes.Buffer
		if err := WriteModels(&buf, f, keys, sampleModels()); err != nil {
			t.Fatal(err)
		}
		got, err := ReadModels(bytes.NewReader(buf.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		want := sampleModels()
		for i := range want {
			w, g := want[i], got[i]
			if g.Key != w.Key || g.Model != w.Model || g.Params != w.Params || g.Metric != w.Metric ||
				!sameFloat(g.Score, w.Score) || g.Notes != w.Notes || !reflect.DeepEqual(g.BacktestErrors, w.BacktestErrors) {
				t.Errorf("%s row %d: %+v, want %+v", f, i, g, w)
			}
		}
	}
	var buf bytes.Buffer
	if err := WriteModels(&buf, CSV, keys, sampleModels()[1:2]); err != nil {
		t.Fatal(err)
	}
	if want := "depot,item,model,params,metric,score,err_h1,notes\n"; !strings.HasPrefix(buf.String(), want) {
		t.Errorf("header %q, want %q", buf.String(), want)
	}
}

// The design and segment columns appear when a row has a design, design_chosen_by when a row
// says where its design was chosen, and all round-trip in both formats.
func TestModelsDesignColumns(t *testing.T) {
	rows := sampleModels()
	rows[0].Design, rows[0].Segment, rows[0].DesignBy = "ets-theta", "weekly/smooth/long", "plan"
	for _, f := range formats {
		var buf bytes.Buffer
		if err := WriteModels(&buf, f, keys, rows); err != nil {
			t.Fatal(err)
		}
		if f == CSV && !strings.Contains(strings.SplitN(buf.String(), "\n", 2)[0], ",notes,design,segment,design_chosen_by") {
			t.Errorf("header %q, want design and segment after notes", strings.SplitN(buf.String(), "\n", 2)[0])
		}
		got, err := ReadModels(bytes.NewReader(buf.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if got[0].Design != "ets-theta" || got[0].Segment != "weekly/smooth/long" || got[0].DesignBy != "plan" || got[1].Design != "" || got[1].DesignBy != "" {
			t.Errorf("%s: designs %q/%q and %q", f, got[0].Design, got[0].Segment, got[1].Design)
		}
	}
}

func TestEvaluationAndRejectedRoundTrip(t *testing.T) {
	ev := []EvaluationRow{
		{Key: key("harbour", "rye-loaf"), Points: 4, Metric: "MASE", Expected: 0.93, Realized: 1.41, Drifted: true, PreviousRun: "weekly-20261130"},
		{Key: key("north", "oat-flakes-1kg"), Points: 0, Metric: "MASE", Expected: math.NaN(), Realized: math.NaN()},
	}
	rej := []RejectedRow{{Key: key("east", "kippers"), Reason: "demand.csv line 9: column \"units\": value \"n/a\" is not a number"}}
	for _, f := range formats {
		var b1, b2 bytes.Buffer
		if err := WriteEvaluation(&b1, f, keys, ev); err != nil {
			t.Fatal(err)
		}
		gotEv, err := ReadEvaluation(&b1, f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		for i := range ev {
			w, g := ev[i], gotEv[i]
			if g.Key != w.Key || g.Points != w.Points || g.Metric != w.Metric || !sameFloat(g.Expected, w.Expected) ||
				!sameFloat(g.Realized, w.Realized) || g.Drifted != w.Drifted || g.PreviousRun != w.PreviousRun {
				t.Errorf("%s evaluation %d: %+v, want %+v", f, i, g, w)
			}
		}
		if err := WriteRejected(&b2, f, keys, rej); err != nil {
			t.Fatal(err)
		}
		gotRej, err := ReadRejected(&b2, f, keys)
		if err != nil || !reflect.DeepEqual(gotRej, rej) {
			t.Errorf("%s rejected: %v %v", f, gotRej, err)
		}
	}
}

func TestEmptyTablesRoundTrip(t *testing.T) {
	h := Header{Keys: keys, Quantiles: []float64{0.1, 0.9}}
	for _, f := range formats {
		var buf bytes.Buffer
		if err := WriteForecasts(&buf, f, h, nil); err != nil {
			t.Fatal(err)
		}
		gh, rows, err := ReadForecasts(&buf, f, keys)
		if err != nil || len(rows) != 0 || !reflect.DeepEqual(gh, h) {
			t.Errorf("%s: header %v rows %d err %v", f, gh, len(rows), err)
		}
	}
}

func TestQuantileColumn(t *testing.T) {
	for q, want := range map[float64]string{0.1: "q10", 0.5: "q50", 0.05: "q5", 0.975: "q97.5", 0.07: "q7", 0.999: "q99.9", 0.005: "q0.5"} {
		if got := QuantileColumn(q); got != want {
			t.Errorf("QuantileColumn(%v) = %q, want %q", q, got, want)
		}
		if back, ok := ParseQuantileColumn(want); !ok || back != q {
			t.Errorf("ParseQuantileColumn(%q) = %v %v, want %v", want, back, ok, q)
		}
	}
	for _, bad := range []string{"q", "q-5", "q100", "q0", "q05", "qx", "mean", "q+5", "q1e1"} {
		if _, ok := ParseQuantileColumn(bad); ok {
			t.Errorf("ParseQuantileColumn(%q) accepted", bad)
		}
	}
}

func TestBadTables(t *testing.T) {
	h, rows := sampleForecasts()
	if err := WriteForecasts(&bytes.Buffer{}, "json", h, rows); err == nil || !strings.Contains(err.Error(), `"json"`) {
		t.Errorf("unknown format: %v", err)
	}
	if err := WriteForecasts(&bytes.Buffer{}, CSV, Header{Keys: keys, Quantiles: []float64{0.9, 0.1}}, nil); err == nil {
		t.Error("decreasing quantiles accepted")
	}
	if err := WriteForecasts(&bytes.Buffer{}, CSV, Header{Keys: keys, Quantiles: []float64{0.1}}, rows); err == nil || !strings.Contains(err.Error(), "harbour/rye-loaf") {
		t.Errorf("row with the wrong quantile count: %v", err)
	}
	cases := map[string]string{
		"depot,item,period,step,model\n":                                        `missing column "mean"`,
		"depot,item,period,step,model,mean,colour\n":                            `unexpected or repeated column "colour"`,
		"depot,item,period,step,model,mean\nx,y,2026-13-01,1,m,1\n":             `line 2 column "period"`,
		"depot,item,period,step,model,mean\nx,y,2026-12-01T00:00:00Z,one,m,1\n": `line 2 column "step"`,
		"depot,period,step,model,mean\n":                                        `missing key column "item"`,
		"depot,item,series,period,step,model,mean\n":                            `column "series" next to the key columns`,
		"": "empty file",
	}
	for in, want := range cases {
		_, _, err := ReadForecasts(strings.NewReader(in), CSV, keys)
		if err == nil || !strings.Contains(err.Error(), want) || !strings.Contains(err.Error(), "forecasts") {
			t.Errorf("%q: err %v, want %q", in, err, want)
		}
	}
	if _, err := ReadModels(strings.NewReader("depot,item,model,params,metric,score,err_h2,notes\n"), CSV, keys); err == nil {
		t.Error("err_h2 without err_h1 accepted")
	}
	if _, err := ReadModels(strings.NewReader("depot,item,model,params,metric,score,err_h1,err_h2,notes\ns,t,m,,MASE,1,,2,\n"), CSV, keys); err == nil {
		t.Error("a hole in the error columns accepted")
	}
	if _, _, err := ReadForecasts(strings.NewReader("PAR1 not really"), Parquet, keys); err == nil {
		t.Error("corrupt parquet accepted")
	}
	var ev bytes.Buffer
	if err := WriteEvaluation(&ev, Parquet, keys, nil); err != nil {
		t.Fatal(err)
	}
	if _, _, err := ReadForecasts(&ev, Parquet, keys); err == nil || !strings.Contains(err.Error(), "unexpected column") {
		t.Errorf("an evaluation file read as forecasts: %v", err)
	}
}
