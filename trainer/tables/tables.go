package tables

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"
)

// Header describes the variable columns of a forecasts table.
type Header struct {
	// Keys are the series key column names (see CheckKeys).
	Keys []string
	// Quantiles are the probability levels in (0,1), strictly increasing; each is a column
	// named by QuantileColumn.
	Quantiles []float64
}

// ForecastRow is one forecast period of one series.
type ForecastRow struct {
	// Key is the series key (ingest.JoinKey of the key cells).
	Key    string
	Period time.Time
	// Step is the horizon step, 1 for the first forecast period.
	Step  int
	Model string
	Mean  float64
	// Quantiles holds one value per Header.Quantiles level.
	Quantiles []float64
	// CarriedRuns is 0 for a forecast made by the run that wrote the table; k >= 1 marks a
	// forecast carried forward, series by series, through k runs in a row that rejected the
	// series (pipeline: per-series carry-forward, up to publish.maxCarriedRuns), and
	// CarriedFrom names the run that made it. Written as the carried_runs and carried_from
	// columns, only when some row is carried.
	CarriedRuns int
	CarriedFrom string
	// Level is the hierarchy level of the row's node ("" outside a hierarchy; see
	// colLevel): its key cells outside the level are empty.
	Level string
}

// ModelRow is the chosen model of one series.
type ModelRow struct {
	// Key is the series key (ingest.JoinKey of the key cells).
	Key           string
	Model, Params string
	// BacktestErrors holds the backtest error by horizon step (index 0 is step 1), in Metric.
	BacktestErrors []float64
	Metric         string
	Score          float64
	Notes          string
	// Features lists, by zoo member, the generated features each member of the chosen forecast
	// kept after feature selection (selection.Result.Features); nil when none is built on
	// features. Written as the kept_features column, a JSON object of member name to feature
	// names, only when some row has features.
	Features map[string][]string
	// Design is the design that forecast the series (trainer/design: a candidate's name such
	// as "ets-theta", "per-series" or "declared") and Segment the segment it was chosen for
	// ("monthly/smooth/long"). Written as the design and segment columns, only when some row
	// has a design. DesignBy says where the segment's design was chosen: "plan" (once for
	// the run, on a sample of the portfolio) or "shard" (by the shard on its own series, for
	// a segment the plan's sample did not hold); written as the design_chosen_by column after
	// segment, only when some row has one.
	Design, Segment, DesignBy string
	// Backtest is how the published quantiles fared on the series' own rolling-origin
	// backtest (selection.Result.Backtest, Pinball and Bias as means); written as the
	// backtest_points, backtest_bias, backtest_below_<q> and backtest_pinball_<q> columns
	// (<q> as QuantileColumn), only when some row has one.
	Backtest *Calibration
	// Movement is the mean of |new − previous forecast| / scale over the MovementPoints
	// periods this forecast and the previous run's both cover (pipeline.Movement); written as
	// the movement and movement_points columns, only when some row has movement points.
	Movement       float64
	MovementPoints int
	// Level is the hierarchy level of the row's node, as in ForecastRow.
	Level string
}

// EvaluationRow compares a series' realized error on new actuals with the error the
// previous run expected.
type EvaluationRow struct {
	// Key is the series key (ingest.JoinKey of the key cells).
	Key                string
	Points             int
	Metric             string
	Expected, Realized float64
	Drifted            bool
	PreviousRun        string
	// Calibration is the previous forecast's record on the new actuals (pipeline.Calibrate,
	// over the row's Points; Pinball and Bias as means): written as the bias, below_<q> and
	// pinball_<q> columns, only when some row has one.
	Calibration *Calibration
	// Level is the hierarchy level of the row's node, as in ForecastRow (the last column).
	Level string
}

// RejectedRow is a series that could not be used, with the reason. Key is the series key
// (ingest.JoinKey of the key cells; a cell may be empty when the reason is an empty key cell).
type RejectedRow struct{ Key, Reason string }

