package tables

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
)

// Calibration is how one series' quantile and mean forecasts fared on some actuals: over
// Points actuals, Below[j] were at or below the level-Levels[j] quantile, Pinball[j] is the
// mean pinball loss and Bias the mean error forecast − actual, both scaled by the series'
// in-sample mean absolute naive error (the MASE scale). The models table carries the
// published forecast's record on its own backtest (backtest_* columns), the evaluation table
// the previous forecast's record on the new actuals.
//
// An evaluation record also says what the forecast promised: Promised[j] is the share of
// actuals it expected at or below the level-j quantile (its backtest share from the previous
// models table, or the level itself when it had none) and PromisedPoints the backtest points
// that share is over (0 for the level itself); written as promised_points and promised_<q>.
type Calibration struct {
	Levels  []float64
	Points  int
	Below   []int
	Pinball []float64
	Bias    float64

	Promised       []float64
	PromisedPoints int
}

// Column name parts of a calibration record: <prefix>points, <prefix>bias and, per level,
// <prefix>below_<q> and <prefix>pinball_<q> with <q> the level's QuantileColumn (q10, q97.5).
const (
	colBelow       = "below_"
	colPinball     = "pinball_"
	colBias        = "bias"
	colCalPoints   = "points"
	colPromised    = "promised_"
	colPromisedN   = "promised_points"
	backtestPrefix = "backtest_"
)

// calibrationLevels returns the levels of the rows' records (all must be the same), or nil
// when no row has one.
func calibrationLevels(table string, n int, rec func(i int) *Calibration) ([]float64, error) {
	var levels []float64
	seen := false
	for i := range n {
		c := rec(i)
		if c == nil {
			continue
		}
		if len(c.Below) != len(c.Levels) || len(c.Pinball) != len(c.Levels) {
			return nil, fmt.Errorf("tables: %s row %d: calibration has %d levels, %d counts and %d pinball losses", table, i, len(c.Levels), len(c.Below), len(c.Pinball))
		}
		if !seen {
			levels, seen = c.Levels, true
			if err := checkLevels(levels); err != nil {
				return nil, fmt.Errorf("tables: %s row %d: calibration levels: %w", table, i, err)
			}
		} else if !slices.Equal(levels, c.Levels) {
			return nil, fmt.Errorf("tables: %s row %d: calibration levels %v differ from %v", table, i, c.Levels, levels)
		}
	}
	if seen && len(levels) == 0 {
		return nil, fmt.Errorf("tables: %s: calibration without levels", table)
	}
	return levels, nil
}

// calibrationColumns are the columns of a record with the given levels: points (when
// withPoints), bias, then below_ and pinball_ per level, then (when withPromised)
// promised_points and promised_ per level, all optional numbers.
func calibrationColumns(prefix string, levels []float64, withPoints, withPromised bool) (cols []column) {
	defer func() {
		if withPromised {
			cols = append(cols, column{prefix + colPromisedN, optNumber})
			for _, q := range levels {
				cols = append(cols, column{prefix + colPromised + QuantileColumn(q), optNumber})
			}
		}
	}()
	if withPoints {
		cols = append(cols, column{prefix + colCalPoints, optNumber})
	}
	cols = append(cols, column{prefix + colBias, optNumber})
	for _, q := range levels {
		cols = append(cols, column{prefix + colBelow + QuantileColumn(q), optNumber})
	}
	for _, q := range levels {
		cols = append(cols, column{prefix + colPinball + QuantileColumn(q), optNumber})
	}
	return cols
}

// calibrationCells are the cells of c in calibrationColumns' order (absent when c is nil).
func calibrationCells(c *Calibration, levels int, withPoints, withPromised bool) []cell {
	var out []cell
	if c == nil || (withPromised && len(c.Promised) != levels) {
		n := 1 + 2*levels
		if withPoints {
			n++
		}
		if withPromised {
			n += 1 + levels
		}
		for range n {
			out = append(out, cell{null: true, f: math.NaN()})
		}
		return out
	}
	if withPoints {
		out = append(out, cell{f: float64(c.Points)})
	}
	out = append(out, cell{f: c.Bias})
	for _, b := range c.Below {
		out = append(out, cell{f: float64(b)})
	}
	for _, p := range c.Pinball {
		out = append(out, cell{f: p})
	}
	if withPromised {
		out = append(out, cell{f: float64(c.PromisedPoints)})
		for _, p := range c.Promised {
			out = append(out, cell{f: p})
		}
	}
	return out
}

// calibrationKind tells whether name is one of a record's columns under prefix.
func calibrationKind(prefix, name string) bool {
	rest, ok := strings.CutPrefix(name, prefix)
	if !ok {
		return false
	}
	if rest == colBias || rest == colCalPoints || rest == colPromisedN {
		return true
	}
	if q, ok := strings.CutPrefix(rest, colPromised); ok {
		_, ok := ParseQuantileColumn(q)
		return ok
	}
	for _, p := range []string{colBelow, colPinball} {
		if q, ok := strings.CutPrefix(rest, p); ok {
			_, ok := ParseQuantileColumn(q)
			return ok
		}
	}
	return false
}

// calibrationReader reads records from a grid's columns under prefix.
type calibrationReader struct {
	levels         []float64
	points, bias   int // column positions (-1: absent)
	below, pinball []int
	promisedN      int // -1: absent
	promised       []int
}

