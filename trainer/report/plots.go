package report

import (
	"bytes"
	"fmt"
	"html"
	"image/color"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/tables"
)

// Colours of the plots: actuals dark grey, forecast blue, band light blue, origin line orange.
var (
	colActual   = color.RGBA{R: 0x33, G: 0x33, B: 0x33, A: 0xff}
	colForecast = color.RGBA{R: 0x1f, G: 0x5f, B: 0xbf, A: 0xff}
	colBand     = color.RGBA{R: 0xa8, G: 0xc8, B: 0xf0, A: 0xff}
	colInner    = color.RGBA{R: 0x74, G: 0xa4, B: 0xe4, A: 0xff}
	colOrigin   = color.RGBA{R: 0xd9, G: 0x6c, B: 0x00, A: 0xff}
	colBar      = color.RGBA{R: 0x4a, G: 0x7f, B: 0xb5, A: 0xff}
	colGrid     = color.RGBA{R: 0xdd, G: 0xdd, B: 0xdd, A: 0xff}
)

// sans is the plot font: Liberation Sans, which has the metrics of Arial, so the SVG's
// fallback list (see writeSVG) keeps the layout the plot measured.
var sans = font.Font{Typeface: "Liberation", Variant: "Sans"}

// newPlot returns a plot with the report's fonts and a light grid.
func newPlot(title, xLabel, yLabel string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = font.From(sans, 13)
	p.X.Label.Text, p.Y.Label.Text = xLabel, yLabel
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = font.From(sans, 11)
		a.Tick.Label.Font = font.From(sans, 10)
		a.Tick.Marker = numTicks{}
	}
	p.Legend.TextStyle.Font = font.From(sans, 10)
	p.Legend.Padding = vg.Points(2)
	g := plotter.NewGrid()
	g.Vertical.Color, g.Horizontal.Color = colGrid, colGrid
	p.Add(g)
	return p
}

// legendPad is the space above and below the legend strip of writeSVG, and its left margin.
const legendPad = vg.Length(6)

// writeSVG renders p as dir/name with an SVG <title> element (the accessible name, W3C SVG 1.1
// section 5.4) and a font list that falls back to any sans-serif face. The plot takes w x h;
// its legend, if it has entries, goes in a strip of its own below it (the image grows by the
// strip's height), so it never covers data: gonum/plot draws legends inside the data area.
func writeSVG(dir, name, title string, p *plot.Plot, w, h vg.Length) error {
	leg := p.Legend
	var strip vg.Length
	if r := leg.Rectangle(draw.Canvas{}); r.Size().Y > 0 {
		strip = r.Size().Y + 2*legendPad
	}
	c := vgsvg.NewWith(vgsvg.UseWH(w, h+strip))
	full := draw.New(c)
	p.Legend = plot.NewLegend() // no entries: nothing drawn over the data
	p.Legend.TextStyle = leg.TextStyle
	p.Draw(draw.Crop(full, 0, 0, strip, 0))
	p.Legend = leg
	if strip > 0 {
		leg.Top, leg.Left, leg.XOffs, leg.YOffs = true, true, 0, 0
		leg.Draw(draw.Crop(full, legendPad, 0, legendPad, -(h + legendPad)))
	}
	var b bytes.Buffer
	if _, err := c.WriteTo(&b); err != nil {
		return fmt.Errorf("report: %s: %w", name, err)
	}
	s := b.String()
	open := strings.Index(s, "<svg")
	end := strings.IndexByte(s[open:], '>')
	if open < 0 || end < 0 {
		return fmt.Errorf("report: %s: the SVG writer produced no <svg> element", name)
	}
	at := open + end + 1
	s = s[:at] + "\n<title>" + html.EscapeString(title) + "</title>" + s[at:]
	s = strings.ReplaceAll(s, "font-family:Liberation Sans;", "font-family:'Liberation Sans',Arial,Helvetica,sans-serif;")
	return os.WriteFile(filepath.Join(dir, name), []byte(s), 0o644)
}

// unix is the plot's x value of a time.
func unix(t time.Time) float64 { return float64(t.Unix()) }

// dateTicks labels a time axis (x in Unix seconds, UTC) at calendar boundaries: week starts
// for spans under about four months, otherwise month starts every 1, 2, 3, 6 or 12 months,
// with at most about eight labels and unlabelled monthly minor ticks.
type dateTicks struct{}