// Column names.
const (
	colPeriod   = "period"
	colStep     = "step"
	colModel    = "model"
	colMean     = "mean"
	colParams   = "params"
	colMetric   = "metric"
	colScore    = "score"
	colNotes    = "notes"
	colFeatures = "kept_features"
	colDesign   = "design"
	colSegment  = "segment"
	colDesignBy = "design_chosen_by"
	colPoints   = "points"
	colExpected = "expected"
	colRealized = "realized"
	colDrifted  = "drifted"
	colPrevious = "previous_run"
	colReason   = "reason"
	colMovement = "movement"
	colMovedPts = "movement_points"
	colCarried  = "carried_runs"
	colCarFrom  = "carried_from"
	// colLevel names a row's hierarchy level (runconfig.LevelName: "depot", "item+depot",
	// "total"); written after the key columns when some row has a level. An aggregate's key
	// cells outside its level are empty, which no input series has (an empty key cell rejects
	// it).
	colLevel = "hierarchy_level"
	// errPrefix starts the models table's per-step error columns: err_h1, err_h2, ...
	errPrefix = "err_h"
	// quantilePrefix starts a forecasts table's quantile columns (see QuantileColumn).
	quantilePrefix = "q"
)

// QuantileColumn names the column of level q: "q" followed by the level in percent, written
// in the shortest decimal form (0.1 -> q10, 0.5 -> q50, 0.05 -> q5, 0.975 -> q97.5).
func QuantileColumn(q float64) string {
	pct := math.Round(q*100*1e6) / 1e6 // 0.07*100 is 7.000000000000001 in binary floating point
	return quantilePrefix + strconv.FormatFloat(pct, 'f', -1, 64)
}

// ParseQuantileColumn returns the level a quantile column name stands for.
func ParseQuantileColumn(name string) (float64, bool) {
	s, ok := strings.CutPrefix(name, quantilePrefix)
	if !ok || s == "" || s[0] < '0' || s[0] > '9' {
		return 0, false
	}
	// Parse the percent as a decimal scaled by 1e-2, so "q99.9" gives the double nearest 0.999
	// (99.9/100 would round to 0.9990000000000001).
	q, err := strconv.ParseFloat(s+"e-2", 64)
	if err != nil || !(q > 0 && q < 1) || QuantileColumn(q) != name {
		return 0, false
	}
	return q, true
}

func forecastColumns(h Header, levels bool) ([]column, error) {
	cols, err := keyColumns(h.Keys)
	if err != nil {
		return nil, err
	}
	if levels {
		cols = append(cols, column{colLevel, text})
	}
	cols = append(cols, column{colPeriod, instant}, column{colStep, integer}, column{colModel, text}, column{colMean, number})
	seen := map[string]bool{}
	for i, q := range h.Quantiles {
		if !(q > 0 && q < 1) || (i > 0 && q <= h.Quantiles[i-1]) {
			return nil, fmt.Errorf("quantile %v (index %d) must be in (0,1) and strictly increasing", q, i)
		}
		name := QuantileColumn(q)
		if seen[name] {
			return nil, fmt.Errorf("quantiles %v: two levels share the column %q", h.Quantiles, name)
		}
		seen[name] = true
		cols = append(cols, column{name, number})
	}
	return cols, nil
}

