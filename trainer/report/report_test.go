package report

import (
	"bytes"
	"context"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"golang.org/x/net/html"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// The test portfolio: Fenwick Lane Provisions, an invented regional distributor, weekly
// demand of a few pantry items and one spare part at the depots harrow, kelso and penrith.
const (
	testRun  = "flp-weekly-20261207"
	prevRun  = "flp-weekly-20261130"
	horizon  = 8
	lastWeek = "2026-11-30" // a Monday, the last week of history
)

var testLevels = []float64{0.1, 0.5, 0.9}

// testSeries is one series of the test portfolio and what its tables say.
type testSeries struct {
	key, model string
	score      float64
	unit       string // b-0000 is trained by testRun, b-0001 is carried forward from prevRun
	// level is the average weekly demand; spare parts issue a few units every few weeks.
	level float64
	spare bool
}

var portfolio = []testSeries{
	{"oat-flakes-1kg/harrow", "ETS", 0.74, "b-0000", 140, false},
	{"oat-flakes-1kg/kelso", "ETS", 0.81, "b-0000", 95, false},
	{"oat-flakes-1kg/penrith", "Theta", 0.92, "b-0000", 60, false},
	{"earl-grey-tea-250g/harrow", "SeasonalNaive", 1.04, "b-0000", 45, false},
	{"earl-grey-tea-250g/kelso", "Theta", math.NaN(), "b-0000", 30, false},
	{"bramble-jam-340g/penrith", "ETS", 0.88, "b-0001", 25, false},
	{"conveyor-belt-clip/kelso", "Croston", 0.97, "b-0001", 2, true},
}

// testKeys are the portfolio's key columns.
var testKeys = []string{"item", "depot"}

// rejectedSeries is the rejected table's one row.
var rejectedSeries = tables.RejectedRow{Key: "gasket-set-6/harrow", Reason: `history.csv line 9: value "n/a" is not a number`}

// demandAt is week w's demand (w = 0 is the first of 104 weeks): a yearly cycle peaking in
// December, or for a spare part 3 units every fifth week.
func (s testSeries) demandAt(w int) float64 {
	if s.spare {
		if w%5 == 2 {
			return 3
		}
		return 0
	}
	return math.Round(s.level * (1 + 0.3*math.Cos(2*math.Pi*float64(w-100)/52)))
}

// fixture is a published run on disk.
type fixture struct {
	dir, outURI string
	out         *store.Store
}

// writeHistory writes the input CSV (columns item, depot, week, units) and returns the
// source URI of its folder.
func writeHistory(t *testing.T, dir string) string {
	t.Helper()
	in := filepath.Join(dir, "in")
	if err := os.MkdirAll(in, 0o755); err != nil {
		t.Fatal(err)
	}
	end, _ := time.Parse(time.DateOnly, lastWeek)
	var b bytes.Buffer
	b.WriteString("item,depot,week,units\n")
	for _, s := range portfolio {
		item, depot, _ := strings.Cut(s.key, "/")
		for w := 0; w < 104; w++ {
			fmt.Fprintf(&b, "%s,%s,%s,%g\n", item, depot, end.AddDate(0, 0, 7*(w-103)).Format(time.DateOnly), s.demandAt(w))
		}
	}
	if err := os.WriteFile(filepath.Join(in, "history.csv"), b.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	return "file://" + in + "/"
}

func testConfig(run, prev, sourceURI, outURI string) *runconfig.Config {
	return &runconfig.Config{
		APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
		Portfolio: "fenwick-lane-weekly", Namespace: "planning", Run: run, Trigger: "Schedule", PreviousRun: prev,
		ScheduledTime: time.Date(2026, 12, 7, 6, 0, 0, 0, time.UTC),
		Source: runconfig.Source{URI: sourceURI, Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true, Partitioning: runconfig.PartitionHashBuckets,
			Columns: runconfig.Columns{Series: testKeys, Date: "week", Value: "units"}},
		Output:           runconfig.Output{URI: outURI, Format: "csv"},
		Horizon:          horizon,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    runconfig.QuantileWidthBacktest,
		Models: []runconfig.Model{{Family: models.FamilySeasonalNaive}, {Family: models.FamilyCroston},
			{Family: models.FamilyTheta}, {Family: models.FamilyETS}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 1, BacktestRefit: runconfig.RefitEveryOrigin, Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:  runconfig.Sharding{TargetSeriesPerShard: 100},
		Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 150, MinEvaluatedPoints: 1},
	}
}

// putTable writes one table and returns its manifest file entry.
func putTable(t *testing.T, ctx context.Context, st *store.Store, key, table string, write func(w io.Writer) error) pipeline.File {
	t.Helper()
	var b bytes.Buffer
	if err := write(&b); err != nil {
		t.Fatal(err)
	}
	if err := st.Put(ctx, key, b.Bytes()); err != nil {
		t.Fatal(err)
	}
	return pipeline.File{Table: table, Key: key, Bytes: int64(b.Len()), SHA256: store.SHA256(b.Bytes())}
}

// writeUnit writes a unit's four tables under run in format (rejected is always CSV) and
// returns their manifest entries.
func writeUnit(t *testing.T, ctx context.Context, st *store.Store, run, unit, format string) []pipeline.File {
	t.Helper()
	end, _ := time.Parse(time.DateOnly, lastWeek)
	var fc []tables.ForecastRow
	var mr []tables.ModelRow
	var ev []tables.EvaluationRow
	var rj []tables.RejectedRow
	for _, s := range portfolio {
		if s.unit != unit {
			continue
		}
		for k := 1; k <= horizon; k++ {
			m := s.demandAt(103 + k)
			if s.spare {
				m = 0.6
			}
			fc = append(fc, tables.ForecastRow{Key: s.key, Period: end.AddDate(0, 0, 7*k), Step: k, Model: s.model,
				Mean: m, Quantiles: []float64{0.75 * m, m, 1.3 * m}})
		}
		notes := "dropped 1 identical duplicate rows"
		if math.IsNaN(s.score) {
			notes = "Theta: too short to backtest (needs 104 observations plus one to test)"
		}
		mr = append(mr, tables.ModelRow{Key: s.key, Model: s.model, Params: s.model + " alpha=0.3",
			BacktestErrors: []float64{s.score, s.score}, Metric: "MASE", Score: s.score, Notes: notes,
			Design: "per-series", Segment: "weekly/smooth/long", DesignBy: "plan"})
		if unit == "b-0000" {
			mr[len(mr)-1].Design, mr[len(mr)-1].DesignBy = "ets-theta", "shard"
		}
		if unit == "b-0000" && !math.IsNaN(s.score) {
			// Each evaluated series had 2 new actuals, one at or below q50 and both at or below
			// q90; the backtest promised 0.125, 0.5 and 0.875 over 8 points. Its forecast moved
			// by half its realized error, except the drifted one, which moved 3 naive steps.
			e := tables.EvaluationRow{Key: s.key, Points: 2, Metric: "MASE", Expected: s.score, Realized: s.score * 1.1, PreviousRun: prevRun,
				Calibration: &tables.Calibration{Levels: testLevels, Points: 2, Below: []int{0, 1, 2}, Pinball: []float64{0.2, 0.4, 0.1}, Bias: 0.25,
					Promised: []float64{0.125, 0.5, 0.875}, PromisedPoints: 8}}
			mr[len(mr)-1].Movement, mr[len(mr)-1].MovementPoints = e.Realized/2, 2
			if s.key == "oat-flakes-1kg/kelso" {
				e.Realized, e.Drifted = 2.1, true
				mr[len(mr)-1].Movement = 3
			}
			ev = append(ev, e)
		}
	}
	if unit == "b-0000" {
		rj = append(rj, rejectedSeries)
	}
	key := func(name string) string { return store.UnitKey(run, unit, name) }
	return []pipeline.File{
		putTable(t, ctx, st, key("forecasts."+format), pipeline.TableForecasts, func(w io.Writer) error {
			return tables.WriteForecasts(w, format, tables.Header{Keys: testKeys, Quantiles: testLevels}, fc)
		}),
		putTable(t, ctx, st, key("models."+format), pipeline.TableModels, func(w io.Writer) error { return tables.WriteModels(w, format, testKeys, mr) }),
		putTable(t, ctx, st, key("evaluation."+format), pipeline.TableEvaluation, func(w io.Writer) error { return tables.WriteEvaluation(w, format, testKeys, ev) }),
		putTable(t, ctx, st, key(store.RejectedName), pipeline.TableRejected, func(w io.Writer) error { return tables.WriteRejected(w, tables.CSV, testKeys, rj) }),
	}
}

// publish writes a published run: config, unit b-0000 by testRun, unit b-0001 by prevRun
// (carried forward), MANIFEST.json and latest.json. With manifest false only the config and
// testRun's unit folder are written (a run that was never published).
func publish(t *testing.T, manifest bool) fixture {
	t.Helper()
	ctx := context.Background()
	dir := t.TempDir()
	src := writeHistory(t, dir)
	f := fixture{dir: dir, outURI: "file://" + filepath.Join(dir, "out")}
	st, err := store.Open(ctx, f.outURI)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	f.out = st
	cfg := testConfig(testRun, prevRun, src, f.outURI)
	if _, err := st.PutJSON(ctx, store.RunKey(testRun, store.ConfigName), cfg); err != nil {
		t.Fatal(err)
	}
	trained := writeUnit(t, ctx, st, testRun, "b-0000", tables.CSV)
	if !manifest {
		return f
	}
	// The earlier run wrote Parquet: the report reads each file in the format its name gives.
	carried := writeUnit(t, ctx, st, prevRun, "b-0001", tables.Parquet)
	m := pipeline.Manifest{Version: pipeline.ManifestVersion, Run: testRun, PreviousRun: prevRun, Partitioning: "hashBuckets", Buckets: 2, Complete: true,
		Units: []pipeline.ManifestUnit{
			{ID: "b-0000", State: pipeline.StateTrained, Source: testRun, Files: trained},
			{ID: "b-0001", State: pipeline.StateCarried, Source: prevRun, Files: carried, Reason: "shard 1 failed"},
		},
		Totals: pipeline.Totals{Units: 2, Trained: 1, CarriedForward: 1}}
	mkey := store.RunKey(testRun, store.ManifestName)
	b, err := st.PutJSON(ctx, mkey, m)
	if err != nil {
		t.Fatal(err)
	}
	if err := st.WriteLatest(ctx, store.Pointer{Run: testRun, Manifest: mkey, ManifestSHA256: store.SHA256(b)}); err != nil {
		t.Fatal(err)
	}
	return f
}

// readModels reads every models table of the store directly, as a check independent of LoadRun.
// (Parquet tables are read too, by the format their name ends in.)
func readModels(t *testing.T, st *store.Store) []tables.ModelRow {
	t.Helper()
	ctx := context.Background()
	objs, err := st.List(ctx, "runs/")
	if err != nil {
		t.Fatal(err)
	}
	var out []tables.ModelRow
	for _, o := range objs {
		format := strings.TrimPrefix(filepath.Ext(o.Key), ".")
		if !strings.HasSuffix(o.Key, "/models."+format) {
			continue
		}
		b, err := st.Get(ctx, o.Key)
		if err != nil {
			t.Fatal(err)
		}
		rows, err := tables.ReadModels(bytes.NewReader(b), format, testKeys)
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, rows...)
	}
	return out
}

// HTML helpers.

func parsePage(t *testing.T, path string) *html.Node {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	doc, err := html.Parse(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	return doc
}

func attr(n *html.Node, name string) string {
	for _, a := range n.Attr {
		if a.Key == name {
			return a.Val
		}
	}
	return ""
}

// all returns the element nodes under n for which keep is true, in document order.
func all(n *html.Node, keep func(*html.Node) bool) []*html.Node {
	var out []*html.Node
	var walk func(*html.Node)
	walk = func(n *html.Node) {
		if n.Type == html.ElementNode && keep(n) {
			out = append(out, n)
		}
		for c := n.FirstChild; c != nil; c = c.NextSibling {
			walk(c)
		}
	}
	walk(n)
	return out
}

func tag(name string) func(*html.Node) bool { return func(n *html.Node) bool { return n.Data == name } }

func byID(t *testing.T, doc *html.Node, id string) *html.Node {
	t.Helper()
	found := all(doc, func(n *html.Node) bool { return attr(n, "id") == id })
	if len(found) != 1 {
		t.Fatalf("%d elements with id %q, want 1", len(found), id)
	}
	return found[0]
}

func text(n *html.Node) string {
	var b strings.Builder
	var walk func(*html.Node)
	walk = func(n *html.Node) {
		if n.Type == html.TextNode {
			b.WriteString(n.Data)
		}
		if n.Type == html.ElementNode && (n.Data == "b" || n.Data == "span" || n.Data == "td" || n.Data == "li" || n.Data == "p") {
			b.WriteByte(' ') // block-like or card parts: keep words apart
		}
		for c := n.FirstChild; c != nil; c = c.NextSibling {
			walk(c)
		}
	}
	walk(n)
	return strings.Join(strings.Fields(b.String()), " ")
}

// tableRows returns the text of each body row's cells.
func tableRows(tbl *html.Node) [][]string {
	var out [][]string
	for _, tr := range all(tbl, tag("tr")) {
		cells := all(tr, tag("td"))
		if len(cells) == 0 {
			continue
		}
		var row []string
		for _, c := range cells {
			row = append(row, text(c))
		}
		out = append(out, row)
	}
	return out
}

// checkSVG checks that path is well-formed XML whose root is an svg element with a non-empty
// title child, and returns the document's text content.
func checkSVG(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("referenced plot: %v", err)
	}
	d := xml.NewDecoder(bytes.NewReader(b))
	var stack []string
	var title, content strings.Builder
	root := ""
	for {
		tok, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("%s is not well-formed XML: %v", path, err)
		}
		switch v := tok.(type) {
		case xml.StartElement:
			if root == "" {
				root = v.Name.Local
			}
			stack = append(stack, v.Name.Local)
		case xml.EndElement:
			stack = stack[:len(stack)-1]
		case xml.CharData:
			if len(stack) == 2 && stack[1] == "title" {
				title.Write(v)
			}
			content.Write(v)
			content.WriteByte(' ')
		}
	}
	if root != "svg" {
		t.Errorf("%s: root element %q, want svg", path, root)
	}
	if strings.TrimSpace(title.String()) == "" {
		t.Errorf("%s: no <title> child of <svg>", path)
	}
	return content.String()
}

