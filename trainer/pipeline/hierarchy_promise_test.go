package pipeline

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// totalTree is items I0 and I1 under their grand total, reconciled by method, without bands.
func totalTree(method string) *hierarchy {
	return newHierarchy(&runconfig.Config{
		Source:    runconfig.Source{Columns: runconfig.Columns{Series: []string{"item"}}},
		Hierarchy: &runconfig.Hierarchy{Levels: [][]string{{}}, Method: method}})
}

func close12(a, b float64) bool { return math.Abs(a-b) <= 1e-12*math.Max(1, math.Abs(b)) }

// TestReconciledPromiseByHand works the promise of a tree of two bottom series A, B and their
// total T by hand, with 2 selection origins (3 and 2 periods before the end) and 2 steps,
// reconciled by OLS. For S = [1 1; 1 0; 0 1] (rows T, A, B), P = S (S'S)^-1 S' =
// (1/3) [2 1 1; 1 2 -1; 1 -1 2] (Hyndman & Athanasopoulos, Forecasting: Principles and
// Practice, 3rd ed., section 11.3, the OLS reconciliation), so the reconciled errors ẽ = P e of
// the base errors
//
//	origin 1: T [6 3],  A [3 -3], B [0 3]      origin 2: T [-3 3], A [0 6], B [3 0]
//
// are T [5 2], A [4 -2], B [1 4] and T [-1 4], A [-2 5], B [1 -1] (coherent: A + B = T). With
// MASE scales T 2 and 4, A 1 and 2, B 3 and 3 at the two origins, the promise is the mean over
// origins of mean|ẽ| / scale (backtest.Assess's Overall, Hyndman & Koehler 2006 per origin):
// T (7/2/2 + 5/2/4)/2 = 1.1875, A (3 + 1.75)/2 = 2.375, B (5/6 + 1/3)/2 = 7/12; per step the
// pooled mean of |ẽ| / scale over the origins: T 1.375, 1; A 2.5, 2.25; B 1/3, 5/6. The base
// promises (T 1.5, A 2.25, B 2/3) would have been kept before.
func TestReconciledPromiseByHand(t *testing.T) {
	h := totalTree("OLS")
	end := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	node := func(key string, e1, e2 []float64, s1, s2 float64) NodeBase {
		sc1, sc2 := s1, s2
		return NodeBase{Key: key, Level: h.levelOf(key), Mean: []float64{10, 10}, End: end, Metric: "MASE",
			Promise: []PromiseOrigin{
				{Held: 3, Actuals: floats{20, 20}, Errors: e1, Scale: &sc1},
				{Held: 2, Actuals: floats{20, 20}, Errors: e2, Scale: &sc2}}}
	}
	nodes := []NodeBase{
		node("I0", []float64{3, -3}, []float64{0, 6}, 1, 2),
		node("I1", []float64{0, 3}, []float64{3, 0}, 3, 3),
		node(ingest.JoinKey(""), []float64{6, 3}, []float64{-3, 3}, 2, 4),
	}
	tr, err := h.reconcileTree(nodes, series.Weekly)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]promise{
		ingest.JoinKey(""): {1.1875, []float64{1.375, 1}},
		"I0":               {2.375, []float64{2.5, 2.25}},
		"I1":               {7.0 / 12, []float64{1.0 / 3, 5.0 / 6}},
	}
	for key, w := range want {
		got, ok := tr.promise[key]
		if !ok {
			t.Fatalf("%q has no reconciled promise (%s)", key, tr.promises)
		}
		if !close12(got.score, w.score) || len(got.steps) != 2 || !close12(got.steps[0], w.steps[0]) || !close12(got.steps[1], w.steps[1]) {
			t.Errorf("%q: promise %v steps %v, want %v %v", key, got.score, got.steps, w.score, w.steps)
		}
	}
	if want := "0 of 3 nodes kept"; !strings.Contains(tr.promises, want) {
		t.Errorf("note %q, want %q", tr.promises, want)
	}

	// A node without a selection backtest (a version-2 nodes.json, a constant series) keeps
	// its base promise, and the note counts it.
	nodes[1].Promise, nodes[1].Metric = nil, ""
	if tr, err = h.reconcileTree(nodes, series.Weekly); err != nil {
		t.Fatal(err)
	}
	if _, ok := tr.promise["I1"]; ok || !strings.Contains(tr.promises, "1 of 3 nodes kept") {
		t.Errorf("I1 without a promise: %v, note %q", tr.promise["I1"], tr.promises)
	}
}

