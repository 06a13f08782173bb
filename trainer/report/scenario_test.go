package report

import (
	"context"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"golang.org/x/net/html"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
)

// EnvKeepReport names a directory the scenario test copies its report into, to look at it.
const EnvKeepReport = "ALMANAC_REPORT_KEEP"

// TestDemoScenario is the demo's data scenario end to end: the Fenwick Lane Provisions
// dataset (trainer/synth: pantry items and intermittent spare parts at several depots, weekly,
// with promotions and two defective series) trained and published twice by the real
// pipeline, four weeks apart, and reported. It checks the page against the generator and the
// pipeline's own manifest, not against the report's reading of the tables.
func TestDemoScenario(t *testing.T) {
	if testing.Short() {
		t.Skip("trains two runs of 90 series")
	}
	ctx := context.Background()
	dir := t.TempDir()
	in := filepath.Join(dir, "in")
	outURI := "file://" + filepath.Join(dir, "out")
	gen := synth.Options{Items: 30, Depots: 3, Frequency: synth.Weekly, SpareShare: 0.2, Bad: 2, Seed: 11}
	end := time.Date(2026, 11, 30, 0, 0, 0, 0, time.UTC)

	cfg := func(run, prev string) *runconfig.Config {
		return &runconfig.Config{
			APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
			Portfolio: "fenwick-lane-weekly", Namespace: "planning", Run: run, Trigger: "Schedule", PreviousRun: prev,
			Source: runconfig.Source{URI: "file://" + in + "/", Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true, Partitioning: runconfig.PartitionHashBuckets,
				Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: "week_start", Value: "units"}},
			Output:           runconfig.Output{URI: outURI, Format: "csv"},
			Horizon:          12,
			QuantilePercents: []int{10, 25, 50, 75, 90},
			QuantileWidth:    runconfig.QuantileWidthBacktest,
			Models: []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}, {Family: models.FamilyCroston},
				{Family: models.FamilySBA}, {Family: models.FamilyTheta}, {Family: models.FamilyETS}},
			Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 4, BacktestRefit: runconfig.RefitEveryOrigin, Design: runconfig.DesignFixed, DesignCostPercent: 500},
			Sharding:  runconfig.Sharding{TargetSeriesPerShard: 40},
			Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 3},
		}
	}
	// Run 1 sees 100 weeks of history, run 2 the same weeks and 4 more (the generator draws
	// each series period by period, so the shared weeks are identical).
	for i, r := range []struct {
		run, prev string
		periods   int
	}{{"flp-20261102", "", 100}, {"flp-20261130", "flp-20261102", 104}} {
		g := gen
		g.Periods, g.End = r.periods, end.AddDate(0, 0, -7*(104-r.periods))
		writeDepots(t, in, g)
		c := cfg(r.run, r.prev)
		c.ScheduledTime = g.End.AddDate(0, 0, 7)
		if _, err := pipeline.RunLocal(ctx, c, pipeline.Env{Now: func() time.Time { return c.ScheduledTime }, Workers: 2}); err != nil {
			t.Fatalf("run %d: %v", i+1, err)
		}
	}

	out := filepath.Join(dir, "report")
	res, err := Write(ctx, outURI, out, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if keep := os.Getenv(EnvKeepReport); keep != "" {
		if err := os.CopyFS(keep, os.DirFS(out)); err != nil {
			t.Fatal(err)
		}
	}
	if res.Run != "flp-20261130" || res.HistoryErr != nil {
		t.Fatalf("run %s, history error %v", res.Run, res.HistoryErr)
	}
	doc := parsePage(t, filepath.Join(out, "index.html"))
	for _, img := range all(doc, tag("img")) {
		checkSVG(t, filepath.Join(out, attr(img, "src")))
	}

	// Counts against the generator: every series is in the input, the defective ones are
	// rejected with a reason naming their defect (synth.Defects: a value that is not a
	// number, a weekly row stamped at noon).
	if got := text(byID(t, doc, "count-series")); !strings.HasPrefix(got, strconv.Itoa(gen.Series())+" ") {
		t.Errorf("series %q, want %d", got, gen.Series())
	}
	rejected := tableRows(byID(t, doc, "rejected-series"))
	if len(rejected) != gen.Bad {
		t.Fatalf("rejected %v, want %d series", rejected, gen.Bad)
	}
	for i, want := range []string{"is not a number", "off the weekly grid"} {
		key := gen.ItemName(i) + " at " + synth.DepotName(0)
		found := false
		for _, row := range rejected { // item, depot, reason: a column per key column
			found = found || (row[0] == gen.ItemName(i) && row[1] == synth.DepotName(0) && strings.Contains(row[2], want))
		}
		if !found {
			t.Errorf("%s (%s) not rejected with %q: %v", key, synth.Defects[i], want, rejected)
		}
	}

	// Accuracy by family against the manifest publish wrote (the pipeline's own counts).
	st, err := store.Open(ctx, outURI)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	var m pipeline.Manifest
	if err := st.GetJSON(ctx, store.RunKey(res.Run, store.ManifestName), &m); err != nil {
		t.Fatal(err)
	}
	fams := map[string]int{}
	for _, row := range tableRows(byID(t, doc, "family-accuracy")) {
		n, _ := strconv.Atoi(row[1])
		fams[row[0]] = n
	}
	if len(fams) != len(m.Totals.Series.Models) {
		t.Errorf("families in the page %v, manifest %v", fams, m.Totals.Series.Models)
	}
	for f, n := range m.Totals.Series.Models {
		if fams[f] != n {
			t.Errorf("family %s: page %d series, manifest %d", f, fams[f], n)
		}
	}

	// The second run evaluated the first on the 4 new weeks.
	if s := text(byID(t, doc, "evaluation-summary")); !strings.Contains(s, "flp-20261102") || !strings.Contains(s, "series drifted") {
		t.Errorf("evaluation summary %q", s)
	}

	// Intermittent picks are the spare parts (the generator's only intermittent items), and
	// the band of these quantiles is q10-q90 with the inner q25-q75.
	inter := 0
	for _, fig := range all(doc, func(n *html.Node) bool { return attr(n, "class") == "series" }) {
		key := attr(fig, "data-series")
		if strings.Contains(strings.Join(tagsOf(fig), ","), WhyIntermittent) {
			inter++
			if !strings.HasPrefix(key, "FLP-SP-") {
				t.Errorf("%s drawn as intermittent, but it is not a spare part", key)
			}
		}
		band := text(all(fig, func(n *html.Node) bool { return attr(n, "class") == "band" })[0])
		if !strings.Contains(band, "80% band (q10–q90)") || !strings.Contains(band, "50% band (q25–q75)") {
			t.Errorf("%s: band %q", key, band)
		}
	}
	if inter != DefaultLimits.Intermittent {
		t.Errorf("%d intermittent series drawn, want %d", inter, DefaultLimits.Intermittent)
	}
}

// tagsOf returns the reason tags of a series figure.
func tagsOf(fig *html.Node) []string {
	var out []string
	for _, s := range all(fig, func(n *html.Node) bool { return strings.HasPrefix(attr(n, "class"), "tag") }) {
		out = append(out, text(s))
	}
	return out
}

// writeDepots writes one CSV per depot of g into dir, replacing earlier files.
func writeDepots(t *testing.T, dir string, g synth.Options) {
	t.Helper()
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	for d := 0; d < g.Depots; d++ {
		f, err := os.Create(filepath.Join(dir, synth.DepotName(d)+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		if err := g.WriteCSV(f, d); err != nil {
			t.Fatal(err)
		}
		if err := f.Close(); err != nil {
			t.Fatal(err)
		}
	}
}
