package tables

import (
	"bytes"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
)

// TestLevelRoundTrips writes and reads a hierarchy's forecasts and models rows in both
// formats: the aggregates' empty key cells and the hierarchy_level column come back as written.
func TestLevelRoundTrips(t *testing.T) {
	keys := []string{"item", "depot"}
	p := time.Date(2026, 12, 7, 0, 0, 0, 0, time.UTC)
	fc := []ForecastRow{
		{Key: "/", Level: "total", Period: p, Step: 1, Model: "ETS", Mean: 30, Quantiles: []float64{25, 35}},
		{Key: "/D01", Level: "depot", Period: p, Step: 1, Model: "ETS", Mean: 30, Quantiles: []float64{24, 36}},
		{Key: "P001/D01", Level: "item+depot", Period: p, Step: 1, Model: "Naive", Mean: 30, Quantiles: []float64{20, 40}},
	}
	mr := []ModelRow{{Key: "/D01", Level: "depot", Model: "ETS", Params: "ETS(A,N,N)", Metric: "MASE", Score: 0.8, BacktestErrors: []float64{0.7}}}
	for _, format := range []string{CSV, Parquet} {
		var b bytes.Buffer
		h := Header{Keys: keys, Quantiles: []float64{0.1, 0.9}}
		if err := WriteForecasts(&b, format, h, fc); err != nil {
			t.Fatal(err)
		}
		_, got, err := ReadForecasts(&b, format, keys)
		if err != nil {
			t.Fatal(err)
		}
		if diff := cmp.Diff(fc, got); diff != "" {
			t.Errorf("%s forecasts (-want,+got):\n%s", format, diff)
		}
		b.Reset()
		if err := WriteModels(&b, format, keys, mr); err != nil {
			t.Fatal(err)
		}
		gotM, err := ReadModels(&b, format, keys)
		if err != nil {
			t.Fatal(err)
		}
		if diff := cmp.Diff(mr, gotM); diff != "" {
			t.Errorf("%s models (-want,+got):\n%s", format, diff)
		}
	}
	ev := []EvaluationRow{{Key: "/", Level: "total", Points: 4, Metric: "MASE", Expected: 0.8, Realized: 0.9, PreviousRun: "flp-1"}}
	for _, format := range []string{CSV, Parquet} {
		var b bytes.Buffer
		if err := WriteEvaluation(&b, format, keys, ev); err != nil {
			t.Fatal(err)
		}
		got, err := ReadEvaluation(&b, format, keys)
		if err != nil {
			t.Fatal(err)
		}
		if diff := cmp.Diff(ev, got); diff != "" {
			t.Errorf("%s evaluation (-want,+got):\n%s", format, diff)
		}
	}
	if err := CheckKeys([]string{"hierarchy_level", "item"}); err == nil {
		t.Error("a key column named hierarchy_level was accepted")
	}
}