// TestReconciledBandRecordByHand scores the rebuilt bands of the tree of
// TestReconciledPromiseByHand on its reconciled selection errors ẽ (worked out there). Its
// error backtest is zero at both origins, so every rebuilt band lies on the reconciled mean
// (spread 0, errorBands) and the record counts ẽ against 0 in units of each origin's band
// scale s_i (backtest.QuantilesOnBacktest): u = ẽ / s_i, Below[j] = #{u <= 0}, BiasSum = −Σu,
// PinballSum[j] = Σ ρ_τj(u) with ρ_τ(r) = τr for r >= 0, (τ − 1)r otherwise (Koenker & Bassett
// 1978). With s_i T 2 and 4, A 1 and 2, B 3 and 3:
//
//	T u = 5/2, 1, −1/4, 1:   Below 1, 1; BiasSum −4.25;  PinballSum 0.675, 4.075
//	A u = 4, −2, −1, 5/2:    Below 2, 2; BiasSum −3.5;   PinballSum 3.35, 6.15
//	B u = 1/3, 4/3, 1/3, −1/3: Below 1, 1; BiasSum −5/3; PinballSum 0.5, 11/6
//
// A node without band scales (nodes.json before version 4) gets no record, so its models row
// keeps the one train wrote.
func TestReconciledBandRecordByHand(t *testing.T) {
	h := newHierarchy(&runconfig.Config{QuantilePercents: []int{10, 90},
		Source:    runconfig.Source{Columns: runconfig.Columns{Series: []string{"item"}}},
		Hierarchy: &runconfig.Hierarchy{Levels: [][]string{{}}, Method: "OLS"}})
	end := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)
	node := func(key string, e1, e2 []float64, s1, s2 float64) NodeBase {
		sc1, sc2, sn := s1, s2, 7.0
		return NodeBase{Key: key, Level: h.levelOf(key), Mean: []float64{10, 10}, End: end, Metric: "MASE", BandScale: &sn,
			Backtest: []OriginErrors{{Held: 4, Errors: errorFloats{0, 0}}, {Held: 6, Errors: errorFloats{0, 0}}},
			Promise: []PromiseOrigin{
				{Held: 3, Actuals: floats{20, 20}, Errors: e1, Scale: &sc1, BandScale: &sc1},
				{Held: 2, Actuals: floats{20, 20}, Errors: e2, Scale: &sc2, BandScale: &sc2}}}
	}
	total := ingest.JoinKey("")
	nodes := []NodeBase{
		node("I0", []float64{3, -3}, []float64{0, 6}, 1, 2),
		node("I1", []float64{0, 3}, []float64{3, 0}, 3, 3),
		node(total, []float64{6, 3}, []float64{-3, 3}, 2, 4),
	}
	tr, err := h.reconcileTree(nodes, series.Weekly)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]backtest.QuantileRecord{
		total: {Points: 4, Below: []int{1, 1}, BiasSum: -4.25, PinballSum: []float64{0.675, 4.075}},
		"I0":  {Points: 4, Below: []int{2, 2}, BiasSum: -3.5, PinballSum: []float64{3.35, 6.15}},
		"I1":  {Points: 4, Below: []int{1, 1}, BiasSum: -5.0 / 3, PinballSum: []float64{0.5, 11.0 / 6}},
	}
	for key, w := range want {
		got, ok := tr.band[key]
		if !ok || got.Points != w.Points || len(got.Below) != 2 || got.Below[0] != w.Below[0] || got.Below[1] != w.Below[1] ||
			!close12(got.BiasSum, w.BiasSum) || !close12(got.PinballSum[0], w.PinballSum[0]) || !close12(got.PinballSum[1], w.PinballSum[1]) {
			t.Errorf("%q: band record %+v (present %v), want %+v", key, got, ok, w)
		}
	}
	nodes[1].BandScale = nil
	if tr, err = h.reconcileTree(nodes, series.Weekly); err != nil {
		t.Fatal(err)
	}
	if b, ok := tr.band["I1"]; ok {
		t.Errorf("I1 without band scales has a band record %+v", b)
	}
}