// WriteForecasts writes a forecasts table: the key columns, period, step, model, mean and one
// column per quantile level. Each row must carry len(h.Quantiles) quantiles.
func WriteForecasts(w io.Writer, format string, h Header, rows []ForecastRow) error {
	levels := slices.ContainsFunc(rows, func(r ForecastRow) bool { return r.Level != "" })
	cols, err := forecastColumns(h, levels)
	if err != nil {
		return fmt.Errorf("tables: forecasts: %w", err)
	}
	carried := slices.ContainsFunc(rows, func(r ForecastRow) bool { return r.CarriedRuns != 0 })
	if carried {
		cols = append(cols, column{colCarried, integer}, column{colCarFrom, text})
	}
	g := grid{cols: cols, rows: make([][]cell, len(rows))}
	ks := keySplitter{n: len(h.Keys)}
	for i, r := range rows {
		if r.CarriedRuns < 0 || (r.CarriedRuns == 0) != (r.CarriedFrom == "") {
			return fmt.Errorf("tables: forecasts row %d (series %q step %d): carried %d runs from %q: a carried row needs both, a fresh one neither",
				i, r.Key, r.Step, r.CarriedRuns, r.CarriedFrom)
		}
		if len(r.Quantiles) != len(h.Quantiles) {
			return fmt.Errorf("tables: forecasts row %d (series %q step %d): %d quantiles, header has %d",
				i, r.Key, r.Step, len(r.Quantiles), len(h.Quantiles))
		}
		c, err := ks.appendCells(make([]cell, 0, len(cols)), r.Key)
		if err != nil {
			return fmt.Errorf("tables: forecasts row %d: %w", i, err)
		}
		if levels {
			c = append(c, cell{s: r.Level})
		}
		c = append(c, cell{t: r.Period}, cell{n: int64(r.Step)}, cell{s: r.Model}, cell{f: r.Mean})
		for _, q := range r.Quantiles {
			c = append(c, cell{f: q})
		}
		if carried {
			c = append(c, cell{n: int64(r.CarriedRuns)}, cell{s: r.CarriedFrom})
		}
		g.rows[i] = c
	}
	return wrap("forecasts", write(w, format, g))
}

// ReadForecasts reads a table written by WriteForecasts with the key columns keys (columns in
// any order).
func ReadForecasts(r io.Reader, format string, keys []string) (Header, []ForecastRow, error) {
	if err := CheckKeys(keys); err != nil {
		return Header{}, nil, wrap("forecasts", err)
	}
	g, err := read(r, format, "forecasts", func(name string) (kind, bool) {
		if isKeyColumn(keys, name) {
			return text, true
		}
		switch name {
		case colModel, colCarFrom, colLevel:
			return text, true
		case colCarried:
			return integer, true
		case colPeriod:
			return instant, true
		case colStep:
			return integer, true
		case colMean:
			return number, true
		}
		_, ok := ParseQuantileColumn(name)
		return number, ok
	})
	if err != nil {
		return Header{}, nil, err
	}
	pos, err := g.need(colPeriod, colStep, colModel, colMean)
	if err != nil {
		return Header{}, nil, wrap("forecasts", err)
	}
	kr, err := keysOf(g, keys)
	if err != nil {
		return Header{}, nil, wrap("forecasts", err)
	}
	type qcol struct {
		level float64
		at    int
	}
	var qs []qcol
	for i, c := range g.cols {
		if q, ok := ParseQuantileColumn(c.name); ok {
			qs = append(qs, qcol{q, i})
		}
	}
	sort.Slice(qs, func(a, b int) bool { return qs[a].level < qs[b].level })
	h := Header{Keys: slices.Clone(keys)}
	for _, q := range qs {
		h.Quantiles = append(h.Quantiles, q.level)
	}
	if _, err := forecastColumns(h, false); err != nil {
		return Header{}, nil, wrap("forecasts", err)
	}
	carAt, withCarried := pos[colCarried]
	fromAt, withFrom := pos[colCarFrom]
	if withCarried != withFrom {
		return Header{}, nil, fmt.Errorf("tables: forecasts: columns %s and %s come together", colCarried, colCarFrom)
	}
	out := make([]ForecastRow, 0, len(g.rows))
	for i, c := range g.rows {
		key, ok := kr.key(c)
		if !ok {
			continue
		}
		row := ForecastRow{Key: key, Period: c[pos[colPeriod]].t, Step: int(c[pos[colStep]].n),
			Model: c[pos[colModel]].s, Mean: c[pos[colMean]].f}
		if withCarried {
			row.CarriedRuns, row.CarriedFrom = int(c[carAt].n), c[fromAt].s
			if row.CarriedRuns < 0 || (row.CarriedRuns == 0) != (row.CarriedFrom == "") {
				return Header{}, nil, fmt.Errorf("tables: forecasts row %d (series %q): carried %d runs from %q", i+1, key, row.CarriedRuns, row.CarriedFrom)
			}
		}
		if at, ok := pos[colLevel]; ok {
			row.Level = c[at].s
		}
		if len(qs) > 0 {
			row.Quantiles = make([]float64, len(qs))
			for j, q := range qs {
				row.Quantiles[j] = c[q.at].f
			}
		}
		out = append(out, row)
	}
	return h, out, nil
}