func TestReportOfPublishedRun(t *testing.T) {
	f := publish(t, true)
	out := filepath.Join(f.dir, "report")
	res, err := Write(context.Background(), f.outURI, out, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if res.Run != testRun || res.HistoryErr != nil {
		t.Fatalf("result run %q history error %v, want run %q and no error", res.Run, res.HistoryErr, testRun)
	}
	doc := parsePage(t, filepath.Join(out, "index.html"))

	// Every referenced plot exists and is an SVG document with a title; every file written
	// is referenced.
	imgs := all(doc, tag("img"))
	referenced := map[string]bool{}
	for _, img := range imgs {
		src := attr(img, "src")
		if strings.Contains(src, "/") || strings.Contains(src, ":") {
			t.Errorf("img src %q is not a file beside index.html", src)
		}
		if attr(img, "alt") == "" {
			t.Errorf("img %q has no alt text", src)
		}
		checkSVG(t, filepath.Join(out, src))
		referenced[src] = true
	}
	for _, name := range res.Files {
		if name != "index.html" && !referenced[name] {
			t.Errorf("%s written but not referenced by the page", name)
		}
	}
	// Self-contained: no scripts, no external style sheets or fonts.
	if n := len(all(doc, tag("script"))) + len(all(doc, tag("link"))); n != 0 {
		t.Errorf("%d script or link elements, want none", n)
	}

	// Overview counts against the fixture: 7 trained (2 carried forward), 1 rejected.
	for id, want := range map[string]string{"count-series": "8", "count-trained": "7", "count-rejected": "1", "count-carried": "2"} {
		if got := text(byID(t, doc, id)); !strings.HasPrefix(got, want+" ") {
			t.Errorf("%s: %q, want it to start with %s", id, got, want)
		}
	}

	// Design counts by segment, and where each was chosen, equal those of the models tables.
	wantDesigns, gotDesigns := map[string]int{}, map[string]int{}
	for _, m := range readModels(t, f.out) {
		wantDesigns[m.Segment+" "+m.Design+" "+m.DesignBy]++
	}
	for _, row := range tableRows(byID(t, doc, "design-choices")) {
		n, err := strconv.Atoi(row[2])
		if err != nil {
			t.Fatalf("design-choices row %v: %v", row, err)
		}
		gotDesigns[row[0]+" "+row[1]+" "+row[3]] = n
	}
	if len(wantDesigns) < 2 || fmt.Sprint(gotDesigns) != fmt.Sprint(wantDesigns) {
		t.Errorf("design choices %v, models tables %v", gotDesigns, wantDesigns)
	}

	// Chosen-model counts equal those of the models tables.
	want := map[string]int{}
	for _, m := range readModels(t, f.out) {
		want[m.Model]++
	}
	got := map[string]int{}
	for _, row := range tableRows(byID(t, doc, "chosen-models")) {
		n, err := strconv.Atoi(row[1])
		if err != nil {
			t.Fatalf("chosen-models row %v: %v", row, err)
		}
		got[row[0]] = n
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("chosen-model counts in the page %v, in the tables %v", got, want)
	}
	if len(want) != 4 || want["ETS"] != 3 {
		t.Errorf("fixture changed: models %v", want)
	}

	// Rejected reasons appear with their series.
	rows := tableRows(byID(t, doc, "rejected-series"))
	if len(rows) != 1 || rows[0][0] != "gasket-set-6" || rows[0][1] != "harrow" || rows[0][2] != rejectedSeries.Reason {
		t.Errorf("rejected table %v, want %v", rows, rejectedSeries)
	}

	// The series drawn: every series here is among the 12 largest; the spare part is also
	// intermittent (from its history's demand class) and oat-flakes-1kg/kelso drifted.
	figs := all(doc, func(n *html.Node) bool { return attr(n, "class") == "series" })
	if len(figs) != len(portfolio) {
		t.Fatalf("%d series drawn, want %d", len(figs), len(portfolio))
	}
	tags := map[string]string{}
	for i, fig := range figs {
		key := attr(fig, "data-series")
		var ts []string
		for _, s := range all(fig, func(n *html.Node) bool { return strings.HasPrefix(attr(n, "class"), "tag") }) {
			ts = append(ts, text(s))
		}
		tags[key] = strings.Join(ts, ",")
		// The band: the fixture's quantiles are q10 and q90, an 80% band (definition of a
		// quantile: P(Y <= q_tau) = tau, so P(q10 < Y <= q90) = 0.8; common practice).
		band := all(fig, func(n *html.Node) bool { return attr(n, "class") == "band" })
		if len(band) != 1 || !strings.Contains(text(band[0]), "80% band (q10–q90)") || !strings.Contains(text(band[0]), "80% of outcomes") {
			t.Errorf("%s: band caption %q", key, text(band[0]))
		}
		svg := checkSVG(t, filepath.Join(out, attr(all(fig, tag("img"))[0], "src")))
		for _, label := range []string{"80% band (q10–q90)", "actual", "forecast (mean)", "forecast origin 30 Nov 2026", "units per week"} {
			if !strings.Contains(svg, label) {
				t.Errorf("%s: plot has no %q", key, label)
			}
		}
		if i == 0 && key != "oat-flakes-1kg/harrow" {
			t.Errorf("first series drawn %s, want the largest, oat-flakes-1kg/harrow", key)
		}
	}
	for key, want := range map[string]string{"oat-flakes-1kg/kelso": "largest,drifted", "conveyor-belt-clip/kelso": "largest,intermittent", "oat-flakes-1kg/penrith": "largest"} {
		if tags[key] != want {
			t.Errorf("%s tags %q, want %q", key, tags[key], want)
		}
	}
	page := text(doc)
	for _, s := range []string{
		"This forecast was carried forward from run " + prevRun,
		"1 series drifted: their error on the new actuals was more than 1.5 times",
		"misses about 26% smaller than the history's typical change from the same week a year earlier", // oat-flakes-1kg/harrow, MASE 0.74
		"no backtest score", // earl-grey-tea-250g/kelso, NaN
		"ETS (exponential smoothing: level, trend and season", "(2.6× expected): drifted", "Fitted parameters (for analysts): ETS alpha=0.3",
		// How each drawn series' model was chosen, by its models row's design: unit b-0000's
		// rows say ets-theta (one combination for the group) but hold single models, the
		// others per-series.
		"a single model in place of the combination chosen for its group (weekly/smooth/long: ets-theta)",
		"chosen for the lowest backtest MASE of the models tried",
		// The run declares its design Fixed.
		"as the portfolio declares its models and combination, per series by the lowest backtest MASE",
	} {
		if !strings.Contains(page, s) {
			t.Errorf("page lacks %q", s)
		}
	}
	// Calibration: the fixture's evaluated series each put 0, 1 and 2 of 2 actuals at or below
	// q10, q50 and q90, and promised 0.125, 0.5, 0.875.
	cal := tableRows(byID(t, doc, "calibration-levels"))
	if len(cal) != 3 || cal[0][0] != "q10" || cal[0][1] != "0.000" || cal[1][1] != "0.500" || cal[2][1] != "1.000" ||
		cal[0][2] != "0.125" || cal[2][2] != "0.875" || cal[1][5] != "0.400" {
		t.Errorf("calibration table %v", cal)
	}
	if seg := tableRows(byID(t, doc, "calibration-segments")); len(seg) != 1 || seg[0][0] != "weekly/smooth/long" || seg[0][3] != "1.000" || seg[0][4] != "0.750" {
		t.Errorf("calibration segments %v", seg)
	}
	// Moved most: the drifted series moved 3 steps and its actuals missed by 2.1, not enough;
	// the others moved half of what their actuals missed.
	moved := tableRows(byID(t, doc, "moved-most-table"))
	if len(moved) == 0 || moved[0][0] != "oat-flakes-1kg" || moved[0][1] != "kelso" || moved[0][2] != "3.00" || !strings.HasPrefix(moved[0][5], "no:") {
		t.Errorf("moved most %v", moved)
	}
	for _, r := range moved[1:] {
		if !strings.HasPrefix(r[5], "yes:") {
			t.Errorf("moved most row %v, want justified", r)
		}
	}
	idx := tableRows(byID(t, doc, "all-series"))
	if len(idx) != len(portfolio) {
		t.Errorf("index has %d rows, want %d", len(idx), len(portfolio))
	}
	// Key columns are columns of the index, named as in the input, the cells as they were.
	var heads []string
	for _, th := range all(byID(t, doc, "all-series"), tag("th")) {
		heads = append(heads, text(th))
	}
	if len(heads) < 3 || heads[0] != "item" || heads[1] != "depot" {
		t.Errorf("index header %q, want item, depot first", heads)
	}
	for _, row := range idx {
		if !slices.ContainsFunc(portfolio, func(s testSeries) bool { return s.key == row[0]+"/"+row[1] }) {
			t.Errorf("index row %q: item and depot are not a series of the portfolio", row)
		}
	}
	if h3 := all(figs[0], tag("h3")); len(h3) == 0 || !strings.HasPrefix(text(h3[0]), "item oat-flakes-1kg, depot harrow") {
		t.Errorf("first drawn series is titled %q, want it named by its key columns", text(h3[0]))
	}
}

func TestLoadRunKeepsForecastRowsOnlyWhenAsked(t *testing.T) {
	f := publish(t, true)
	ctx := context.Background()
	r, err := LoadRun(ctx, f.out, "")
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Forecasts) != 0 || len(r.Volume) != len(portfolio) || len(r.Origin) != len(portfolio) {
		t.Fatalf("after LoadRun: %d forecasts kept, %d volumes, %d origins; want 0, %d, %d",
			len(r.Forecasts), len(r.Volume), len(r.Origin), len(portfolio), len(portfolio))
	}
	// The fixture's volume of oat-flakes-1kg/harrow is the sum of its 8 forecast means.
	want := 0.0
	for k := 1; k <= horizon; k++ {
		want += portfolio[0].demandAt(103 + k)
	}
	if got := r.Volume[portfolio[0].key]; math.Abs(got-want) > 1e-9 {
		t.Errorf("volume %v, want %v", got, want)
	}
	if got := r.Origin[portfolio[0].key].Format(time.DateOnly); got != "2026-12-07" {
		t.Errorf("origin %s, want the week after %s", got, lastWeek)
	}
	key := "conveyor-belt-clip/kelso" // in the carried-forward Parquet unit
	if err := r.LoadForecasts(ctx, f.out, map[string]bool{key: true}); err != nil {
		t.Fatal(err)
	}
	fc := r.Forecasts[key]
	if len(r.Forecasts) != 1 || len(fc.Rows) != horizon || fmt.Sprint(fc.Levels) != fmt.Sprint(testLevels) {
		t.Fatalf("LoadForecasts kept %d series, %d rows, levels %v", len(r.Forecasts), len(fc.Rows), fc.Levels)
	}
	for i, row := range fc.Rows {
		if row.Step != i+1 {
			t.Errorf("row %d has step %d", i, row.Step)
		}
	}
	if r.Carried[key] != prevRun {
		t.Errorf("%s carried from %q, want %s", key, r.Carried[key], prevRun)
	}
}

