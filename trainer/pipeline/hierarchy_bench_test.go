package pipeline

import (
	"context"
	"math"
	"slices"
	"sort"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/reconcile"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/synth"
)

// BenchmarkHierarchy measures what reconciliation buys and costs on generated item x depot
// data with known shared structure: Fenwick Lane Provisions' weekly demand (trainer/synth: every
// series shares the distributor's yearly cycle, with its own level, trend, promotions and
// noise), 30 items at 6 depots, three years; four origins, each holding out the next 12 weeks (the last 48 weeks in all). Every node (180 item x
// depot series, 6 depot totals, 30 item totals, the grand total) gets a base forecast from the
// same zoo and design (ETS, Theta, Naive, SeasonalNaive, the fixed per-series choice); each
// method then reconciles them. Reported per level: the mean MASE (scale: the in-sample mean
// absolute one-step naive error, Hyndman & Koehler 2006) of the reconciled forecasts over the
// base forecasts' (below 1: reconciliation helped), and the share of held-out actuals inside
// the 10-90% band (nominal 0.80) for base and reconciled (reconciled bands come from the
// reconciled backtest errors); and the extra cost per bottom series, (the error backtest a
// hierarchy adds to the bottom series + aggregates' forecasts, error backtest included +
// reconciliation) / (the bottom series' forecasts without a hierarchy), wall time in the same
// run. It also logs why an aggregate level can lose: the mean pairwise correlation of the
// bottom series' base forecast errors (steps 1-12 of every origin), for pairs at the same depot
// and at different depots, beside that of their one-step in-sample residuals (the last origin's)
// and of the backtest errors W is estimated from (every origin's); StructuralScaling assumes
// none; and MinTShrink's shrinkage intensity.
//
//	go test ./trainer/pipeline -run '^$' -bench Hierarchy -benchtime 1x
func BenchmarkHierarchy(b *testing.B) {
	const horizon, items, depots, periods, origins = 12, 30, 6, 156, 4
	o := synth.Options{Items: items, Depots: depots, Frequency: synth.Weekly, Periods: periods, SpareShare: -1, Seed: 7}
	full := map[string]*series.Series{}
	var keys []string
	for d := 0; d < depots; d++ {
		err := o.Depot(d, func(r synth.Record) error {
			s := full[r.Key()]
			if s == nil {
				s = &series.Series{Key: r.Key(), Start: r.Date, Freq: series.Weekly}
				full[r.Key()] = s
				keys = append(keys, r.Key())
			}
			s.Values = append(s.Values, r.Units)
			return nil
		})
		if err != nil {
			b.Fatal(err)
		}
	}
	sort.Strings(keys)
	cfg := &runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind, Run: "bench",
		Source: runconfig.Source{URI: "mem://in/", Format: "csv", Frequency: "Weekly", WeekAnchor: "Monday", NonNegative: true,
			Partitioning: runconfig.PartitionHashBuckets, Columns: runconfig.Columns{Series: []string{"item", "depot"}, Date: "week_start", Value: "units"}},
		Output: runconfig.Output{URI: "mem://out/", Format: "csv"}, Horizon: horizon, QuantilePercents: []int{10, 50, 90}, QuantileWidth: runconfig.QuantileWidthBacktest,
		Models: []runconfig.Model{{Family: models.FamilyNaive}, {Family: models.FamilySeasonalNaive}, {Family: models.FamilyTheta}, {Family: models.FamilyETS}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 2, BacktestRefit: runconfig.RefitOnce,
			Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding:  runconfig.Sharding{TargetSeriesPerShard: 1000},
		Drift:     runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 1},
		Hierarchy: &runconfig.Hierarchy{Levels: [][]string{{"depot"}, {"item"}, {}}, ShardBy: []string{"depot"}, Method: "MinTShrink", NonNegative: true},
	}
	st, err := Check(cfg)
	if err != nil {
		b.Fatal(err)
	}
	h := newHierarchy(cfg)
	levels := []string{h.bottom, "depot", "item", "total"}
	methods := []string{"base", "BottomUp", "OLS", "StructuralScaling", "VarianceScaling", "MinTShrink"}
	oneStep := map[string][]float64{} // the last forecast's one-step in-sample residuals by key
	plain := st.Design(2)
	plain.Base.ErrorOrigins = 0
	// plainCost is what the bottom series' forecasts cost without a hierarchy (no error
	// backtest), the reference of the extra cost.
	plainCost := func(in []series.Series) time.Duration {
		t0 := time.Now()
		if _, err := design.Forecast(context.Background(), in, plain, func(int, design.Result, error) {}); err != nil {
			b.Fatal(err)
		}
		return time.Since(t0)
	}
	forecast := func(in []series.Series) ([]NodeBase, time.Duration) {
		t0 := time.Now()
		out := make([]NodeBase, len(in))
		_, err := design.Forecast(context.Background(), in, st.Design(2), func(i int, r design.Result, err error) {
			if err != nil {
				b.Fatalf("%s: %v", in[i].Key, err)
			}
			out[i] = h.baseOf(in[i], h.levelOf(in[i].Key), r)
			oneStep[in[i].Key] = r.Residuals
		})
		if err != nil {
			b.Fatal(err)
		}
		return out, time.Since(t0)
	}
	for it := 0; it < b.N; it++ {
		scores := map[string]*levelScore{}
		for _, m := range methods {
			scores[m] = newLevelScore(len(levels))
		}
		var tBottom, tAggs, tPlain time.Duration
		tRec := map[string]time.Duration{}
		errs, resid, inner := map[string][]float64{}, map[string][]float64{}, map[string][]float64{} // bottom series only
		lambda := map[string][]float64{}
		for origin := 1; origin <= origins; origin++ {
			cut := periods - origin*horizon
			var bottom, next []series.Series
			for _, k := range keys {
				s := *full[k]
				s.Values = slices.Clone(s.Values[:cut])
				bottom = append(bottom, s)
				s2 := *full[k]
				s2.Values = s2.Values[:cut+horizon]
				next = append(next, s2)
			}
			aggs := h.aggregate(bottom, h.levels)
			actual, history := map[string][]float64{}, map[string][]float64{}
			for _, s := range append(next, h.aggregate(next, h.levels)...) {
				actual[s.Key] = s.Values[cut:]
			}
			for _, s := range append(slices.Clone(bottom), aggs...) {
				history[s.Key] = s.Values
			}
			tPlain += plainCost(bottom)
			bottomBase, t1 := forecast(bottom)
			aggBase, t2 := forecast(aggs)
			tBottom, tAggs = tBottom+t1, tAggs+t2
			nodes := append(bottomBase, aggBase...)
			for _, nd := range bottomBase {
				for t, y := range actual[nd.Key] {
					errs[nd.Key] = append(errs[nd.Key], y-nd.Mean[t])
				}
				for _, o := range nd.Backtest { // every bottom series ends together: origins align
					inner[nd.Key] = append(inner[nd.Key], o.Errors...)
				}
				if origin == origins {
					resid[nd.Key] = oneStep[nd.Key]
				}
			}
			scores["base"].add(h, nodes, nil, actual, history, levels)
			for _, m := range methods[1:] {
				h.method = reconcile.Method(m)
				t0 := time.Now()
				tr, err := h.reconcileTree(nodes, series.Weekly)
				tRec[m] += time.Since(t0)
				if err != nil {
					b.Fatal(err)
				}
				scores[m].add(h, nodes, &tr, actual, history, levels)
				lambda[m] = append(lambda[m], tr.lambda)
			}
		}
		b.Logf("%d items x %d depots (%d bottom series, %d aggregates), horizon %d, %d origins; base forecasts %.2fs (bottom, %.2fs without the error backtest) + %.2fs (aggregates); error backtest at %d origins",
			items, depots, len(keys), 1+items+depots, horizon, origins, tBottom.Seconds(), tPlain.Seconds(), tAggs.Seconds(), st.Selection.ErrorOrigins)
		sameE, otherE := depotCorrelations(keys, errs)
		sameR, otherR := depotCorrelations(keys, resid)
		sameB, otherB := depotCorrelations(keys, inner)
		b.Logf("bottom series, mean pairwise correlation: forecast errors (steps 1-%d, %d origins) %.3f same depot, %.3f other depots; one-step residuals %.3f, %.3f; backtest errors (what W is estimated from) %.3f, %.3f",
			horizon, origins, sameE, otherE, sameR, otherR, sameB, otherB)
		b.Logf("MinTShrink intensity by origin: %.3f", lambda["MinTShrink"])
		b.Logf("%-18s %-11s %8s %8s %8s %8s", "method", "", levels[0], levels[1], levels[2], levels[3])
		base := scores["base"]
		for _, m := range methods {
			sc := scores[m]
			if m == "base" {
				b.Logf("%-18s %-11s %8.4f %8.4f %8.4f %8.4f", m, "MASE", sc.mase(0), sc.mase(1), sc.mase(2), sc.mase(3))
			} else {
				extra := (tBottom - tPlain + tAggs + tRec[m]).Seconds() / tPlain.Seconds()
				b.Logf("%-18s %-11s %8.4f %8.4f %8.4f %8.4f   extra cost per bottom series %.3f of its base forecast (reconcile %.1f ms per origin)", m, "MASE ratio",
					sc.mase(0)/base.mase(0), sc.mase(1)/base.mase(1), sc.mase(2)/base.mase(2), sc.mase(3)/base.mase(3), extra, tRec[m].Seconds()*1000/origins)
				for j, l := range levels {
					b.ReportMetric(sc.mase(j)/base.mase(j), m+"/"+l+"-ratio")
				}
				if m == "MinTShrink" {
					b.ReportMetric(extra, "extra-cost-ratio")
				}
			}
			b.Logf("%-18s %-11s %8.3f %8.3f %8.3f %8.3f", m, "cover 10-90", sc.cover(0), sc.cover(1), sc.cover(2), sc.cover(3))
			b.Logf("%-18s %-11s %8.3f %8.3f %8.3f %8.3f", m, "prom./real.", sc.promiseRatio(0), sc.promiseRatio(1), sc.promiseRatio(2), sc.promiseRatio(3))
			if m != "base" {
				b.Logf("%-18s %-11s %8.3f %8.3f %8.3f %8.3f", m, "base prom.", sc.basePromiseRatio(0), sc.basePromiseRatio(1), sc.basePromiseRatio(2), sc.basePromiseRatio(3))
			}
		}
	}
}