// WriteModels writes a models table: the key columns keys, model, params, metric, score,
// err_h1..err_hN, notes, where N is the longest BacktestErrors; a shorter row leaves its last
// columns absent. When any row has a Design, columns design and segment follow notes (then
// design_chosen_by, when any row has a DesignBy). When
// any row has Features, a last column kept_features holds each row's as a JSON object
// ({"Lasso":["covariate:promo","lag:1"]}, members sorted; empty for a row without).
func WriteModels(w io.Writer, format string, keys []string, rows []ModelRow) error {
	steps, withFeatures, withDesign, withMovement, withLevel, withBy := 0, false, false, false, false, false
	for _, r := range rows {
		withBy = withBy || r.DesignBy != ""
		withLevel = withLevel || r.Level != ""
		steps = max(steps, len(r.BacktestErrors))
		withFeatures = withFeatures || len(r.Features) > 0
		withDesign = withDesign || r.Design != ""
		withMovement = withMovement || r.MovementPoints > 0
	}
	btLevels, err := calibrationLevels("models", len(rows), func(i int) *Calibration { return rows[i].Backtest })
	if err != nil {
		return err
	}
	cols, err := keyColumns(keys)
	if err != nil {
		return wrap("models", err)
	}
	if withLevel {
		cols = append(cols, column{colLevel, text})
	}
	cols = append(cols, column{colModel, text}, column{colParams, text}, column{colMetric, text}, column{colScore, number})
	for h := 1; h <= steps; h++ {
		cols = append(cols, column{errPrefix + strconv.Itoa(h), optNumber})
	}
	cols = append(cols, column{colNotes, text})
	if withDesign {
		cols = append(cols, column{colDesign, text}, column{colSegment, text})
	}
	if withBy {
		cols = append(cols, column{colDesignBy, text})
	}
	if withFeatures {
		cols = append(cols, column{colFeatures, text})
	}
	if withMovement {
		cols = append(cols, column{colMovement, optNumber}, column{colMovedPts, optNumber})
	}
	if btLevels != nil {
		cols = append(cols, calibrationColumns(backtestPrefix, btLevels, true, false)...)
	}
	g := grid{cols: cols, rows: make([][]cell, len(rows))}
	ks := keySplitter{n: len(keys)}
	for i, r := range rows {
		c, err := ks.appendCells(make([]cell, 0, len(cols)), r.Key)
		if err != nil {
			return fmt.Errorf("tables: models row %d: %w", i, err)
		}
		if withLevel {
			c = append(c, cell{s: r.Level})
		}
		c = append(c, cell{s: r.Model}, cell{s: r.Params}, cell{s: r.Metric}, cell{f: r.Score})
		for h := 0; h < steps; h++ {
			if h < len(r.BacktestErrors) {
				c = append(c, cell{f: r.BacktestErrors[h]})
			} else {
				c = append(c, cell{null: true})
			}
		}
		c = append(c, cell{s: r.Notes})
		if withDesign {
			c = append(c, cell{s: r.Design}, cell{s: r.Segment})
		}
		if withBy {
			c = append(c, cell{s: r.DesignBy})
		}
		if withFeatures {
			f := ""
			if len(r.Features) > 0 {
				b, err := json.Marshal(r.Features)
				if err != nil {
					return wrap("models", err)
				}
				f = string(b)
			}
			c = append(c, cell{s: f})
		}
		if withMovement {
			if r.MovementPoints > 0 {
				c = append(c, cell{f: r.Movement}, cell{f: float64(r.MovementPoints)})
			} else {
				c = append(c, cell{null: true, f: math.NaN()}, cell{null: true, f: math.NaN()})
			}
		}
		if btLevels != nil {
			c = append(c, calibrationCells(r.Backtest, len(btLevels), true, false)...)
		}
		g.rows[i] = c
	}
	return wrap("models", write(w, format, g))
}