func TestReportWithoutManifest(t *testing.T) {
	f := publish(t, false)
	out := filepath.Join(f.dir, "report")
	if _, err := Write(context.Background(), f.outURI, out, Options{}); !errors.Is(err, errNotPublished) {
		t.Fatalf("latest run of an unpublished output: error %v, want errNotPublished", err)
	}
	lim := Limits{Largest: 2}
	res, err := Write(context.Background(), f.outURI, out, Options{Run: testRun, Limits: &lim, IndexCap: 3})
	if err != nil {
		t.Fatal(err)
	}
	doc := parsePage(t, filepath.Join(out, "index.html"))
	page := text(doc)
	if !strings.Contains(page, "This run has no MANIFEST.json") {
		t.Error("no warning about the missing manifest")
	}
	if res.Series != 2 || len(all(doc, func(n *html.Node) bool { return attr(n, "class") == "series" })) != 2 {
		t.Errorf("%d series drawn, want 2", res.Series)
	}
	if got := text(byID(t, doc, "count-trained")); !strings.HasPrefix(got, "5 ") {
		t.Errorf("trained %q, want 5 (unit b-0000 only)", got)
	}
	if rows := tableRows(byID(t, doc, "all-series")); len(rows) != 3 || !strings.Contains(page, "2 more are in the models tables") {
		t.Errorf("index capped at 3: %d rows, page says %q", len(rows), page[strings.Index(page, "All series"):])
	}
}