// levelScore sums, per level, MASE over nodes and origins and the held-out actuals inside the
// 10-90% band.
type levelScore struct {
	sum           []float64
	n, in, points []int
	// promised and realized sum, per level, each node's promised MASE (the base forecast's
	// selection backtest, or the reconciled forecast's: treeResult.promise) and its realized
	// MASE on the same scale (backtest.ScaleLag of its history), over pn nodes and origins.
	promised, realized []float64
	pn                 []int
	// basePromised sums the base promise of the same nodes (what a hierarchical run promised
	// before the promise followed the reconciliation).
	basePromised []float64
}

func newLevelScore(levels int) *levelScore {
	return &levelScore{sum: make([]float64, levels), n: make([]int, levels), in: make([]int, levels), points: make([]int, levels),
		promised: make([]float64, levels), realized: make([]float64, levels), pn: make([]int, levels),
		basePromised: make([]float64, levels)}
}

// promiseRatio is the mean promised over the mean realized MASE of level j.
func (ls *levelScore) promiseRatio(j int) float64 { return ls.promised[j] / ls.realized[j] }

// basePromiseRatio is promiseRatio with the base promises.
func (ls *levelScore) basePromiseRatio(j int) float64 { return ls.basePromised[j] / ls.realized[j] }

func (ls *levelScore) mase(j int) float64  { return ls.sum[j] / float64(ls.n[j]) }
func (ls *levelScore) cover(j int) float64 { return float64(ls.in[j]) / float64(ls.points[j]) }