// TestReconciledPromiseOfAnUnchangedForecast: the reconciled promise of a forecast the
// reconciliation leaves unchanged is the base promise. Three series are forecast by selection
// with the error backtest on (as in a hierarchical run), their base forecasts go through
// nodes.json (JSON), and (1) scoring each node's own selection errors (P = I) and (2) BottomUp,
// whose P keeps every bottom row (Hyndman & Athanasopoulos, FPP 3rd ed., section 11.2), give
// back selection's Expected and StepErrors for every metric, to 1e-12 relative (the forecast is
// rebuilt as actual − error). The total gets a promise of its own.
func TestReconciledPromiseOfAnUnchangedForecast(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 21))
	start := time.Date(2024, 1, 1, 0, 0, 0, 0, time.UTC)
	var ss []series.Series
	for i := 0; i < 3; i++ {
		v := make([]float64, 40)
		for k := range v {
			v[k] = 50 + 10*float64(i) + 8*math.Sin(2*math.Pi*float64(k)/4) + 0.3*float64(k) + 4*rng.NormFloat64()
		}
		ss = append(ss, series.Series{Key: fmt.Sprintf("I%d", i), Start: start, Freq: series.Weekly, Values: v})
	}
	ss = append(ss, totalTree("BottomUp").aggregate(ss, totalTree("BottomUp").levels)...)
	for _, metric := range []backtest.Metric{backtest.MASE, backtest.RMSSE, backtest.SMAPE, backtest.MAPE, backtest.MAE} {
		t.Run(string(metric), func(t *testing.T) {
			h := totalTree("BottomUp")
			cfg := selection.Config{Horizon: 3, Metric: metric, SeasonLength: 4, ErrorOrigins: 3,
				Zoo: []models.Spec{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}, {Family: models.FamilyETS}}}
			var nodes []NodeBase
			want := map[string]selection.Result{}
			for _, s := range ss {
				r, err := selection.Forecast(s, cfg)
				if err != nil {
					t.Fatal(err)
				}
				if len(r.Promise) == 0 || math.IsNaN(r.Expected) {
					t.Fatalf("%s: no selection backtest kept (expected %v)", s.Key, r.Expected)
				}
				want[s.Key] = r
				nodes = append(nodes, h.baseOf(s, h.levelOf(s.Key), design.Result{Result: r}))
			}
			b, err := json.Marshal(NodesFile{Version: NodesVersion, Nodes: nodes})
			if err != nil {
				t.Fatal(err)
			}
			var doc NodesFile
			if err := json.Unmarshal(b, &doc); err != nil {
				t.Fatal(err)
			}
			nodes = doc.Nodes
			order := indexes(len(nodes))
			pc := h.errorColumns(nodes, order, series.Weekly, promiseErrors)
			identity, kept := nodePromises(nodes, order, pc, pc.e)
			tr, err := h.reconcileTree(nodes, series.Weekly)
			if err != nil {
				t.Fatal(err)
			}
			if kept != 0 || len(identity) != len(nodes) {
				t.Fatalf("P = I: %d promises, %d kept", len(identity), kept)
			}
			for _, n := range nodes {
				r := want[n.Key]
				check := func(what string, p promise) {
					if !close12(p.score, r.Expected) || len(p.steps) != len(r.StepErrors) {
						t.Fatalf("%s %s: promise %v (%d steps), selection's %v (%d)", what, n.Key, p.score, len(p.steps), r.Expected, len(r.StepErrors))
					}
					for k := range p.steps {
						if !close12(p.steps[k], r.StepErrors[k]) && !(math.IsNaN(p.steps[k]) && math.IsNaN(r.StepErrors[k])) {
							t.Errorf("%s %s step %d: %v, selection's %v", what, n.Key, k+1, p.steps[k], r.StepErrors[k])
						}
					}
				}
				check("P = I", identity[n.Key])
				if n.Level == h.bottom {
					check("BottomUp", tr.promise[n.Key])
				} else if _, ok := tr.promise[n.Key]; !ok {
					t.Errorf("the total has no reconciled promise (%s)", tr.promises)
				}
			}
		})
	}
}