// Ticks implements plot.Ticker.
func (dateTicks) Ticks(xmin, xmax float64) []plot.Tick {
	lo, hi := time.Unix(int64(xmin), 0).UTC(), time.Unix(int64(xmax), 0).UTC()
	var ticks []plot.Tick
	if hi.Sub(lo) < 120*24*time.Hour {
		day := time.Date(lo.Year(), lo.Month(), lo.Day(), 0, 0, 0, 0, time.UTC)
		step := 7
		if hi.Sub(lo) < 21*24*time.Hour {
			step = 1
		}
		for day.Weekday() != time.Monday && step == 7 {
			day = day.AddDate(0, 0, 1)
		}
		labelEvery := max(1, int(hi.Sub(lo).Hours()/24)/step/8+1)
		for i := 0; !day.After(hi); i++ {
			t := plot.Tick{Value: unix(day)}
			if i%labelEvery == 0 {
				t.Label = day.Format("2 Jan")
			}
			ticks = append(ticks, t)
			day = day.AddDate(0, 0, step)
		}
		return ticks
	}
	months := int(hi.Sub(lo).Hours() / 24 / 30.4)
	every := 12
	for _, e := range []int{1, 2, 3, 6, 12} {
		if months/e <= 8 {
			every = e
			break
		}
	}
	m := time.Date(lo.Year(), lo.Month(), 1, 0, 0, 0, 0, time.UTC)
	if m.Before(lo) {
		m = m.AddDate(0, 1, 0)
	}
	for ; !m.After(hi); m = m.AddDate(0, 1, 0) {
		t := plot.Tick{Value: unix(m)}
		if (int(m.Month())-1)%every == 0 {
			t.Label = m.Format("Jan 2006")
		}
		ticks = append(ticks, t)
	}
	return ticks
}

// numTicks are plot.DefaultTicks with labels free of trailing zeros ("250", not "250.00").
type numTicks struct{}

// Ticks implements plot.Ticker.
func (numTicks) Ticks(lo, hi float64) []plot.Tick {
	ticks := plot.DefaultTicks{}.Ticks(lo, hi)
	for i, t := range ticks {
		if t.Label != "" {
			ticks[i].Label = tickLabel(t.Value)
		}
	}
	return ticks
}