// add scores the nodes' forecasts (the reconciled ones when tr is set) on the held-out actuals.
func (ls *levelScore) add(h *hierarchy, nodes []NodeBase, tr *treeResult, actual, history map[string][]float64, levels []string) {
	for _, nd := range nodes {
		j := slices.Index(levels, nd.Level)
		mean := []float64(nd.Mean)
		lo, hi := []float64(nd.Quantiles[0]), []float64(nd.Quantiles[len(nd.Quantiles)-1])
		if tr != nil {
			mean = tr.mean[nd.Key]
			lo, hi = tr.quantiles[nd.Key][0], tr.quantiles[nd.Key][len(nd.Quantiles)-1]
		}
		y := actual[nd.Key]
		if e := backtest.MeanAbsScaledError(y, mean, history[nd.Key], 1); !math.IsNaN(e) && !math.IsInf(e, 0) {
			ls.sum[j] += e
			ls.n[j]++
		}
		promised := math.NaN()
		if len(nd.Promise) > 0 {
			recs := make([]backtest.OriginRecord, len(nd.Promise))
			for o, po := range nd.Promise {
				recs[o] = po.record()
			}
			promised, _ = backtest.AssessRecords(backtest.Metric(nd.Metric), recs, nil)
		}
		base := promised
		if tr != nil {
			if p, ok := tr.promise[nd.Key]; ok {
				promised = p.score
			}
		}
		h := history[nd.Key]
		if e := backtest.MeanAbsScaledError(y, mean, h, backtest.ScaleLag(len(h), 52)); !math.IsNaN(promised) && !math.IsNaN(e) && !math.IsInf(e, 0) {
			ls.promised[j] += promised
			ls.basePromised[j] += base
			ls.realized[j] += e
			ls.pn[j]++
		}
		for t := range y {
			ls.points[j]++
			if y[t] >= lo[t] && y[t] <= hi[t] {
				ls.in[j]++
			}
		}
	}
}

