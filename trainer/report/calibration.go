package report

import (
	"fmt"
	"math"
	"slices"
	"sort"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	calib "almanac.dev/almanac/trainer/coverage"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// reportFalseAlarm is the false-alarm rate of the tolerance the calibration chart draws (5%
// over all levels; the controller's check uses spec.drift.calibrationFalseAlarmPercent, which
// the trainer's configuration does not carry).
const reportFalseAlarm = 0.05

// calibrationSums folds the evaluation rows' calibration records into the sums
// coverage.Judge reads, the way the trainer's shards do (pipeline.Calibrate): per series i with
// n_i actuals, b_ij below the level-j quantile and promised share p_ij over m_i backtest
// points. Rows whose levels differ from the first record's are left out (counted in skipped).
func calibrationSums(rows []tables.EvaluationRow) (c summary.Calibration, skipped int) {
	for _, r := range rows {
		rc := r.Calibration
		if rc == nil || rc.Points == 0 {
			continue
		}
		if c.Series == 0 {
			n := len(rc.Levels)
			c = summary.Calibration{Levels: rc.Levels, Below: make([]int, n), PinballSum: make([]float64, n), BelowPairs: make([]int, n),
				Expected: make([]float64, n), ExpectedVar: make([]float64, n), ExpectedPinballSum: make([]float64, n)}
		}
		if !slices.Equal(c.Levels, rc.Levels) {
			skipped++
			continue
		}
		n := float64(rc.Points)
		c.Series++
		c.Points += rc.Points
		c.Pairs += rc.Points * (rc.Points - 1)
		c.BiasSum += n * rc.Bias
		backtested := rc.PromisedPoints > 0 && len(rc.Promised) == len(rc.Levels)
		if backtested {
			c.BacktestSeries++
			c.BacktestPoints += rc.PromisedPoints
			c.BacktestActuals += rc.Points
		}
		for j, tau := range rc.Levels {
			c.Below[j] += rc.Below[j]
			c.BelowPairs[j] += rc.Below[j] * (rc.Below[j] - 1)
			c.PinballSum[j] += n * rc.Pinball[j]
			p := tau
			if len(rc.Promised) == len(rc.Levels) {
				p = rc.Promised[j]
			}
			c.Expected[j] += n * p
			if backtested {
				c.ExpectedVar[j] += n * n * p * (1 - p) / float64(rc.PromisedPoints)
			}
		}
	}
	return c, skipped
}

// calibrationRow is one line of the calibration table.
type calibrationRow struct {
	Level, Realized, Promised, Tolerance, DesignEffect, Pinball string
	Off, Judged                                                 bool
}

// calibrationPlot draws, per published level, the realized share of new actuals at or below
// the quantile against the level (the diagonal is a perfectly calibrated forecast), the share
// the forecasts promised, and the tolerance around it (coverage.Judge at reportFalseAlarm).
func calibrationPlot(ls []calib.Level) (*plot.Plot, error) {
	p := newPlot("Previous forecast: share of new actuals at or below each quantile",
		"quantile level (the share a calibrated forecast gives)", "share of new actuals at or below the quantile")
	diag, err := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 1}})
	if err != nil {
		return nil, err
	}
	diag.Color = colActual
	p.Add(diag)
	p.Legend.Add("level (calibrated)", diag)
	var realized, promised plotter.XYs
	var lo, hi plotter.XYs
	for _, l := range ls {
		realized = append(realized, plotter.XY{X: l.Level, Y: l.Realized})
		promised = append(promised, plotter.XY{X: l.Level, Y: l.Expected})
		lo = append(lo, plotter.XY{X: l.Level, Y: math.Max(l.Expected-l.Tolerance, 0)})
		hi = append(hi, plotter.XY{X: l.Level, Y: math.Min(l.Expected+l.Tolerance, 1)})
	}
	pl, err := plotter.NewLine(promised)
	if err != nil {
		return nil, err
	}
	pl.Color, pl.Width = colForecast, vg.Points(1.2)
	p.Add(pl)
	p.Legend.Add("promised (backtest share, or the level)", pl)
	for i, set := range []plotter.XYs{lo, hi} {
		l, err := plotter.NewLine(set)
		if err != nil {
			return nil, err
		}
		l.Color, l.Dashes = colForecast, []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(l)
		if i == 0 {
			p.Legend.Add(fmt.Sprintf("tolerance (%.0f%% false alarms, design effect)", 100*reportFalseAlarm), l)
		}
	}
	s, err := plotter.NewScatter(realized)
	if err != nil {
		return nil, err
	}
	s.GlyphStyle.Color, s.GlyphStyle.Radius, s.GlyphStyle.Shape = colOrigin, vg.Points(3), draw.CircleGlyph{}
	p.Add(s)
	p.Legend.Add("realized", s)
	p.X.Min, p.Y.Min, p.X.Max, p.Y.Max = 0, 0, 1, 1
	return p, nil
}