// errStep returns h for a column named err_h<h>.
func errStep(name string) (int, bool) {
	s, ok := strings.CutPrefix(name, errPrefix)
	if !ok {
		return 0, false
	}
	h, err := strconv.Atoi(s)
	return h, err == nil && h >= 1 && strconv.Itoa(h) == s
}

// ReadModels reads a table written by WriteModels with the key columns keys. Error columns must
// be err_h1..err_hN without holes; in a row, an absent value may only be followed by absent
// values.
func ReadModels(r io.Reader, format string, keys []string) ([]ModelRow, error) {
	if err := CheckKeys(keys); err != nil {
		return nil, wrap("models", err)
	}
	g, err := read(r, format, "models", func(name string) (kind, bool) {
		if isKeyColumn(keys, name) {
			return text, true
		}
		switch name {
		case colModel, colParams, colMetric, colNotes, colFeatures, colDesign, colSegment, colDesignBy, colLevel:
			return text, true
		case colScore:
			return number, true
		case colMovement, colMovedPts:
			return optNumber, true
		}
		if calibrationKind(backtestPrefix, name) {
			return optNumber, true
		}
		_, ok := errStep(name)
		return optNumber, ok
	})
	if err != nil {
		return nil, err
	}
	pos, err := g.need(colModel, colParams, colMetric, colScore, colNotes)
	if err != nil {
		return nil, wrap("models", err)
	}
	kr, err := keysOf(g, keys)
	if err != nil {
		return nil, wrap("models", err)
	}
	var steps []int // column position of err_h1, err_h2, ...
	for h := 1; ; h++ {
		at, ok := pos[errPrefix+strconv.Itoa(h)]
		if !ok {
			break
		}
		steps = append(steps, at)
	}
	errCols := 0
	for _, c := range g.cols {
		if _, ok := errStep(c.name); ok {
			errCols++
		}
	}
	if errCols != len(steps) {
		return nil, fmt.Errorf("tables: models: error columns are not %s1..%s%d without holes", errPrefix, errPrefix, len(steps))
	}
	bt, withBacktest, err := newCalibrationReader(g, backtestPrefix, true)
	if err != nil {
		return nil, wrap("models", err)
	}
	mvAt, withMovement := pos[colMovement]
	mpAt, withMovedPts := pos[colMovedPts]
	if withMovement != withMovedPts {
		return nil, fmt.Errorf("tables: models: columns %s and %s come together", colMovement, colMovedPts)
	}
	out := make([]ModelRow, 0, len(g.rows))
	for i, c := range g.rows {
		key, ok := kr.key(c)
		if !ok {
			continue
		}
		m := ModelRow{Key: key, Model: c[pos[colModel]].s, Params: c[pos[colParams]].s,
			Metric: c[pos[colMetric]].s, Score: c[pos[colScore]].f, Notes: c[pos[colNotes]].s}
		if at, ok := pos[colDesign]; ok {
			m.Design = c[at].s
		}
		if at, ok := pos[colSegment]; ok {
			m.Segment = c[at].s
		}
		if at, ok := pos[colDesignBy]; ok {
			m.DesignBy = c[at].s
		}
		if at, ok := pos[colLevel]; ok {
			m.Level = c[at].s
		}
		if withBacktest {
			if m.Backtest, err = bt.read(c, 0); err != nil {
				return nil, fmt.Errorf("tables: models row %d (series %q): %s: %w", i+1, m.Key, backtestPrefix+"*", err)
			}
		}
		if withMovement && !c[mvAt].null {
			p := c[mpAt].f
			if c[mpAt].null || !(p >= 1) || p != math.Trunc(p) || p > 1e15 {
				return nil, fmt.Errorf("tables: models row %d (series %q): %s is %v, not a whole number >= 1", i+1, m.Key, colMovedPts, p)
			}
			m.Movement, m.MovementPoints = c[mvAt].f, int(p)
		}
		if at, ok := pos[colFeatures]; ok && c[at].s != "" {
			if err := json.Unmarshal([]byte(c[at].s), &m.Features); err != nil {
				return nil, fmt.Errorf("tables: models row %d (series %q): %s: %w", i+1, m.Key, colFeatures, err)
			}
		}
		for h, at := range steps {
			if c[at].null {
				for _, later := range steps[h:] {
					if !c[later].null {
						return nil, fmt.Errorf("tables: models row %d (series %q): %s%d absent but a later step is set", i+1, m.Key, errPrefix, h+1)
					}
				}
				break
			}
			m.BacktestErrors = append(m.BacktestErrors, c[at].f)
		}
		out = append(out, m)
	}
	return out, nil
}