// depotCorrelations is the mean Pearson correlation of x over pairs of item x depot keys at the
// same depot and at different depots; vectors are aligned at their ends and a pair skips the
// periods where either is NaN.
func depotCorrelations(keys []string, x map[string][]float64) (same, other float64) {
	var nSame, nOther int
	for i, a := range keys {
		ca, _ := ingest.SplitKey(a, 2)
		for _, c := range keys[i+1:] {
			cc, _ := ingest.SplitKey(c, 2)
			r := pearson(x[a], x[c])
			if math.IsNaN(r) {
				continue
			}
			if ca[1] == cc[1] {
				same, nSame = same+r, nSame+1
			} else {
				other, nOther = other+r, nOther+1
			}
		}
	}
	return same / float64(nSame), other / float64(nOther)
}

// pearson is the sample correlation of the end-aligned common part of x and y, NaN pairs
// skipped (NaN with fewer than 3 pairs or no variation).
func pearson(x, y []float64) float64 {
	n := min(len(x), len(y))
	x, y = x[len(x)-n:], y[len(y)-n:]
	var sx, sy, sxx, syy, sxy, k float64
	for i := range x {
		if math.IsNaN(x[i]) || math.IsNaN(y[i]) {
			continue
		}
		sx, sy, k = sx+x[i], sy+y[i], k+1
	}
	if k < 3 {
		return math.NaN()
	}
	mx, my := sx/k, sy/k
	for i := range x {
		if math.IsNaN(x[i]) || math.IsNaN(y[i]) {
			continue
		}
		sxx += (x[i] - mx) * (x[i] - mx)
		syy += (y[i] - my) * (y[i] - my)
		sxy += (x[i] - mx) * (y[i] - my)
	}
	if sxx == 0 || syy == 0 {
		return math.NaN()
	}
	return sxy / math.Sqrt(sxx*syy)
}