// tickLabel formats a tick value: whole numbers without decimals, others with up to four
// significant digits.
func tickLabel(v float64) string {
	if math.Abs(v) >= 1000 || v == math.Trunc(v) {
		return strconv.FormatFloat(v, 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'g', 4, 64)
}

// Band is the forecast interval drawn around the mean: the outermost quantile levels and, when
// the forecast has them, an inner pair.
type Band struct {
	// Lo and Hi index Forecast.Levels; Lo < 0 means no band (fewer than two levels).
	Lo, Hi int
	// InnerLo and InnerHi index an inner pair (InnerLo < 0: none).
	InnerLo, InnerHi int
}

// bandOf picks the outermost levels below and above 0.5 as the band, and the next pair inside
// as the inner band.
func bandOf(levels []float64) Band {
	b := Band{Lo: -1, Hi: -1, InnerLo: -1, InnerHi: -1}
	var below, above []int
	for i, q := range levels {
		switch {
		case q < 0.5:
			below = append(below, i)
		case q > 0.5:
			above = append(above, i)
		}
	}
	if len(below) == 0 || len(above) == 0 {
		return b
	}
	b.Lo, b.Hi = below[0], above[len(above)-1]
	if len(below) > 1 && len(above) > 1 {
		b.InnerLo, b.InnerHi = below[1], above[len(above)-2]
	}
	return b
}

// Coverage is the share of outcomes expected inside the band, in percent.
func coverage(levels []float64, lo, hi int) float64 {
	return math.Round((levels[hi]-levels[lo])*1000) / 10
}

// BandLabel describes the band between levels lo and hi: "80% band (q10–q90)".
func bandLabel(levels []float64, lo, hi int) string {
	return fmt.Sprintf("%s%% band (%s–%s)", trimFloat(coverage(levels, lo, hi)),
		tables.QuantileColumn(levels[lo]), tables.QuantileColumn(levels[hi]))
}

// trimFloat formats v without trailing zeros.
func trimFloat(v float64) string { return fmt.Sprintf("%.4g", v) }

// seriesPlot draws the last window periods of history, the forecast mean, its band and a
// vertical line at the forecast origin (the last actual).
func seriesPlot(title, yLabel string, hist *series.Series, fc Forecast, window int) (*plot.Plot, error) {
	p := newPlot(title, "", yLabel)
	p.X.Tick.Marker = dateTicks{}
	b := bandOf(fc.Levels)
	// band adds the filled area between levels lo and hi.
	band := func(lo, hi int, c color.Color) error {
		xy := make(plotter.XYs, 0, 2*len(fc.Rows))
		for _, r := range fc.Rows {
			xy = append(xy, plotter.XY{X: unix(r.Period), Y: r.Quantiles[lo]})
		}
		for i := len(fc.Rows) - 1; i >= 0; i-- {
			xy = append(xy, plotter.XY{X: unix(fc.Rows[i].Period), Y: fc.Rows[i].Quantiles[hi]})
		}
		poly, err := plotter.NewPolygon(xy)
		if err != nil {
			return err
		}
		poly.Color, poly.LineStyle.Width = c, 0
		p.Add(poly)
		p.Legend.Add(bandLabel(fc.Levels, lo, hi), poly)
		return nil
	}
	if b.Lo >= 0 && len(fc.Rows) > 0 {
		if err := band(b.Lo, b.Hi, colBand); err != nil {
			return nil, err
		}
		if b.InnerLo >= 0 {
			if err := band(b.InnerLo, b.InnerHi, colInner); err != nil {
				return nil, err
			}
		}
	}
	var origin time.Time
	ymax := 0.0
	if hist != nil && hist.Len() > 0 {
		from := max(0, hist.Len()-window)
		xy := make(plotter.XYs, 0, hist.Len()-from)
		for i := from; i < hist.Len(); i++ {
			v := hist.Values[i]
			if math.IsNaN(v) {
				continue // a gap: the line bridges it; the notes say how many periods were missing
			}
			xy = append(xy, plotter.XY{X: unix(hist.PeriodAt(i)), Y: v})
			ymax = math.Max(ymax, v)
		}
		if len(xy) > 0 {
			l, err := plotter.NewLine(xy)
			if err != nil {
				return nil, err
			}
			l.Color, l.Width = colActual, vg.Points(1.2)
			p.Add(l)
			p.Legend.Add("actual", l)
		}
		origin = hist.PeriodAt(hist.Len() - 1)
	}
	if len(fc.Rows) > 0 {
		xy := make(plotter.XYs, 0, len(fc.Rows)+1)
		if hist != nil && hist.Len() > 0 && !math.IsNaN(hist.Values[hist.Len()-1]) {
			xy = append(xy, plotter.XY{X: unix(origin), Y: hist.Values[hist.Len()-1]})
		}
		for _, r := range fc.Rows {
			xy = append(xy, plotter.XY{X: unix(r.Period), Y: r.Mean})
			ymax = math.Max(ymax, r.Mean)
			if b.Lo >= 0 {
				ymax = math.Max(ymax, r.Quantiles[b.Hi])
			}
		}
		l, err := plotter.NewLine(xy)
		if err != nil {
			return nil, err
		}
		l.Color, l.Width = colForecast, vg.Points(1.8)
		p.Add(l)
		p.Legend.Add("forecast (mean)", l)
	}
	p.Y.Min = 0
	if ymax <= 0 {
		ymax = 1
	}
	p.Y.Max = ymax * 1.05
	if !origin.IsZero() {
		l, err := plotter.NewLine(plotter.XYs{{X: unix(origin), Y: 0}, {X: unix(origin), Y: p.Y.Max}})
		if err != nil {
			return nil, err
		}
		l.Color, l.Width, l.Dashes = colOrigin, vg.Points(1.2), []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(l)
		p.Legend.Add("forecast origin "+origin.Format("2 Jan 2006"), l)
	}
	return p, nil
}

// countBars draws a horizontal bar per count, largest at the top.
func countBars(title, xLabel string, counts []Count) (*plot.Plot, error) {
	p := newPlot(title, xLabel, "")
	vals := make(plotter.Values, len(counts))
	names := make([]string, len(counts))
	for i, c := range counts {
		// NominalY puts the first name at the bottom: reverse, so the largest is on top.
		vals[len(counts)-1-i] = float64(c.Count)
		names[len(counts)-1-i] = fmt.Sprintf("%s (%d)", c.Name, c.Count)
	}
	if err := addBars(p, vals, names); err != nil {
		return nil, err
	}
	return p, nil
}

// addBars adds horizontal bars of vals named by names (bottom to top) to p.
func addBars(p *plot.Plot, vals plotter.Values, names []string) error {
	bars, err := plotter.NewBarChart(vals, vg.Points(14))
	if err != nil {
		return err
	}
	bars.Horizontal, bars.Color, bars.LineStyle.Width = true, colBar, 0
	p.Add(bars)
	p.NominalY(names...)
	p.X.Min = 0
	return nil
}

// familyBars draws the median backtest score per family, with the benchmark line at 1 for the
// scaled metrics.
func familyBars(metric backtest.Metric, fams []FamilyScore) (*plot.Plot, error) {
	var vals plotter.Values
	var names []string
	for i := len(fams) - 1; i >= 0; i-- {
		if fams[i].Scored == 0 {
			continue
		}
		vals = append(vals, fams[i].Median)
		names = append(names, fmt.Sprintf("%s (%d)", fams[i].Family, fams[i].Scored))
	}
	xLabel := "median backtest " + string(metric) + " of the family's series"
	if metric.Scaled() {
		xLabel += " (dashed line: 1.0)"
	}
	p := newPlot("Backtest "+string(metric)+" by chosen model family (median, lower is better)", xLabel, "")
	if len(vals) == 0 {
		return p, nil
	}
	if err := addBars(p, vals, names); err != nil {
		return nil, err
	}
	if metric.Scaled() {
		p.X.Max = math.Max(p.X.Max, 1.1)
		l, err := plotter.NewLine(plotter.XYs{{X: 1, Y: -0.5}, {X: 1, Y: float64(len(vals)) - 0.5}})
		if err != nil {
			return nil, err
		}
		l.Color, l.Dashes = colOrigin, []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(l)
	}
	return p, nil
}

// finite reports whether v is a number other than ±Inf.
func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// evaluationPlot draws each evaluated series' realized error against the error the previous
// run expected, with the line where they are equal and the drift threshold.
func evaluationPlot(metric string, rows []tables.EvaluationRow, threshold float64) (*plot.Plot, error) {
	p := newPlot("Previous forecast: expected vs realized "+metric+" per series",
		"expected "+metric+" (from the backtest)", "realized "+metric+" (on the new actuals)")
	var ok, drifted plotter.XYs
	var vals []float64
	for _, e := range rows {
		if finite(e.Expected) && finite(e.Realized) {
			vals = append(vals, e.Expected, e.Realized)
		}
	}
	// The frame ends a quarter above the 95th percentile of all values, so a few extreme
	// series do not squash the rest; points beyond it are drawn on its edge.
	top := 1.0
	if len(vals) > 0 {
		sort.Float64s(vals)
		top = math.Max(vals[(len(vals)-1)*95/100]*1.25, 1e-9)
	}
	for _, e := range rows {
		if !finite(e.Expected) || !finite(e.Realized) {
			continue
		}
		xy := plotter.XY{X: math.Min(e.Expected, top), Y: math.Min(e.Realized, top)}
		if e.Drifted {
			drifted = append(drifted, xy)
		} else {
			ok = append(ok, xy)
		}
	}
	same, err := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: top, Y: top}})
	if err != nil {
		return nil, err
	}
	same.Color = colActual
	p.Add(same)
	p.Legend.Add("realized = expected", same)
	if threshold > 0 {
		th, err := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: top / threshold, Y: top}})
		if err != nil {
			return nil, err
		}
		th.Color, th.Dashes = colOrigin, []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(th)
		p.Legend.Add(fmt.Sprintf("drift threshold (realized = %s × expected)", trimFloat(threshold)), th)
	}
	for _, set := range []struct {
		xy    plotter.XYs
		label string
		c     color.Color
	}{{ok, "series within the threshold", colForecast}, {drifted, "drifted series", colOrigin}} {
		if len(set.xy) == 0 {
			continue
		}
		s, err := plotter.NewScatter(set.xy)
		if err != nil {
			return nil, err
		}
		s.Color = set.c
		s.GlyphStyle.Color = set.c
		s.GlyphStyle.Radius = vg.Points(2.5)
		s.GlyphStyle.Shape = draw.CircleGlyph{}
		p.Add(s)
		p.Legend.Add(set.label, s)
	}
	p.X.Min, p.Y.Min, p.X.Max, p.Y.Max = 0, 0, top, top
	return p, nil
}