var evaluationColumns = []column{{colPoints, integer}, {colMetric, text}, {colExpected, number},
	{colRealized, number}, {colDrifted, flag}, {colPrevious, text}}

// WriteEvaluation writes an evaluation table: the key columns keys, points, metric, expected,
// realized, drifted, previous_run and, when some row has a Calibration, bias, below_<q> and
// pinball_<q> per level (<q> as QuantileColumn; absent for a row without).
func WriteEvaluation(w io.Writer, format string, keys []string, rows []EvaluationRow) error {
	levels, err := calibrationLevels("evaluation", len(rows), func(i int) *Calibration { return rows[i].Calibration })
	if err != nil {
		return err
	}
	cols := evaluationColumns
	withPromised := false
	for _, r := range rows {
		withPromised = withPromised || (r.Calibration != nil && r.Calibration.Promised != nil)
	}
	if levels != nil {
		cols = append(slices.Clone(cols), calibrationColumns("", levels, false, withPromised)...)
	}
	withLevel := slices.ContainsFunc(rows, func(r EvaluationRow) bool { return r.Level != "" })
	if withLevel {
		cols = append(slices.Clone(cols), column{colLevel, text})
	}
	g, err := keyedGrid(keys, cols, len(rows), func(i int) (string, []cell) {
		r := rows[i]
		c := []cell{{n: int64(r.Points)}, {s: r.Metric}, {f: r.Expected}, {f: r.Realized}, {b: r.Drifted}, {s: r.PreviousRun}}
		if levels != nil {
			c = append(c, calibrationCells(r.Calibration, len(levels), false, withPromised)...)
		}
		if withLevel {
			c = append(c, cell{s: r.Level})
		}
		return r.Key, c
	})
	if err != nil {
		return wrap("evaluation", err)
	}
	return wrap("evaluation", write(w, format, g))
}

// ReadEvaluation reads a table written by WriteEvaluation with the key columns keys.
func ReadEvaluation(r io.Reader, format string, keys []string) ([]EvaluationRow, error) {
	if err := CheckKeys(keys); err != nil {
		return nil, wrap("evaluation", err)
	}
	g, err := read(r, format, "evaluation", func(n string) (kind, bool) {
		if isKeyColumn(keys, n) {
			return text, true
		}
		for _, c := range evaluationColumns {
			if c.name == n {
				return c.kind, true
			}
		}
		if n == colLevel {
			return text, true
		}
		if n != colPoints && calibrationKind("", n) {
			return optNumber, true
		}
		return 0, false
	})
	if err != nil {
		return nil, err
	}
	names := make([]string, len(evaluationColumns))
	for i, c := range evaluationColumns {
		names[i] = c.name
	}
	pos, err := g.need(names...)
	if err != nil {
		return nil, wrap("evaluation", err)
	}
	kr, err := keysOf(g, keys)
	if err != nil {
		return nil, wrap("evaluation", err)
	}
	cr, withCalibration, err := newCalibrationReader(g, "", false)
	if err != nil {
		return nil, wrap("evaluation", err)
	}
	out := make([]EvaluationRow, 0, len(g.rows))
	for i, c := range g.rows {
		key, ok := kr.key(c)
		if !ok {
			continue
		}
		row := EvaluationRow{Key: key, Points: int(c[pos[colPoints]].n), Metric: c[pos[colMetric]].s,
			Expected: c[pos[colExpected]].f, Realized: c[pos[colRealized]].f, Drifted: c[pos[colDrifted]].b,
			PreviousRun: c[pos[colPrevious]].s}
		if at, ok := pos[colLevel]; ok {
			row.Level = c[at].s
		}
		if withCalibration {
			if row.Calibration, err = cr.read(c, row.Points); err != nil {
				return nil, fmt.Errorf("tables: evaluation row %d (series %q): %w", i+1, key, err)
			}
		}
		out = append(out, row)
	}
	return out, nil
}

