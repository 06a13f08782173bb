package tables

import (
	"bytes"
	"reflect"
	"strings"
	"testing"
)

// The models table's movement and backtest_* columns and the evaluation table's bias, below_ and
// pinball_ columns are written only when a row has them, sit after the existing columns, and
// round-trip in both formats; a row without leaves them absent.
func TestCalibrationColumnsRoundTrip(t *testing.T) {
	levels := []float64{0.1, 0.5, 0.9}
	models := sampleModels()[:2]
	models[0].Backtest = &Calibration{Levels: levels, Points: 18, Below: []int{2, 9, 17}, Pinball: []float64{0.21, 0.44, 0.19}, Bias: -0.05}
	models[0].Movement, models[0].MovementPoints = 0.375, 4
	ev := []EvaluationRow{
		{Key: key("harbour", "rye-loaf"), Points: 4, Metric: "MASE", Expected: 0.93, Realized: 1.41, PreviousRun: "weekly-20261130",
			Calibration: &Calibration{Levels: levels, Points: 4, Below: []int{0, 3, 4}, Pinball: []float64{0.3, 0.5, 0.1}, Bias: 0.25,
				Promised: []float64{0.125, 0.5, 0.9375}, PromisedPoints: 16}},
		{Key: key("north", "oat-flakes-1kg"), Points: 2, Metric: "MASE", Expected: 1, Realized: 1},
	}
	for _, f := range formats {
		var mb, eb bytes.Buffer
		if err := WriteModels(&mb, f, keys, models); err != nil {
			t.Fatal(err)
		}
		if err := WriteEvaluation(&eb, f, keys, ev); err != nil {
			t.Fatal(err)
		}
		if f == CSV {
			head := strings.SplitN(mb.String(), "\n", 2)[0]
			want := ",notes,movement,movement_points,backtest_points,backtest_bias,backtest_below_q10,backtest_below_q50,backtest_below_q90,backtest_pinball_q10,backtest_pinball_q50,backtest_pinball_q90"
			if !strings.HasSuffix(head, want) {
				t.Errorf("models header %q, want it to end %q", head, want)
			}
			head = strings.SplitN(eb.String(), "\n", 2)[0]
			if want := ",previous_run,bias,below_q10,below_q50,below_q90,pinball_q10,pinball_q50,pinball_q90,promised_points,promised_q10,promised_q50,promised_q90"; !strings.HasSuffix(head, want) {
				t.Errorf("evaluation header %q, want it to end %q", head, want)
			}
		}
		gotM, err := ReadModels(bytes.NewReader(mb.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if !reflect.DeepEqual(gotM[0].Backtest, models[0].Backtest) || gotM[0].Movement != 0.375 || gotM[0].MovementPoints != 4 {
			t.Errorf("%s: models row 0 backtest %+v movement %v/%d", f, gotM[0].Backtest, gotM[0].Movement, gotM[0].MovementPoints)
		}
		if gotM[1].Backtest != nil || gotM[1].MovementPoints != 0 {
			t.Errorf("%s: models row 1 has %+v, movement points %d; want none", f, gotM[1].Backtest, gotM[1].MovementPoints)
		}
		gotE, err := ReadEvaluation(bytes.NewReader(eb.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if !reflect.DeepEqual(gotE[0].Calibration, ev[0].Calibration) || gotE[1].Calibration != nil {
			t.Errorf("%s: evaluation calibration %+v and %+v", f, gotE[0].Calibration, gotE[1].Calibration)
		}
	}
	// Without any record the tables keep their old columns.
	var b bytes.Buffer
	if err := WriteEvaluation(&b, CSV, keys, ev[1:]); err != nil {
		t.Fatal(err)
	}
	if head := strings.SplitN(b.String(), "\n", 2)[0]; head != "depot,item,points,metric,expected,realized,drifted,previous_run" {
		t.Errorf("evaluation header without calibration %q", head)
	}
}

// Broken calibration cells name the row, the series and the column.
func TestBadCalibrationColumns(t *testing.T) {
	head := "depot,item,points,metric,expected,realized,drifted,previous_run,bias,below_q50,pinball_q50\n"
	cases := map[string]string{
		head + "harbour,rye-loaf,4,MASE,1,1,false,r1,0.1,5,0.3\n":                                                                      "below_q50 is 5, above the 4 points",
		head + "harbour,rye-loaf,4,MASE,1,1,false,r1,0.1,1.5,0.3\n":                                                                    "below_q50 is 1.5, not a whole number >= 0",
		"depot,item,points,metric,expected,realized,drifted,previous_run,bias,below_q50\nharbour,rye-loaf,4,MASE,1,1,false,r1,0.1,1\n": "column below_q50 without pinball_q50",
	}
	for in, want := range cases {
		_, err := ReadEvaluation(strings.NewReader(in), CSV, keys)
		if err == nil || !strings.Contains(err.Error(), want) || !strings.Contains(err.Error(), "evaluation") {
			t.Errorf("%q: error %v, want it to contain %q", in, err, want)
		}
	}
	mh := "depot,item,model,params,metric,score,notes,movement,movement_points\n"
	_, err := ReadModels(strings.NewReader(mh+"harbour,rye-loaf,Naive,,MASE,1,,0.5,0\n"), CSV, keys)
	if err == nil || !strings.Contains(err.Error(), "movement_points is 0, not a whole number >= 1") {
		t.Errorf("movement without points: %v", err)
	}
	if err := WriteModels(&bytes.Buffer{}, CSV, keys, []ModelRow{
		{Key: key("a", "b"), Backtest: &Calibration{Levels: []float64{0.5}, Below: []int{1}, Pinball: []float64{1}}},
		{Key: key("a", "c"), Backtest: &Calibration{Levels: []float64{0.9}, Below: []int{1}, Pinball: []float64{1}}},
	}); err == nil || !strings.Contains(err.Error(), "models row 1: calibration levels [0.9] differ from [0.5]") {
		t.Errorf("mixed levels: %v", err)
	}
}