func TestMainExitCodes(t *testing.T) {
	f := publish(t, true)
	ctx := context.Background()
	dir := filepath.Join(f.dir, "cli")
	var stdout, stderr bytes.Buffer
	if c := run(ctx, []string{"--dir", dir}, &stdout, &stderr); c != exitcode.Config {
		t.Errorf("no --output: exit %d, want %d", c, exitcode.Config)
	}
	if c := run(ctx, []string{"--output", f.outURI, "--run", "no-such-run", "--dir", dir}, &stdout, &stderr); c != exitcode.Config {
		t.Errorf("unknown run: exit %d, want %d (%s)", c, exitcode.Config, stderr.String())
	}
	if c := run(ctx, []string{"--output", f.outURI, "--dir", dir, "--largest", "3", "--intermittent", "0", "--drifted", "0"}, &stdout, &stderr); c != exitcode.OK {
		t.Fatalf("exit %d: %s", c, stderr.String())
	}
	if !strings.Contains(stdout.String(), "run "+testRun+", 3 series drawn") {
		t.Errorf("stdout %q", stdout.String())
	}
	// A table changed after publish no longer matches the manifest's checksum: data error.
	key := store.UnitKey(testRun, "b-0000", "models.csv")
	b, err := f.out.Get(ctx, key)
	if err != nil {
		t.Fatal(err)
	}
	if err := f.out.Put(ctx, key, bytes.Replace(b, []byte("ETS"), []byte("XYZ"), 1)); err != nil {
		t.Fatal(err)
	}
	stderr.Reset()
	if c := run(ctx, []string{"--output", f.outURI, "--dir", dir}, &stdout, &stderr); c != exitcode.Data || !strings.Contains(stderr.String(), "checksum") {
		t.Errorf("changed table: exit %d (%s), want %d naming the checksum", c, stderr.String(), exitcode.Data)
	}
}

