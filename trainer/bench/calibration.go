package bench

import (
	"fmt"
	"io"
	"strconv"
	"strings"

	"almanac.dev/almanac/trainer/coverage"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// ParseQuantiles reads --quantiles: comma-separated percents strictly between 0 and 100,
// increasing ("10,50,90" gives 0.1, 0.5, 0.9).
func ParseQuantiles(s string) ([]float64, error) {
	if strings.TrimSpace(s) == "" {
		return nil, nil
	}
	var out []float64
	for _, f := range strings.Split(s, ",") {
		p, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
		if err != nil || !(p > 0 && p < 100) || (len(out) > 0 && p/100 <= out[len(out)-1]) {
			return nil, fmt.Errorf("%q: want increasing percents between 0 and 100, such as 10,50,90", s)
		}
		out = append(out, p/100)
	}
	return out, nil
}

// Calibration measures the published quantiles of results on each entry's test data through
// the trainer's own evaluation (pipeline.Calibrate, the test periods taking the place of the
// new actuals, each series promising its share on its own backtest of the training data,
// selection.Result.Backtest), folded as the controller folds shards. Entries without quantiles
// or whose calibration is undefined (zero scale) are left out.
func Calibration(entries []Entry, results []selection.Result, levels []float64) summary.Calibration {
	var sum summary.Calibration
	for i, e := range entries {
		r := results[i]
		if len(r.Quantiles) != len(levels) || len(r.Mean) != e.Horizon {
			continue
		}
		s := e.Series()
		n := len(s.Values)
		actual := series.Series{Key: s.Key, Start: s.Start, Freq: s.Freq, Values: append(append([]float64(nil), e.Train...), e.Test...)}
		var prev []tables.ForecastRow
		for k := range e.Horizon {
			row := tables.ForecastRow{Key: s.Key, Period: actual.PeriodAt(n + k), Step: k + 1, Mean: r.Mean[k]}
			for j := range levels {
				row.Quantiles = append(row.Quantiles, r.Quantiles[j][k])
			}
			prev = append(prev, row)
		}
		var promised *tables.Calibration
		if b := r.Backtest; b.Points > 0 {
			promised = &tables.Calibration{Levels: levels, Points: b.Points, Below: b.Below, Bias: b.BiasSum / float64(b.Points),
				Pinball: make([]float64, len(levels))}
			for j := range levels {
				promised.Pinball[j] = b.PinballSum[j] / float64(b.Points)
			}
		}
		if c, ok := pipeline.Calibrate(actual, prev, levels, false, promised); ok {
			sum.Add(c)
		}
	}
	return sum
}

// writeCalibration prints, per level, the nominal share, the promise, the realized share on the
// test data, the tolerance around the promise and the design effect (coverage.Judge at 5%), and
// whether the realized share is off the promise and off the level.
func writeCalibration(w io.Writer, c summary.Calibration) {
	if c.Points == 0 {
		fmt.Fprintln(w, "  calibration: no series with quantiles and a scale")
		return
	}
	byPromise := coverage.Judge(c, 0.05)
	nominal := c
	nominal.Expected = make([]float64, len(c.Levels))
	for j, tau := range c.Levels {
		nominal.Expected[j] = float64(c.Points) * tau
	}
	nominal.ExpectedVar = make([]float64, len(c.Levels))
	nominal.BacktestSeries, nominal.BacktestPoints = 0, 0
	byLevel := coverage.Judge(nominal, 0.05)
	fmt.Fprintf(w, "  calibration on the test data: %d actuals of %d series (%d promise their backtest share); tolerance at 5%% over %d levels with the design effect\n",
		c.Points, c.Series, c.BacktestSeries, len(c.Levels))
	fmt.Fprintf(w, "  %-7s %8s %9s %9s %10s %6s %12s %12s %9s\n", "level", "nominal", "promised", "realized", "tolerance", "deff", "vs promise", "vs level", "pinball")
	for j, l := range byPromise {
		verdict := func(l coverage.Level) string {
			switch {
			case !l.Judged:
				return "not judged"
			case l.Off:
				return "off"
			}
			return "within"
		}
		fmt.Fprintf(w, "  %-7s %8.3f %9.3f %9.3f %10.3f %6.2f %12s %12s %9.4f\n", tables.QuantileColumn(l.Level), l.Level, l.Expected, l.Realized,
			l.Tolerance, l.DesignEffect, verdict(l), verdict(byLevel[j]), c.PinballSum[j]/float64(c.Points))
	}
	fmt.Fprintf(w, "  bias (forecast - actual)/scale: %.4f on the test data, %.4f on the backtest\n", c.BiasSum/float64(c.Points),
		c.ExpectedBiasSum/float64(max(c.BacktestActuals, 1)))
}
