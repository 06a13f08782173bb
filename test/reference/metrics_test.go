// Package reference checks the engine against published formulas and worked examples.
package reference

import (
	"math"
	"testing"

	"almanac.dev/almanac/trainer/backtest"
)

// Hand-worked examples. Every expected value below was worked by hand from the definitions
// named beside it; none comes from running this code.
func TestMetricsByHand(t *testing.T) {
	// Actual y, forecast f: errors y−f = 2, −1, 1, −2.
	y := []float64{10, 12, 14, 16}
	f := []float64{8, 13, 13, 18}
	// In-sample history x: naive (m=1) absolute differences 2, 1, 1 -> mean 4/3;
	// squared 4, 1, 1 -> mean 2; seasonal m=2 differences |x3-x1|=3, |x4-x2|=2 -> mean 2.5.
	x := []float64{1, 3, 4, 5}
	cases := []struct {
		name   string
		metric backtest.Metric
		m      int
		want   float64
		source string
	}{
		{"MAE", backtest.MAE, 1, 1.5, "Hyndman & Koehler 2006 sec. 3.1: (2+1+1+2)/4"},
		{"RMSE", backtest.RMSE, 1, math.Sqrt(2.5), "Hyndman & Koehler 2006 sec. 3.1: sqrt((4+1+1+4)/4)"},
		{"MAPE", backtest.MAPE, 1, 25 * (2.0/10 + 1.0/12 + 1.0/14 + 2.0/16), "Hyndman & Koehler 2006 sec. 3.2: 100/4·Σ|e|/|y|"},
		{"sMAPE", backtest.SMAPE, 1, 50 * (2.0/18 + 1.0/25 + 1.0/27 + 2.0/34), "M4 Competitor's Guide: 200/4·Σ|e|/(|y|+|f|)"},
		{"MASE m=1", backtest.MASE, 1, 1.5 / (4.0 / 3), "Hyndman & Koehler 2006 eq. (5)-(6): MAE 1.5 over naive scale 4/3"},
		{"MASE m=2", backtest.MASE, 2, 1.5 / 2.5, "Hyndman & Koehler 2006 sec. 4, seasonal scale 2.5"},
		{"RMSSE", backtest.RMSSE, 1, math.Sqrt(2.5 / 2), "M5 Competitor's Guide eq. (1): sqrt(MSE 2.5 / scale 2)"},
		{"WAPE", backtest.WAPE, 1, 100 * 6.0 / 52, "Kolassa & Schütz 2007: 100·6/52"},
		{"Bias", backtest.Bias, 1, 0, "mean(f−y) = (−2+1−1+2)/4, common practice"},
	}
	for _, c := range cases {
		got := backtest.Score(c.metric, y, f, x, c.m)
		if math.Abs(got-c.want) > 1e-12 {
			t.Errorf("%s (%s): got %.15g, want %.15g", c.name, c.source, got, c.want)
		}
	}
}

// Pinball loss at τ = 0.9 for q = 10 against y = 12 (under) and 7 (over):
// 0.9·2 = 1.8 and 0.1·3 = 0.3, mean 1.05 (Koenker & Bassett 1978 check function; M5
// uncertainty guide eq. (2)). Coverage of [9,11] for y = 8, 10, 11: 2 of 3 inside.
func TestQuantileMetricsByHand(t *testing.T) {
	if got := backtest.Pinball(0.9, []float64{12, 7}, []float64{10, 10}); math.Abs(got-1.05) > 1e-12 {
		t.Errorf("pinball: got %v, want 1.05", got)
	}
	lo, hi := []float64{9, 9, 9}, []float64{11, 11, 11}
	if got := backtest.Coverage([]float64{8, 10, 11}, lo, hi); math.Abs(got-2.0/3) > 1e-12 {
		t.Errorf("coverage: got %v, want 2/3", got)
	}
}

// Undefined cases return NaN: MASE with a constant history (scale 0, Hyndman & Koehler 2006
// note the measure is undefined then) and MAPE with a zero actual. sMAPE's 0/0 term (y = f =
// 0) is defined as 0 by our choice (an exact forecast; backtest.SymmetricMAPE), so a series
// of zeros forecast as zeros scores 0, not NaN.
func TestMetricsUndefined(t *testing.T) {
	if v := backtest.Score(backtest.MASE, []float64{1}, []float64{2}, []float64{5, 5, 5}, 1); !math.IsNaN(v) {
		t.Errorf("MASE with zero scale: got %v, want NaN", v)
	}
	if v := backtest.Score(backtest.MAPE, []float64{0, 1}, []float64{1, 1}, nil, 1); !math.IsNaN(v) {
		t.Errorf("MAPE with zero actual: got %v, want NaN", v)
	}
	if v := backtest.Score(backtest.SMAPE, []float64{0}, []float64{0}, nil, 1); v != 0 {
		t.Errorf("sMAPE 0/0: got %v, want 0", v)
	}
}