func TestReportHistoryUnreadable(t *testing.T) {
	f := publish(t, true)
	if err := os.RemoveAll(filepath.Join(f.dir, "in")); err != nil {
		t.Fatal(err)
	}
	// The source folder is gone: the store opens (file URIs create the folder) and lists no
	// input, so the series have no history; the page says so per series.
	out := filepath.Join(f.dir, "report")
	if _, err := Write(context.Background(), f.outURI, out, Options{}); err != nil {
		t.Fatal(err)
	}
	page := text(parsePage(t, filepath.Join(out, "index.html")))
	if n := strings.Count(page, "No history found for this series"); n != len(portfolio) {
		t.Errorf("%d series say they have no history, want %d", n, len(portfolio))
	}
}

func TestBand(t *testing.T) {
	// Coverage of the band between two quantile levels is their difference (definition of a
	// quantile; common practice).
	for _, c := range []struct {
		levels      []float64
		band, inner string
	}{
		{[]float64{0.1, 0.5, 0.9}, "80% band (q10–q90)", ""},
		{[]float64{0.05, 0.25, 0.5, 0.75, 0.95}, "90% band (q5–q95)", "50% band (q25–q75)"},
		{[]float64{0.025, 0.1, 0.9, 0.975}, "95% band (q2.5–q97.5)", "80% band (q10–q90)"},
		{[]float64{0.2, 0.9}, "70% band (q20–q90)", ""},
	} {
		b := bandOf(c.levels)
		if got := bandLabel(c.levels, b.Lo, b.Hi); got != c.band {
			t.Errorf("%v: band %q, want %q", c.levels, got, c.band)
		}
		inner := ""
		if b.InnerLo >= 0 {
			inner = bandLabel(c.levels, b.InnerLo, b.InnerHi)
		}
		if inner != c.inner {
			t.Errorf("%v: inner band %q, want %q", c.levels, inner, c.inner)
		}
	}
	if b := bandOf([]float64{0.5}); b.Lo >= 0 {
		t.Errorf("median only: band %+v, want none", b)
	}
	if s := BandSentence(nil, "week"); !strings.Contains(s, "no band") {
		t.Errorf("no quantiles: %q", s)
	}
}