var rejectedColumns = []column{{colReason, text}}

// WriteRejected writes a rejected table: the key columns keys, reason. The run layout always
// uses CSV for it, so a person can read it without tools.
func WriteRejected(w io.Writer, format string, keys []string, rows []RejectedRow) error {
	g, err := keyedGrid(keys, rejectedColumns, len(rows), func(i int) (string, []cell) {
		return rows[i].Key, []cell{{s: rows[i].Reason}}
	})
	if err != nil {
		return wrap("rejected", err)
	}
	return wrap("rejected", write(w, format, g))
}

// ReadRejected reads a table written by WriteRejected with the key columns keys.
func ReadRejected(r io.Reader, format string, keys []string) ([]RejectedRow, error) {
	g, pos, kr, err := readFixed(r, format, "rejected", keys, rejectedColumns)
	if err != nil {
		return nil, err
	}
	out := make([]RejectedRow, 0, len(g.rows))
	for _, c := range g.rows {
		if key, ok := kr.key(c); ok {
			out = append(out, RejectedRow{Key: key, Reason: c[pos[colReason]].s})
		}
	}
	return out, nil
}

// keyedGrid builds a table of the key columns keys followed by cols; row(i) gives row i's key
// and its cells of cols.
func keyedGrid(keys []string, cols []column, n int, row func(i int) (string, []cell)) (grid, error) {
	kc, err := keyColumns(keys)
	if err != nil {
		return grid{}, err
	}
	g := grid{cols: append(kc, cols...), rows: make([][]cell, n)}
	ks := keySplitter{n: len(keys)}
	for i := range n {
		key, rest := row(i)
		c, err := ks.appendCells(make([]cell, 0, len(g.cols)), key)
		if err != nil {
			return grid{}, fmt.Errorf("row %d: %w", i, err)
		}
		g.rows[i] = append(c, rest...)
	}
	return g, nil
}

// readFixed reads a table whose columns are the key columns keys and exactly cols (in any
// order).
func readFixed(r io.Reader, format, name string, keys []string, cols []column) (grid, map[string]int, keyReader, error) {
	if err := CheckKeys(keys); err != nil {
		return grid{}, nil, keyReader{}, wrap(name, err)
	}
	g, err := read(r, format, name, func(n string) (kind, bool) {
		if isKeyColumn(keys, n) {
			return text, true
		}
		for _, c := range cols {
			if c.name == n {
				return c.kind, true
			}
		}
		return 0, false
	})
	if err != nil {
		return grid{}, nil, keyReader{}, err
	}
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = c.name
	}
	pos, err := g.need(names...)
	if err != nil {
		return grid{}, nil, keyReader{}, wrap(name, err)
	}
	kr, err := keysOf(g, keys)
	if err != nil {
		return grid{}, nil, keyReader{}, wrap(name, err)
	}
	return g, pos, kr, nil
}

func wrap(table string, err error) error {
	if err == nil || strings.HasPrefix(err.Error(), "tables: ") {
		return err
	}
	return fmt.Errorf("tables: %s: %w", table, err)
}