// newCalibrationReader finds the record columns under prefix; ok is false when the table has
// none. Every level needs both its below_ and pinball_ column, and bias is needed (points too
// when withPoints).
func newCalibrationReader(g grid, prefix string, withPoints bool) (calibrationReader, bool, error) {
	r := calibrationReader{points: -1, bias: -1, promisedN: -1}
	below, pinball, promised := map[float64]int{}, map[float64]int{}, map[float64]int{}
	any := false
	for i, c := range g.cols {
		rest, ok := strings.CutPrefix(c.name, prefix)
		if !ok || !calibrationKind(prefix, c.name) || (rest == colCalPoints && !withPoints) {
			continue
		}
		any = true
		switch {
		case rest == colBias:
			r.bias = i
		case rest == colCalPoints:
			r.points = i
		case rest == colPromisedN:
			r.promisedN = i
		case strings.HasPrefix(rest, colPromised):
			q, _ := ParseQuantileColumn(strings.TrimPrefix(rest, colPromised))
			promised[q] = i
		case strings.HasPrefix(rest, colBelow):
			q, _ := ParseQuantileColumn(strings.TrimPrefix(rest, colBelow))
			below[q] = i
		default:
			q, _ := ParseQuantileColumn(strings.TrimPrefix(rest, colPinball))
			pinball[q] = i
		}
	}
	if !any {
		return r, false, nil
	}
	if r.bias < 0 || (withPoints && r.points < 0) {
		return r, false, fmt.Errorf("calibration columns %s* without %s%s or %s%s", prefix, prefix, colBias, prefix, colCalPoints)
	}
	for q := range below {
		r.levels = append(r.levels, q)
	}
	sort.Float64s(r.levels)
	for _, q := range r.levels {
		p, ok := pinball[q]
		if !ok {
			return r, false, fmt.Errorf("column %s%s%s without %s%s%s", prefix, colBelow, QuantileColumn(q), prefix, colPinball, QuantileColumn(q))
		}
		r.below, r.pinball = append(r.below, below[q]), append(r.pinball, p)
	}
	if len(pinball) != len(below) {
		return r, false, fmt.Errorf("calibration columns %s%s* and %s%s* name different levels", prefix, colPinball, prefix, colBelow)
	}
	if r.promisedN >= 0 || len(promised) > 0 {
		for _, q := range r.levels {
			p, ok := promised[q]
			if !ok || r.promisedN < 0 {
				return r, false, fmt.Errorf("column %s%s%s or %s%s is missing", prefix, colPromised, QuantileColumn(q), prefix, colPromisedN)
			}
			r.promised = append(r.promised, p)
		}
		if len(promised) != len(r.levels) {
			return r, false, fmt.Errorf("calibration columns %s%s* and %s%s* name different levels", prefix, colPromised, prefix, colBelow)
		}
	}
	return r, true, nil
}

// read returns the row's record (nil when its bias is absent); points is the row's count when
// the record has no points column. A count must be a whole number >= 0.
func (r calibrationReader) read(c []cell, points int) (*Calibration, error) {
	if c[r.bias].null {
		return nil, nil
	}
	out := &Calibration{Levels: r.levels, Points: points, Bias: c[r.bias].f, Below: make([]int, len(r.levels)), Pinball: make([]float64, len(r.levels))}
	count := func(x cell, what string) (int, error) {
		if x.null || !(x.f >= 0) || x.f != math.Trunc(x.f) || x.f > 1e15 {
			return 0, fmt.Errorf("%s is %v, not a whole number >= 0", what, x.f)
		}
		return int(x.f), nil
	}
	var err error
	if r.points >= 0 {
		if out.Points, err = count(c[r.points], colCalPoints); err != nil {
			return nil, err
		}
	}
	for j := range r.levels {
		if out.Below[j], err = count(c[r.below[j]], colBelow+QuantileColumn(r.levels[j])); err != nil {
			return nil, err
		}
		if out.Below[j] > out.Points {
			return nil, fmt.Errorf("%s%s is %d, above the %d points", colBelow, QuantileColumn(r.levels[j]), out.Below[j], out.Points)
		}
		if c[r.pinball[j]].null {
			return nil, fmt.Errorf("%s%s is absent", colPinball, QuantileColumn(r.levels[j]))
		}
		out.Pinball[j] = c[r.pinball[j]].f
	}
	if r.promisedN >= 0 && !c[r.promisedN].null {
		if out.PromisedPoints, err = count(c[r.promisedN], colPromisedN); err != nil {
			return nil, err
		}
		out.Promised = make([]float64, len(r.levels))
		for j := range r.levels {
			p := c[r.promised[j]]
			if p.null || !(p.f >= 0 && p.f <= 1) {
				return nil, fmt.Errorf("%s%s is %v, not a share in [0, 1]", colPromised, QuantileColumn(r.levels[j]), p.f)
			}
			out.Promised[j] = p.f
		}
	}
	return out, nil
}

// checkLevels: levels in (0,1), strictly increasing, each with its own column name.
func checkLevels(levels []float64) error {
	seen := map[string]bool{}
	for i, q := range levels {
		if !(q > 0 && q < 1) || (i > 0 && q <= levels[i-1]) {
			return fmt.Errorf("quantile %v (index %d) must be in (0,1) and strictly increasing", q, i)
		}
		if n := QuantileColumn(q); seen[n] {
			return fmt.Errorf("quantiles %v: two levels share the column %q", levels, n)
		} else {
			seen[n] = true
		}
	}
	return nil
}