func TestDateTicks(t *testing.T) {
	// Two years of weekly data: month ticks, labels every third month, each on the first of
	// its month at midnight UTC.
	lo := time.Date(2024, 12, 9, 0, 0, 0, 0, time.UTC)
	hi := time.Date(2027, 1, 25, 0, 0, 0, 0, time.UTC)
	labels := 0
	for _, tk := range (dateTicks{}).Ticks(unix(lo), unix(hi)) {
		at := time.Unix(int64(tk.Value), 0).UTC()
		if at.Day() != 1 || at.Hour() != 0 || at.Before(lo) || at.After(hi) {
			t.Errorf("tick at %s", at)
		}
		if tk.Label == "" {
			continue
		}
		labels++
		if tk.Label != at.Format("Jan 2006") || (at.Month()-1)%3 != 0 {
			t.Errorf("tick at %s labelled %q", at, tk.Label)
		}
	}
	if labels < 4 || labels > 9 {
		t.Errorf("%d labels over two years, want 4 to 9", labels)
	}
	// Eight weeks: Monday ticks labelled with day and month.
	lo = time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC)
	for _, tk := range (dateTicks{}).Ticks(unix(lo), unix(lo.AddDate(0, 0, 56))) {
		if at := time.Unix(int64(tk.Value), 0).UTC(); at.Weekday() != time.Monday || (tk.Label != "" && tk.Label != at.Format("2 Jan")) {
			t.Errorf("short span: tick %s %q", at, tk.Label)
		}
	}
}
