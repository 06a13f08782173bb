package report

import (
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"testing"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"almanac.dev/almanac/trainer/tables"
)

// svgHeight and svgText read what writeSVG's SVG writer (gonum/plot's vgsvg) produces: the
// root's height in points, and each text's baseline height from the image's bottom edge (the
// writer flips the y axis, so a text at y = -v sits v points above the bottom); a text in a
// rotated group (the y axis label) has its y in the rotated frame, and group 1 marks it.
var (
	svgHeight = regexp.MustCompile(`<svg width="[0-9.]+pt" height="([0-9.]+)pt"`)
	svgText   = regexp.MustCompile(`(<g transform="rotate\([^)]*\)">\s*)?<text x="[-0-9.]+" y="(-?[0-9.]+)"[^>]*>([^<]*)</text>`)
)

// The legend goes in a strip below the plot (the page's plots drew it over their data before):
// the image grows by the strip, every legend label lies in it, and the title and axis labels
// stay above it; a plot without legend entries keeps its height.
func TestLegendBelowThePlot(t *testing.T) {
	dir := t.TempDir()
	var rows []tables.EvaluationRow
	for i := range 20 {
		e := 0.5 + float64(i)/20
		rows = append(rows, tables.EvaluationRow{Key: strconv.Itoa(i), Expected: e, Realized: e * 1.1, Drifted: i%5 == 0})
	}
	p, err := evaluationPlot("MASE", rows, 1.3)
	if err != nil {
		t.Fatal(err)
	}
	const h = 300
	if err := writeSVG(dir, "eval.svg", "evaluation", p, plotWidth, h); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(dir, "eval.svg"))
	if err != nil {
		t.Fatal(err)
	}
	m := svgHeight.FindSubmatch(b)
	if m == nil {
		t.Fatal("no svg height")
	}
	total, _ := strconv.ParseFloat(string(m[1]), 64)
	strip := total - h
	if strip < 40 {
		t.Fatalf("image height %v: want the plot's %v plus a legend strip of four entries", total, h)
	}
	legend := map[string]bool{"realized = expected": false, "drift threshold (realized = 1.3 × expected)": false,
		"series within the threshold": false, "drifted series": false}
	for _, tm := range svgText.FindAllSubmatch(b, -1) {
		if len(tm[1]) > 0 {
			continue // rotated: the y axis label, left of the data
		}
		y, _ := strconv.ParseFloat(string(tm[2]), 64)
		label, up := string(tm[3]), -y
		if _, ok := legend[label]; ok {
			legend[label] = true
			if up <= 0 || up >= strip {
				t.Errorf("legend label %q at %.1f pt above the bottom: want inside the strip (0, %.1f)", label, up, strip)
			}
		} else if up < strip {
			t.Errorf("plot text %q at %.1f pt above the bottom: want above the legend strip (%.1f)", label, up, strip)
		}
	}
	for label, seen := range legend {
		if !seen {
			t.Errorf("legend label %q not drawn", label)
		}
	}

	bare := newPlot("no legend", "x", "y")
	l, err := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 1}})
	if err != nil {
		t.Fatal(err)
	}
	bare.Add(l)
	if err := writeSVG(dir, "bare.svg", "bare", bare, plotWidth, vg.Length(h)); err != nil {
		t.Fatal(err)
	}
	b, err = os.ReadFile(filepath.Join(dir, "bare.svg"))
	if err != nil {
		t.Fatal(err)
	}
	if m := svgHeight.FindSubmatch(b); m == nil || string(m[1]) != "300" {
		t.Errorf("plot without legend entries: height %q, want 300", m)
	}
}