// calibrationRows turns coverage.Judge's levels into table lines (pinball: mean scaled loss).
func calibrationRows(c summary.Calibration, ls []calib.Level) []calibrationRow {
	var out []calibrationRow
	for j, l := range ls {
		r := calibrationRow{Level: tables.QuantileColumn(l.Level), Realized: fmt.Sprintf("%.3f", l.Realized), Promised: fmt.Sprintf("%.3f", l.Expected),
			DesignEffect: fmt.Sprintf("%.2f", l.DesignEffect), Off: l.Off, Judged: l.Judged,
			Pinball: fmt.Sprintf("%.3f", c.PinballSum[j]/float64(c.Points))}
		if l.Judged {
			r.Tolerance = fmt.Sprintf("± %.3f", l.Tolerance)
		}
		out = append(out, r)
	}
	return out
}

// movedRow is one line of the "moved most" table.
type movedRow struct {
	Cells    []string
	Anchor   string
	Movement string
	Points   int
	// Missed is the previous forecast's realized error on the new actuals (the evaluation
	// row's, in its metric), "" without new actuals.
	Missed    string
	Justified string
}

// movedMost lists the n series whose forecast moved most against the previous run's (models
// table movement, mean |new − previous| / scale over the periods both cover), largest first,
// and says whether the new actuals justified the move: when the evaluation metric is MASE, a
// move is called justified when the new actuals missed the previous forecast by at least as
// much as the forecast moved (realized MASE >= movement, both in units of the series' typical
// naive step; our own rule of thumb); a series with no new actuals moved on re-estimation
// alone.
func movedMost(models []tables.ModelRow, evals map[string]*tables.EvaluationRow, names []string, anchors map[string]string, n int) []movedRow {
	var moved []tables.ModelRow
	for _, m := range models {
		if m.MovementPoints > 0 && finite(m.Movement) {
			moved = append(moved, m)
		}
	}
	sort.SliceStable(moved, func(a, b int) bool { return moved[a].Movement > moved[b].Movement })
	var out []movedRow
	for _, m := range moved[:min(n, len(moved))] {
		r := movedRow{Cells: keyCells(names, m.Key), Anchor: anchors[m.Key], Movement: fmt.Sprintf("%.2f", m.Movement), Points: m.MovementPoints}
		e := evals[m.Key]
		switch {
		case e == nil || e.Points == 0 || !finite(e.Realized):
			r.Justified = "no new actuals: the move comes from re-estimation alone"
		case e.Metric != "MASE":
			r.Missed = fmt.Sprintf("%.2f %s", e.Realized, e.Metric)
			r.Justified = "not judged (the evaluation metric is not in naive steps)"
		case e.Realized >= m.Movement:
			r.Missed = fmt.Sprintf("%.2f", e.Realized)
			r.Justified = "yes: the new actuals missed the previous forecast by at least as much"
		default:
			r.Missed = fmt.Sprintf("%.2f", e.Realized)
			r.Justified = "no: the forecast moved more than the new actuals missed it"
		}
		out = append(out, r)
	}
	return out
}

// segmentRow is one line of the worst-calibrated segments table: the widest band's share of
// new actuals against its promise, over the segment's evaluated series.
type segmentRow struct {
	Segment            string
	Series, Points     int
	Realized, Promised string
	gap                float64
}

// worstSegments groups the evaluation records by the models table's segment (the design's
// group: frequency, demand class, history length; "(none)" without one) and returns the n
// segments whose widest band (lowest to highest quantile) covered the new actuals furthest
// from its promise, largest gap first.
func worstSegments(rows []tables.EvaluationRow, segment map[string]string, n int) []segmentRow {
	out := bandHold(rows, segment)
	sort.SliceStable(out, func(i, j int) bool { return out[i].gap > out[j].gap })
	return out[:min(n, len(out))]
}

// bandHold groups the evaluation records by group[key] ("(none)" without one) and returns, per
// group in name order, the share of the new actuals inside the widest published band (lowest to
// highest quantile) against the share the bands promised (their backtest's, else the levels'
// width), pooled over the group's series.
func bandHold(rows []tables.EvaluationRow, group map[string]string) []segmentRow {
	type acc struct {
		series, points int
		in, promised   float64
	}
	by := map[string]*acc{}
	for _, r := range rows {
		rc := r.Calibration
		if rc == nil || rc.Points == 0 || len(rc.Levels) < 2 {
			continue
		}
		k := len(rc.Levels) - 1
		lo, hi := rc.Levels[0], rc.Levels[k]
		if len(rc.Promised) == len(rc.Levels) {
			lo, hi = rc.Promised[0], rc.Promised[k]
		}
		s := group[r.Key]
		if s == "" {
			s = "(none)"
		}
		a := by[s]
		if a == nil {
			a = &acc{}
			by[s] = a
		}
		a.series++
		a.points += rc.Points
		a.in += float64(rc.Below[k] - rc.Below[0])
		a.promised += float64(rc.Points) * (hi - lo)
	}
	var out []segmentRow
	for s, a := range by {
		re, pr := a.in/float64(a.points), a.promised/float64(a.points)
		out = append(out, segmentRow{Segment: s, Series: a.series, Points: a.points, Realized: fmt.Sprintf("%.3f", re), Promised: fmt.Sprintf("%.3f", pr), gap: math.Abs(re - pr)})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Segment < out[j].Segment })
	return out
}