// TestHierarchyPublishesReconciledPromises runs a hierarchy across shards by BottomUp and reads
// the published models tables: every bottom series keeps its base score (its row of P is the
// identity), and every depot total (within a shard) promises the score of the sum of its
// children's selection errors, recomputed here from nodes.json with the depot's own actuals and
// scales (backtest.AssessRecords), not its base score.
func TestHierarchyPublishesReconciledPromises(t *testing.T) {
	cfg := hierarchyRun(t, "flp-hier-promise", [][]string{{"depot"}, {"item"}, {}}, "BottomUp")
	ctx := context.Background()
	if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, cfg.Run)
	keys := cfg.Source.Columns.Series
	base, published, nodes := map[string]float64{}, map[string]float64{}, map[string]NodeBase{}
	changedDepots := 0
	for _, u := range m.Units {
		if u.ID == SpanningUnit {
			continue
		}
		done, bad, err := verifyUnit(ctx, out, cfg.Run, u.ID)
		if err != nil || bad != "" {
			t.Fatal(bad, err)
		}
		own, _ := unitFile(done.Files, TableModels)
		pub, _ := u.file(TableModels)
		if own.Key == pub.Key {
			t.Errorf("unit %s publishes its base models table %s", u.ID, own.Key)
		}
		for f, into := range map[File]map[string]float64{own: base, pub: published} {
			if err := readTable(ctx, out, f, func(r io.Reader) error {
				rows, err := tables.ReadModels(r, formatOf(f), keys)
				for _, row := range rows {
					into[row.Key] = row.Score
				}
				return err
			}); err != nil {
				t.Fatal(err)
			}
		}
		nf, _ := unitFile(done.Files, TableNodes)
		var doc NodesFile
		if err := readTable(ctx, out, nf, func(r io.Reader) error { return json.NewDecoder(r).Decode(&doc) }); err != nil {
			t.Fatal(err)
		}
		for _, n := range doc.Nodes {
			nodes[n.Key] = n
		}
	}
	h := newHierarchy(cfg)
	for key, n := range nodes {
		if n.Level == h.bottom {
			if !close12(published[key], base[key]) {
				t.Errorf("%s: published %v, base %v (BottomUp leaves bottom forecasts unchanged)", key, published[key], base[key])
			}
			continue
		}
		if len(n.Promise) == 0 {
			continue
		}
		errs := make([][]float64, len(n.Promise))
		for o, po := range n.Promise {
			errs[o] = make([]float64, len(po.Errors))
			for _, c := range nodes {
				cells, _ := ingest.SplitKey(c.Key, 2)
				if c.Level != h.bottom || ingest.JoinKey("", cells[1]) != key {
					continue
				}
				for _, co := range c.Promise {
					if co.Held == po.Held && c.End.Equal(n.End) {
						for k := range errs[o] {
							errs[o][k] += co.Errors[k]
						}
					}
				}
			}
		}
		recs := make([]backtest.OriginRecord, len(n.Promise))
		for o, po := range n.Promise {
			recs[o] = po.record()
		}
		want, _ := backtest.AssessRecords(backtest.Metric(n.Metric), recs, errs)
		if !close12(published[key], want) {
			t.Errorf("depot %s: published %v, want the summed children's %v (base %v)", key, published[key], want, base[key])
		}
		if !close12(published[key], base[key]) {
			changedDepots++
		}
	}
	if changedDepots == 0 {
		t.Error("no depot total's promise changed from its base promise")
	}
}

// TestHierarchyReadsNodesVersion2: a run whose shards wrote nodes.json version 2 (trained before
// the upgrade: no selection backtest per node) is still reconciled and published, and every
// unit publishes its own models table, as before.
func TestHierarchyReadsNodesVersion2(t *testing.T) {
	cfg := hierarchyRun(t, "flp-hier-v2", [][]string{{"depot"}, {"item"}, {}}, "MinTShrink")
	ctx := context.Background()
	planAndTrain(t, cfg)
	out := mustOpen(t, cfg.Output.URI)
	p, err := ReadPlan(ctx, out, cfg.Run)
	if err != nil {
		t.Fatal(err)
	}
	own := map[string]File{}
	for _, u := range p.Units {
		done, bad, err := verifyUnit(ctx, out, cfg.Run, u.ID)
		if err != nil || bad != "" {
			t.Fatal(bad, err)
		}
		for i, f := range done.Files {
			switch f.Table {
			case TableModels:
				own[u.ID] = f
			case TableNodes: // rewrite as version 2: no metric, no promise
				var doc NodesFile
				if err := readTable(ctx, out, f, func(r io.Reader) error { return json.NewDecoder(r).Decode(&doc) }); err != nil {
					t.Fatal(err)
				}
				doc.Version = 2
				for j := range doc.Nodes {
					doc.Nodes[j].Metric, doc.Nodes[j].Promise = "", nil
				}
				g, err := putTable(ctx, out, f.Key, TableNodes, func(w io.Writer) error { return json.NewEncoder(w).Encode(doc) })
				if err != nil {
					t.Fatal(err)
				}
				done.Files[i] = g
			}
		}
		if _, err := out.PutJSON(ctx, store.UnitKey(cfg.Run, u.ID, store.UnitDoneName), done); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := RunReconcile(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	if _, err := RunPublish(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	m := checkPublished(t, out, cfg.Run)
	for _, u := range m.Units {
		if u.ID == SpanningUnit {
			continue
		}
		if f, _ := u.file(TableModels); f != own[u.ID] {
			t.Errorf("unit %s publishes models %s, want its own %s", u.ID, f.Key, own[u.ID].Key)
		}
	}
}

// planAndTrain runs plan and every shard's train for cfg.
func planAndTrain(t *testing.T, cfg *runconfig.Config) {
	t.Helper()
	ctx := context.Background()
	ps, err := RunPlan(ctx, cfg, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < ps.Shards; i++ {
		if _, err := RunTrain(ctx, cfg, i, testEnv()); err != nil {
			t.Fatal(err)
		}
	}
}
