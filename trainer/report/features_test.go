package report

import (
	"bytes"
	"context"
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
	"almanac.dev/almanac/trainer/tables"
)

// TestPromotionReportListsKeptFeatures: the promotion scenario (trainer/synth) trained by the
// real pipeline with a lasso member reading the promotion plan, then reported. The features
// section must count, per member, exactly what the published models tables say was kept.
func TestPromotionReportListsKeptFeatures(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	in := filepath.Join(dir, "in")
	outURI := "file://" + filepath.Join(dir, "out")
	end := time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC)
	g := synth.Options{Items: 8, Depots: 2, Frequency: synth.Weekly, Periods: 104, End: end, Scenario: synth.ScenarioPromotions, Future: 8, Seed: 5}
	writeDepots(t, in, g)
	cfg := &runconfig.Config{
		APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
		Portfolio: "fenwick-lane-promotions", Namespace: "planning", Run: "flp-promo-20261103", Trigger: "Manual",
		Source: runconfig.Source{URI: "file://" + in + "/", Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true, Partitioning: runconfig.PartitionHashBuckets,
			Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: "week_start", Value: "units", Covariates: []string{"promo_flag", "price"}}},
		Output:           runconfig.Output{URI: outURI, Format: "csv"},
		Horizon:          8,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    runconfig.QuantileWidthBacktest,
		Models:           []runconfig.Model{{Family: models.FamilySeasonalNaive}, {Family: models.FamilyETS}, {Family: models.FamilyLasso}},
		Features: &runconfig.Features{Covariates: []string{"promo_flag", "price"}, CovariateLags: []int{1}, Lags: []int{1},
			Windows: []int{4}, WindowStatistics: []string{"Mean"},
			Selection: &runconfig.FeatureSelection{Filter: "Correlation", Embedded: "Lasso", MaxFeatures: 6}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 2, BacktestRefit: runconfig.RefitEveryOrigin, Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:  runconfig.Sharding{TargetSeriesPerShard: 8},
		Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 8},
	}
	if _, err := pipeline.RunLocal(ctx, cfg, pipeline.Env{Now: func() time.Time { return end.Add(24 * time.Hour) }, Workers: 2}); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "report")
	if _, err := Write(ctx, outURI, out, Options{}); err != nil {
		t.Fatal(err)
	}

	// What the tables say, read directly (not through the report's loader).
	st, err := store.Open(ctx, outURI)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	var m pipeline.Manifest
	if err := st.GetJSON(ctx, store.RunKey(cfg.Run, store.ManifestName), &m); err != nil {
		t.Fatal(err)
	}
	want := map[string]int{} // feature -> series count for the Lasso member
	series := 0
	for _, u := range m.Units {
		for _, f := range u.Files {
			if f.Table != pipeline.TableModels {
				continue
			}
			raw, err := st.Get(ctx, f.Key)
			if err != nil {
				t.Fatal(err)
			}
			rows, err := tables.ReadModels(bytes.NewReader(raw), "csv", cfg.Source.Columns.Series)
			if err != nil {
				t.Fatal(err)
			}
			for _, r := range rows {
				if kept, ok := r.Features["Lasso"]; ok {
					series++
					for _, f := range kept {
						want[f]++
					}
				}
			}
		}
	}
	if series < 8 || want["covariate:promo_flag"] == 0 {
		t.Fatalf("lasso published for %d series, promo kept on %d: the scenario should make the plan matter", series, want["covariate:promo_flag"])
	}

	doc := parsePage(t, filepath.Join(out, "index.html"))
	byID(t, doc, "features")
	tbls := all(doc, func(n *html.Node) bool { return n.Data == "table" && attr(n, "data-member") != "" })
	if len(tbls) != 1 || attr(tbls[0], "data-member") != "Lasso" {
		t.Fatalf("%d kept-features tables, want one for Lasso", len(tbls))
	}
	if c := text(all(tbls[0], func(n *html.Node) bool { return n.Data == "caption" })[0]); !strings.Contains(c, "used for "+strconv.Itoa(series)+" series") {
		t.Errorf("caption %q, want %d series", c, series)
	}
	got := map[string]int{}
	for _, tr := range all(tbls[0], func(n *html.Node) bool { return n.Data == "tr" })[1:] {
		tds := all(tr, func(n *html.Node) bool { return n.Data == "td" })
		n, err := strconv.Atoi(text(tds[1]))
		if err != nil {
			t.Fatal(err)
		}
		got[text(tds[0])] = n
		if text(tds[3]) == "" || text(tds[3]) == text(tds[0]) {
			t.Errorf("feature %s has no words", text(tds[0]))
		}
	}
	if len(got) != len(want) {
		t.Errorf("page lists %v, tables say %v", got, want)
	}
	for f, n := range want {
		if got[f] != n {
			t.Errorf("feature %s: page says %d series, tables %d", f, got[f], n)
		}
	}
}

func TestFeatureWords(t *testing.T) {
	for name, want := range map[string]string{
		"covariate:promo":           "the input column promo (its planned value for the forecast week)",
		"covariate:price:lag1":      "the input column price, one week earlier",
		"lag52":                     "demand 52 weeks earlier",
		"rolling4:mean":             "mean demand over the last 4 weeks",
		"rolling13:std":             "spread (standard deviation) of demand over the last 13 weeks",
		"event:harvest-fair":        "the week of the event harvest-fair",
		"event:harvest-fair:before": "the weeks just before the event harvest-fair",
		"month:Mar":                 "the month is Mar",
		"fourier52.18:sin2":         "a smooth seasonal wave (sin2) repeating every 52.18 weeks",
		"something-new":             "something-new",
	} {
		if got := FeatureWords(name, "week"); got != want {
			t.Errorf("FeatureWords(%q) = %q, want %q", name, got, want)
		}
	}
}
