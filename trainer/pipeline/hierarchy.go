package pipeline

import (
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/reconcile"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// Hierarchies (spec.hierarchy) in the trainer.
//
// Nodes. The bottom nodes are the input series. An aggregate node of a level is one distinct
// value of the level's key columns; its key is the series key (ingest.JoinKey) of its cells with
// every cell outside the level empty ("/D01" is depot D01's total over items, "/" the grand total
// of item x depot), which no input series has, since an empty key cell rejects a series. Its
// history is the sum of its bottom series' histories, period by period, a missing observation
// counting as zero (demand not recorded is demand not served; common practice), from the earliest
// first period to the latest last period of its members.
//
// Where each node is forecast. With HashBuckets input the bucket of a series is the hash of its
// shardBy cells (bucketKey), so a unit holds whole sub-trees: a level whose columns include every
// shardBy column has each node inside one unit ("within" levels). Train builds those nodes from
// the unit's series and forecasts them with the same design as the bottom series; when no level
// spans units it also reconciles each unit's sub-trees, and that is final. Every other level ("spanning" levels: item totals across depots, the grand
// total, and every level with Objects or RowGroups input, whose units promise nothing about
// sub-trees) is left to the reconcile step: train writes, per unit, the partial sums of those
// nodes over the unit's series (histories, not forecasts: a shard that holds part of an item's
// depots cannot forecast the item's total, and a sum of partial forecasts is the bottom-up
// forecast, which forgoes what the aggregate's own history shows), together with the base
// forecasts and backtest errors of every node it forecast (nodes.json). The reconcile step
// adds the partial sums into the spanning nodes' histories, forecasts them with the same design,
// and reconciles the whole tree at once from the base forecasts (one projection over all nodes is
// the MinT optimum; reconciling sub-trees and then the top separately is not), replacing the
// units' forecasts with the reconciled ones (RunReconcile).
//
// Weights. VarianceScaling and the MinT methods estimate W from every node's rolling-origin
// backtest errors of its published forecast (selection.Result.BacktestErrors, measured at
// hierarchyErrorOrigins origins one horizon apart: the selection's own origins are a step apart,
// share most target periods and show one stretch of history), not from one-step in-sample
// residuals: a forecast of h steps errs by what the next h periods bring, and a shock
// common to many series (a season stronger than the history showed) makes the bottom series'
// multi-step errors correlate where their one-step residuals hardly do (BenchmarkHierarchy logs
// both; PROJECT-NOTES, "why depot totals lose"). Wickramasuriya, Athanasopoulos & Hyndman (2019,
// section 2) write the h-step reconciliation with W_h, the covariance of the h-step base errors,
// and take W_h = k_h W_1 only because W_h is hard to estimate; we estimate it. The errors of all
// nodes are aligned by origin and step: a column is one (origin period, step) pair, found from
// each node's last period and BacktestHeld, so column t of every node is the error of a forecast
// of the same target period made from the same origin; a node without that origin is NaN there
// (reconcile skips such pairs). Steps are pooled without scaling: one G serves every step, and
// the G that minimises the summed mean squared error over steps 1..H, Σ_h tr(S G W_h G' S') with
// G S = I, is the MinT G of W = Σ_h W_h (the objective is linear in W), which is what the pooled
// second moments estimate (each column is one draw of one step's error). Scaling each step to
// unit spread would instead weight the short steps as much as the long ones, whose errors are the
// ones the planners see largest. Caveat: the columns of one origin are serially correlated, so the
// shrinkage intensity's variance estimate treats dependent draws as independent (λ comes out
// smaller than for independent draws). Memory: origins × horizon numbers per node (60 for weekly
// data at a horizon of 12, at most MaxErrorOrigins × horizon), whatever the history length.
//
// Quantiles come from the reconciled backtest errors (issue 21 offers sample paths or these).
// The projection is linear, ỹ = P ŷ with P = S G, and the actuals of one origin are coherent
// (aggregate histories are sums of the bottom histories), so P y = y and the reconciled forecast's
// error at an origin is ẽ = y − P ŷ = P (y − ŷ) = P e: the same reconciliation applied to the
// backtest errors. reconcileErrors reconciles every error column with the run's method, each
// origin with the W of the other origins when W comes from these errors (leave one origin out),
// without the non-negativity constraint (an error may be negative; for non-negative runs P e is
// the error of the unconstrained projection, an approximation where the constraint binds), with
// a node's missing error counted as 0 in the product. Each node's bands are then errorBands of
// its reconciled errors at the origins where it has its own errors, around its reconciled mean
// (the spread per step from the errors, Student's t for the n origins it rests on), clipped at
// zero for non-negative data: non-decreasing in the level and finite by construction. A node without backtest errors (a constant series, a
// fallback model) keeps its own base spread re-centred on the reconciled mean (q̃ = q̂ + ỹ − ŷ).
// Quantiles of sums are not sums of quantiles, so coherence is promised for the means only.
//
// Promises. A node's promised error (the models table's score and per-step backtest errors, the
// evaluation's expected, and through it the drift per level) describes the forecast published,
// the reconciled one. Selection's Expected is the mean over its rolling origins of the metric
// at each origin (MASE and RMSSE scaled by that origin's in-sample naive scale, at
// backtest.ScaleLag of the whole history), StepErrors the metric of each step pooled over the
// origins (backtest.Assess). A hierarchical run keeps those origins (selection.Result.Promise:
// actuals, errors, scale) in NodeBase.Promise, and reconcileTree scores the reconciled forecast
// actual − ẽ on them, ẽ = P e the reconciled selection errors, with the same definition
// (backtest.AssessRecords; nodePromises): with P = I, or BottomUp at the bottom level, that is
// the base promise. Each selection origin is reconciled with the W of the error-backtest origins
// whose windows share no target period with its own (see reconcileErrors): an in-sample W
// promised 0.79 / 0.77 / 0.78 / 0.64 of the realized MASE at the four levels of
// BenchmarkHierarchy under MinTShrink, the held-out one 0.88 / 0.91 / 0.88 / 0.85 (the base
// forecasts' own promises: 0.82 / 0.87 / 0.84 / 0.26). A node without a selection backtest keeps
// its base promise; treeResult.promises counts them.

// MaxErrorOrigins bounds the origins of the hierarchy's error backtest (memory: MaxErrorOrigins
// × horizon numbers per node).
const MaxErrorOrigins = 8

// hierarchyErrorOrigins is selection.Config.ErrorOrigins for a hierarchical run with season
// length m, horizon h and the selection's origins: enough non-overlapping test windows of h
// periods to span one season, ceil(m / h), so that the errors see every phase of the cycle (a
// shock common to many series comes with the season: see the Weights paragraph), at least the
// selection's own origin count and at most MaxErrorOrigins. Weekly data with a horizon of 12
// gets 5 windows (60 weeks), monthly with 18 the selection's 3.
func hierarchyErrorOrigins(m, h, origins int) int {
	k := max((m+h-1)/h, origins, 3)
	return min(k, MaxErrorOrigins)
}

// hierarchy is a run's spec.hierarchy in the trainer's terms.
type hierarchy struct {
	keys   []string
	levels []hierLevel
	// bottom is the bottom level's name (every key column).
	bottom      string
	shardBy     []int // key column indices, ascending
	method      reconcile.Method
	nonNegative bool
	// quantileLevels are the run's quantile levels (percents / 100), those of NodeBase.Quantiles.
	quantileLevels []float64
	// spanning is true when some level spans units: the run needs the reconcile step.
	spanning bool
}

// hierLevel is one aggregation level.
type hierLevel struct {
	name string
	cols []int // key column indices, ascending
	// within: each node of the level lies in one unit (hash buckets cut by shardBy ⊆ cols).
	within bool
}

// newHierarchy returns the run's hierarchy, or nil when it has none. cfg is validated.
func newHierarchy(cfg *runconfig.Config) *hierarchy {
	hc := cfg.Hierarchy
	if hc == nil {
		return nil
	}
	keys := cfg.Source.Columns.Series
	h := &hierarchy{keys: keys, bottom: runconfig.LevelName(keys, keys), method: reconcile.Method(hc.Method), nonNegative: hc.NonNegative}
	for _, p := range cfg.QuantilePercents {
		h.quantileLevels = append(h.quantileLevels, float64(p)/100)
	}
	hashed := cfg.Source.Partitioning == runconfig.PartitionHashBuckets
	for i, k := range keys {
		if slices.Contains(hc.ShardBy, k) {
			h.shardBy = append(h.shardBy, i)
		}
	}
	for _, l := range hc.Levels {
		lv := hierLevel{name: runconfig.LevelName(keys, l)}
		for i, k := range keys {
			if slices.Contains(l, k) {
				lv.cols = append(lv.cols, i)
			}
		}
		lv.within = hashed && len(h.shardBy) > 0
		for _, c := range h.shardBy {
			lv.within = lv.within && slices.Contains(lv.cols, c)
		}
		h.spanning = h.spanning || !lv.within
		h.levels = append(h.levels, lv)
	}
	return h
}

// bucketKey is the string a series' hash bucket is taken from: the key of its shardBy cells,
// or the series key itself without a hierarchy or shardBy.
func (h *hierarchy) bucketKey(key string) string {
	if h == nil || len(h.shardBy) == 0 {
		return key
	}
	cells, err := ingest.SplitKey(key, len(h.keys))
	if err != nil {
		return key
	}
	sub := make([]string, len(h.shardBy))
	for i, c := range h.shardBy {
		sub[i] = cells[c]
	}
	return ingest.JoinKey(sub...)
}

// seriesBucket is the bucket of a series key in a run (see bucketKey).
func seriesBucket(h *hierarchy, key string, buckets int) int {
	return BucketOf(h.bucketKey(key), buckets)
}

// nodeKey is the key of the node of level l that the bottom series with these cells belongs to.
func (h *hierarchy) nodeKey(cells []string, l hierLevel) string {
	out := make([]string, len(h.keys))
	for _, c := range l.cols {
		out[c] = cells[c]
	}
	return ingest.JoinKey(out...)
}

// levelOf names the level of a node key: the key columns whose cells are not empty.
func (h *hierarchy) levelOf(key string) string {
	cells, err := ingest.SplitKey(key, len(h.keys))
	if err != nil {
		return ""
	}
	var in []string
	for i, c := range cells {
		if c != "" {
			in = append(in, h.keys[i])
		}
	}
	return runconfig.LevelName(h.keys, in)
}

// levelsWhere returns the levels with within == w.
func (h *hierarchy) levelsWhere(w bool) []hierLevel {
	var out []hierLevel
	for _, l := range h.levels {
		if l.within == w {
			out = append(out, l)
		}
	}
	return out
}

// aggregate returns one series per node of the given levels over bottom (sumSeries of its
// members), sorted by level order then key.
func (h *hierarchy) aggregate(bottom []series.Series, levels []hierLevel) []series.Series {
	var out []series.Series
	for _, l := range levels {
		members := map[string][]*series.Series{}
		for i := range bottom {
			cells, err := ingest.SplitKey(bottom[i].Key, len(h.keys))
			if err != nil {
				continue
			}
			k := h.nodeKey(cells, l)
			members[k] = append(members[k], &bottom[i])
		}
		keys := make([]string, 0, len(members))
		for k := range members {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			out = append(out, sumSeries(k, members[k]))
		}
	}
	return out
}

// sumSeries adds members period by period (a missing value counts as zero) from the earliest
// first period to the latest last period. Members share a frequency.
func sumSeries(key string, members []*series.Series) series.Series {
	f := members[0].Freq
	start, end := members[0].Start, members[0].PeriodAt(members[0].Len()-1)
	for _, m := range members[1:] {
		if m.Start.Before(start) {
			start = m.Start
		}
		if e := m.PeriodAt(m.Len() - 1); e.After(end) {
			end = e
		}
	}
	at := map[int64]int{}
	var values []float64
	for t := start; !t.After(end); t = f.Step(start, len(values)) {
		at[t.Unix()] = len(values)
		values = append(values, 0)
	}
	for _, m := range members {
		off := at[m.Start.Unix()]
		for i, v := range m.Values {
			if !math.IsNaN(v) {
				values[off+i] += v
			}
		}
	}
	return series.Series{Key: key, Start: start, Freq: f, Values: values}
}

// periodsBetween counts the periods of frequency f from a to b (b on or after a, both periods).
func periodsBetween(f series.Frequency, a, b time.Time) int {
	n := 0
	for f.Step(a, n).Before(b) {
		n++
	}
	return n
}

// floats is a JSON array of numbers with null for NaN (JSON has no NaN).
type floats []float64

func (x floats) MarshalJSON() ([]byte, error) {
	out := make([]*float64, len(x))
	for i := range x {
		if !math.IsNaN(x[i]) && !math.IsInf(x[i], 0) {
			out[i] = &x[i]
		}
	}
	return json.Marshal(out)
}

func (x *floats) UnmarshalJSON(b []byte) error {
	var in []*float64
	if err := json.Unmarshal(b, &in); err != nil {
		return err
	}
	*x = make(floats, len(in))
	for i, p := range in {
		(*x)[i] = math.NaN()
		if p != nil {
			(*x)[i] = *p
		}
	}
	return nil
}

// errorFloats are backtest errors in nodes.json: like floats, written with 7 significant digits
// (a relative rounding of at most 5e-7, far below what a covariance estimated from a few dozen
// errors can resolve), which makes them about half as long as Go's shortest round-trip form.
type errorFloats []float64

func (x errorFloats) MarshalJSON() ([]byte, error) {
	b := make([]byte, 0, 2+12*len(x))
	b = append(b, '[')
	for i, v := range x {
		if i > 0 {
			b = append(b, ',')
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			b = append(b, "null"...)
			continue
		}
		b = strconv.AppendFloat(b, v, 'g', 7, 64)
	}
	return append(b, ']'), nil
}

func (x *errorFloats) UnmarshalJSON(b []byte) error { return (*floats)(x).UnmarshalJSON(b) }

// NodesVersion is the version of nodes.json. Version 3 added NodeBase.Metric and Promise,
// version 4 the band scales (NodeBase.BandScale, PromiseOrigin.BandScale); the reconcile step
// still reads versions 2 and 3 (a run trained before the upgrade), whose nodes keep their base
// promise (2) or have no band record (2 and 3).
const NodesVersion = 4

// nodesVersionRead reports whether the reconcile step reads nodes.json of version v.
func nodesVersionRead(v int) bool { return v >= 2 && v <= NodesVersion }

// NodesFile is nodes.json, what a unit of a hierarchical run leaves for the reconcile step:
// the base (unreconciled) forecasts and backtest errors of every node train forecast, and the
// unit's partial sums of the spanning nodes. Listed in unit.json as table "nodes".
type NodesFile struct {
	Version int    `json:"version"`
	Run     string `json:"run"`
	Unit    string `json:"unit"`
	// Frequency is the source's frequency (the API's spelling).
	Frequency string     `json:"frequency"`
	Nodes     []NodeBase `json:"nodes"`
	Partials  []Partial  `json:"partials,omitempty"`
}

// NodeBase is one node's base forecast.
type NodeBase struct {
	Key   string `json:"key"`
	Level string `json:"level"`
	Model string `json:"model"`
	// First is the first forecast period.
	First     time.Time `json:"first"`
	Mean      floats    `json:"mean"`
	Quantiles []floats  `json:"quantiles,omitempty"`
	// End is the node's last history period, which the backtest origins count back from.
	End time.Time `json:"end"`
	// Backtest holds the backtest errors of the node's published forecast, one entry per origin
	// (selection.Result.BacktestErrors and BacktestHeld); empty without backtest.
	Backtest []OriginErrors `json:"backtest,omitempty"`
	// Metric is the metric of the node's promise (selection.Result.Metric), Promise the
	// selection backtest behind it (selection.Result.Promise), from which the reconcile step
	// scores the reconciled forecast's promise; both empty without backtest (and in version 2).
	Metric  string          `json:"metric,omitempty"`
	Promise []PromiseOrigin `json:"promise,omitempty"`
	// BandScale is the whole history's scale the band record takes the bands in
	// (selection.Result.BandScale); with PromiseOrigin.BandScale it lets the reconcile step
	// score the reconciled bands (bandRecord). Null without Promise.
	BandScale *float64 `json:"bandScale,omitempty"`
}

// PromiseOrigin is one origin of a node's selection backtest (backtest.OriginRecord): Held as in
// OriginErrors, the actuals and errors by step at full precision (the reconciled promise of an
// unchanged forecast must equal the base one), and the metric's in-sample scale (null for
// metrics without one).
type PromiseOrigin struct {
	Held    int      `json:"held"`
	Actuals floats   `json:"actuals"`
	Errors  floats   `json:"errors"`
	Scale   *float64 `json:"scale,omitempty"`
	// BandScale is the origin's scale in the band record (backtest.OriginRecord.BandScale).
	BandScale *float64 `json:"bandScale,omitempty"`
}

// record is the origin as backtest.AssessRecords takes it.
func (p PromiseOrigin) record() backtest.OriginRecord {
	r := backtest.OriginRecord{Held: p.Held, Actuals: p.Actuals, Errors: p.Errors, Scale: math.NaN()}
	if p.Scale != nil {
		r.Scale = *p.Scale
	}
	return r
}

// OriginErrors are a node's backtest errors (actual − forecast) from one origin, by step; Held
// is the number of history periods after the origin, so step k+1 forecast the period
// Held − k − 1 periods before End.
type OriginErrors struct {
	Held   int         `json:"held"`
	Errors errorFloats `json:"errors"`
}

// Partial is a spanning node's history summed over one unit's series.
type Partial struct {
	Key    string    `json:"key"`
	Level  string    `json:"level"`
	Start  time.Time `json:"start"`
	Values floats    `json:"values"`
}

// baseOf records a forecast node's base forecast with its backtest errors.
func (h *hierarchy) baseOf(s series.Series, level string, r design.Result) NodeBase {
	nb := NodeBase{Key: s.Key, Level: level, Model: r.Chosen, First: s.PeriodAt(s.Len()), Mean: slices.Clone(r.Mean),
		End: s.PeriodAt(s.Len() - 1)}
	for _, q := range r.Quantiles {
		nb.Quantiles = append(nb.Quantiles, slices.Clone(q))
	}
	for i, e := range r.BacktestErrors {
		if i < len(r.BacktestHeld) {
			nb.Backtest = append(nb.Backtest, OriginErrors{Held: r.BacktestHeld[i], Errors: slices.Clone(e)})
		}
	}
	if len(r.Promise) > 0 {
		nb.Metric = string(r.Metric)
		nb.BandScale = finitePtr(r.BandScale)
		for _, o := range r.Promise {
			po := PromiseOrigin{Held: o.Held, Actuals: slices.Clone(o.Actuals), Errors: slices.Clone(o.Errors),
				Scale: finitePtr(o.Scale), BandScale: finitePtr(o.BandScale)}
			nb.Promise = append(nb.Promise, po)
		}
	}
	return nb
}

// finitePtr is a pointer to v, or nil when v is not finite (JSON has no NaN).
func finitePtr(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// usesErrors reports whether the run's method estimates W from the backtest errors.
func (h *hierarchy) usesErrors() bool {
	switch h.method {
	case reconcile.VarianceScaling, reconcile.MinTShrink, reconcile.MinTSample:
		return true
	}
	return false
}

// treeResult is a reconciled tree: coherent means and their quantiles by node key.
type treeResult struct {
	mean      map[string][]float64
	quantiles map[string][][]float64
	method    reconcile.Method
	lambda    float64
	note      string
	// deviation is reconcile.MaxDeviation of the reconciled means (relative).
	deviation float64
	// dropped lists aggregates with no bottom series under them, left out.
	dropped []string
	// bands says where the quantiles came from.
	bands string
	// promise holds the reconciled forecast's promise of every node that has one (see
	// nodePromises); promises says how many nodes kept their base promise.
	promise  map[string]promise
	promises string
	// band holds, for every node whose bands were rebuilt from reconciled errors, how those
	// bands fare on its reconciled selection backtest (bandRecord). Nodes not in it keep their
	// base record: those whose bands are their base bands re-centred, and those whose record
	// cannot be scored (no selection backtest; nodes.json before version 4).
	band map[string]backtest.QuantileRecord
	// levels are the quantile levels of the bands and records.
	levels []float64
}

// promise is a node's promised error: Expected and StepErrors in selection's terms.
type promise struct {
	score float64
	steps []float64
}

// reconcileTree reconciles the nodes (bottom series and aggregates, any order) with the run's
// method. Every node must have a mean of the same horizon; backtest errors are aligned by origin
// and step from their End periods, weight the methods that estimate W and give every node's
// bands (see the top of this file). Aggregates whose level the nodes hold but with no bottom
// node under them are dropped (named in dropped).
func (h *hierarchy) reconcileTree(nodes []NodeBase, freq series.Frequency) (treeResult, error) {
	var bottom, aggs []int
	for i, n := range nodes {
		if n.Level == h.bottom {
			bottom = append(bottom, i)
		} else {
			aggs = append(aggs, i)
		}
	}
	if len(bottom) == 0 {
		return treeResult{}, fmt.Errorf("hierarchy: no bottom series to reconcile")
	}
	byLevel := map[string]hierLevel{}
	for _, l := range h.levels {
		byLevel[l.name] = l
	}
	aggAt := map[string]int{} // node key -> position in aggs
	for a, i := range aggs {
		aggAt[nodes[i].Key] = a
	}
	sums := make([][]int, len(aggs))
	present := map[string]bool{}
	for _, i := range aggs {
		present[nodes[i].Level] = true
	}
	for j, i := range bottom {
		cells, err := ingest.SplitKey(nodes[i].Key, len(h.keys))
		if err != nil {
			return treeResult{}, fmt.Errorf("hierarchy: node %q: %w", nodes[i].Key, err)
		}
		for _, l := range h.levels {
			if !present[l.name] {
				continue
			}
			if a, ok := aggAt[h.nodeKey(cells, l)]; ok {
				sums[a] = append(sums[a], j)
			}
		}
	}
	var tr treeResult
	order := make([]int, 0, len(nodes)) // node indices, aggregates first, as reconcile wants
	var hs reconcile.Hierarchy
	for a, i := range aggs {
		if len(sums[a]) == 0 {
			tr.dropped = append(tr.dropped, nodes[i].Key)
			continue
		}
		if _, ok := byLevel[nodes[i].Level]; !ok {
			return treeResult{}, fmt.Errorf("hierarchy: node %q has level %q, not one of the run's", nodes[i].Key, nodes[i].Level)
		}
		hs.Sums = append(hs.Sums, sums[a])
		order = append(order, i)
	}
	hs.Bottom = len(bottom)
	order = append(order, bottom...)
	base := make([][]float64, len(order))
	for k, i := range order {
		base[k] = nodes[i].Mean
	}
	cols := h.errorColumns(nodes, order, freq, func(n NodeBase) []OriginErrors { return n.Backtest })
	pcols := h.errorColumns(nodes, order, freq, promiseErrors)
	var weightsFrom [][]float64
	if h.usesErrors() {
		weightsFrom = cols.e
	}
	res, err := reconcile.Reconcile(hs, base, h.method, weightsFrom, reconcile.Options{NonNegative: h.nonNegative})
	if err != nil {
		return treeResult{}, fmt.Errorf("hierarchy: %w", err)
	}
	fc := res.Forecasts
	var recErr, recProm [][]float64 // reconciled error and promise columns, node-major
	bands := cols.n > 0 && len(h.quantileLevels) > 0
	if bands || pcols.n > 0 {
		if recErr, recProm, err = h.reconcileErrors(hs, cols, pcols, bands); err != nil {
			return treeResult{}, fmt.Errorf("hierarchy: reconciling the backtest errors: %w", err)
		}
	}
	tr.method, tr.lambda, tr.note, tr.levels = res.Method, res.Lambda, res.Note, h.quantileLevels
	tr.deviation = reconcile.MaxDeviation(hs, fc)
	tr.mean = make(map[string][]float64, len(order))
	tr.quantiles = make(map[string][][]float64, len(order))
	recentred := 0
	for k, i := range order {
		n := nodes[i]
		tr.mean[n.Key] = fc[k]
		var qs [][]float64
		if bands {
			qs = h.errorBands(fc[k], cols.own(k, recErr[k]))
		}
		if qs != nil {
			if b := h.bandRecord(n, fc[k], qs, pcols.of(k, recProm, len(n.Promise))); b.Points > 0 {
				if tr.band == nil {
					tr.band = map[string]backtest.QuantileRecord{}
				}
				tr.band[n.Key] = b
			}
		}
		if qs == nil && len(n.Quantiles) > 0 {
			qs = h.recentred(n, fc[k])
			recentred++
		}
		tr.quantiles[n.Key] = qs
	}
	if len(h.quantileLevels) > 0 {
		tr.bands = fmt.Sprintf("bands from reconciled backtest errors, %d of %d nodes re-centred base bands (no backtest errors)", recentred, len(order))
	}
	var kept int
	tr.promise, kept = nodePromises(nodes, order, pcols, recProm)
	tr.promises = fmt.Sprintf("promises from the reconciled selection backtest, %d of %d nodes kept their base promise (no backtest)", kept, len(order))
	return tr, nil
}

// promiseErrors are a node's selection backtest errors as errorColumns aligns them.
func promiseErrors(n NodeBase) []OriginErrors {
	out := make([]OriginErrors, len(n.Promise))
	for i, o := range n.Promise {
		out[i] = OriginErrors{Held: o.Held, Errors: errorFloats(o.Errors)}
	}
	return out
}

// nodePromises scores every node's reconciled forecast on its selection backtest: the
// reconciled forecast of node k at one of its origins errs by ẽ = (P e)_k, the reconciled
// error column (rec, node-major, aligned as pc), and its promise is backtest.AssessRecords of
// those errors in the node's own metric, with the actuals and in-sample scales of the base
// promise: the mean over origins of the metric at each origin (MASE scaled by that origin's
// scale), and per step the pooled figure, exactly as selection scored Expected and StepErrors
// (trainer/backtest Assess). With P = I it gives back the base promise. A node without a
// selection backtest in nodes.json (no backtest, or nodes.json version 2), or whose reconciled
// score is undefined, keeps its base promise: it is left out of the map and counted in kept.
func nodePromises(nodes []NodeBase, order []int, pc errorCols, rec [][]float64) (map[string]promise, int) {
	out := map[string]promise{}
	kept := 0
	for k, i := range order {
		n := nodes[i]
		if len(n.Promise) == 0 || pc.n == 0 || len(pc.origin[k]) != len(n.Promise) {
			kept++
			continue
		}
		recs := make([]backtest.OriginRecord, len(n.Promise))
		for o, po := range n.Promise {
			recs[o] = po.record()
		}
		errs := pc.of(k, rec, len(n.Promise))
		score, steps := backtest.AssessRecords(backtest.Metric(n.Metric), recs, errs)
		if math.IsNaN(score) {
			kept++
			continue
		}
		out[n.Key] = promise{score: score, steps: steps}
	}
	return out, kept
}

// errorCols are the nodes' backtest errors aligned by origin and step (see the Weights
// paragraph at the top of this file): e[k][c] is node order[k]'s error in column c, NaN where
// it has none; origin[k] lists, per origin of the node, its column per step.
type errorCols struct {
	n      int
	e      [][]float64
	origin [][][]int
	// at[c] is column c's origin position p (periods before the tree's last period).
	at []int
}

// of returns node k's reconciled errors rec[k] by origin and step, as its origins lie in the
// columns (origin[k]); nil when the node does not have exactly want origins there or rec has
// no row for it.
func (ec errorCols) of(k int, rec [][]float64, want int) [][]float64 {
	if ec.n == 0 || k >= len(rec) || len(ec.origin[k]) != want || want == 0 {
		return nil
	}
	out := make([][]float64, want)
	for o, cols := range ec.origin[k] {
		out[o] = make([]float64, len(cols))
		for s, j := range cols {
			out[o][s] = rec[k][j]
		}
	}
	return out
}

// bandRecord scores node n's reconciled bands qs around its reconciled mean on its reconciled
// selection backtest errs (ẽ = P e by origin and step, see nodePromises) exactly as selection
// scored the base bands on the base errors (backtest.QuantilesOnScales with the scales the
// train step recorded, BandScale): so the models table's band record, the promise the
// calibration of new actuals is judged against, describes the bands published. The bands are
// built from the error backtest's reconciled errors, whose origins lie a horizon apart; the
// selection's lie a step apart, and only their latest (holding out the last h periods) is also
// an error-backtest origin, so the record rests mostly, not wholly, on errors the bands were
// not built from (with the default 3 selection origins, one in three is shared). Points 0 when
// the node has no selection backtest or scales (nodes.json before version 4).
func (h *hierarchy) bandRecord(n NodeBase, mean []float64, qs [][]float64, errs [][]float64) backtest.QuantileRecord {
	if errs == nil || n.BandScale == nil {
		return backtest.QuantileRecord{}
	}
	scales := make([]float64, len(n.Promise))
	for o, po := range n.Promise {
		scales[o] = math.NaN()
		if po.BandScale != nil {
			scales[o] = *po.BandScale
		}
	}
	rec, ok := backtest.QuantilesOnScales(*n.BandScale, scales, errs, h.quantileLevels, mean, qs)
	if !ok {
		return backtest.QuantileRecord{}
	}
	return rec
}

// errorColumns aligns the backtest errors of nodes (in order), those that of returns (the error
// backtest's or the selection backtest's), by origin period and step. A column is (p, k): the
// origin lies p periods before the tree's last period (p = the node's periods behind that last
// period + Held) and k is the step.
func (h *hierarchy) errorColumns(nodes []NodeBase, order []int, freq series.Frequency, of func(NodeBase) []OriginErrors) errorCols {
	end := time.Time{}
	for _, i := range order {
		if nodes[i].End.After(end) {
			end = nodes[i].End
		}
	}
	type col struct{ p, k int }
	at := map[col]int{}
	var keys []col
	shift := make([]int, len(order))
	for k, i := range order {
		shift[k] = periodsBetween(freq, nodes[i].End, end)
		for _, o := range of(nodes[i]) {
			for s := range o.Errors {
				c := col{shift[k] + o.Held, s}
				if _, ok := at[c]; !ok {
					at[c] = 0
					keys = append(keys, c)
				}
			}
		}
	}
	sort.Slice(keys, func(a, b int) bool {
		if keys[a].p != keys[b].p {
			return keys[a].p < keys[b].p
		}
		return keys[a].k < keys[b].k
	})
	ec := errorCols{n: len(keys), e: make([][]float64, len(order)), origin: make([][][]int, len(order)), at: make([]int, len(keys))}
	for j, c := range keys {
		at[c] = j
		ec.at[j] = c.p
	}
	if ec.n == 0 {
		return ec
	}
	for k, i := range order {
		row := make([]float64, ec.n)
		for j := range row {
			row[j] = math.NaN()
		}
		for _, o := range of(nodes[i]) {
			idx := make([]int, 0, len(o.Errors))
			for s, v := range o.Errors {
				j := at[col{shift[k] + o.Held, s}]
				if !math.IsNaN(v) && !math.IsInf(v, 0) {
					row[j] = v
				}
				idx = append(idx, j)
			}
			ec.origin[k] = append(ec.origin[k], idx)
		}
		ec.e[k] = row
	}
	return ec
}

// reconcileErrors returns the reconciled backtest errors P e, node-major, of the error
// backtest's columns ec (when bands; else nil) and of the selection backtest's columns pc,
// with the run's method, without non-negativity and with a node's missing error counted as 0.
// When the method estimates W from ec's errors, each error origin's columns are reconciled
// with the W of the other origins (leave one origin out): a W fitted to the same errors it then
// projects makes them look smaller than a new error will be (in TestReconciledBandsCover
// MinTShrink's in-sample bands covered 0.68 instead of 0.80); cross-validation removes that
// optimism (common practice). For the same reason each selection origin's columns are
// reconciled with the W of the error origins whose test windows share no target period with
// its own (with every error origin sharing one, with all of them: the in-sample projection).
// Columns that hide the same error origins share one projection: the bands cost one W
// estimate per error origin, the promise one more per distinct set (the selection's origins a
// step apart next to error origins a horizon apart: usually one).
func (h *hierarchy) reconcileErrors(hs reconcile.Hierarchy, ec, pc errorCols, bands bool) ([][]float64, [][]float64, error) {
	byOrigin := func(at []int) [][]int { // columns by origin position, in column order
		var g [][]int
		for j, p := range at {
			if j == 0 || p != at[j-1] {
				g = append(g, nil)
			}
			g[len(g)-1] = append(g[len(g)-1], j)
		}
		return g
	}
	groups := byOrigin(ec.at)
	loo := h.usesErrors() && len(groups) >= 2
	type job struct {
		hide         []int // error origins (indices into groups) hidden from W
		weights      bool  // W from ec's errors (else the method's default)
		eCols, pCols []int
	}
	var jobs []*job
	jobOf := func(hide []int, weights bool) *job {
		for _, j := range jobs {
			if slices.Equal(j.hide, hide) && j.weights == weights {
				return j
			}
		}
		j := &job{hide: hide, weights: weights}
		jobs = append(jobs, j)
		return j
	}
	if bands {
		for gi, g := range groups {
			var hide []int
			if loo {
				hide = []int{gi}
			}
			j := jobOf(hide, loo) // as before: without an origin to leave out, no W from the errors
			j.eCols = append(j.eCols, g...)
		}
	}
	for _, g := range byOrigin(pc.at) {
		var hide []int
		if loo {
			ps, hsel := pc.at[g[0]], len(g)
			for gi, eg := range groups { // windows (p − len, p] overlap
				if pe := ec.at[eg[0]]; ps-hsel < pe && pe < ps+len(eg) {
					hide = append(hide, gi)
				}
			}
			if len(hide) == len(groups) {
				hide = nil
			}
		}
		j := jobOf(hide, h.usesErrors()) // the published forecast's W, less the hidden origins
		j.pCols = append(j.pCols, g...)
	}
	var eOut, pOut [][]float64
	if bands {
		eOut = make([][]float64, len(ec.e))
		for k := range eOut {
			eOut[k] = make([]float64, ec.n)
		}
	}
	pOut = make([][]float64, len(pc.e))
	for k := range pOut {
		pOut[k] = make([]float64, pc.n)
	}
	held := make([][]float64, len(ec.e))
	for _, jb := range jobs {
		zs := make([][]float64, len(ec.e))
		for k := range zs {
			zs[k] = make([]float64, 0, len(jb.eCols)+len(jb.pCols))
			for _, j := range jb.eCols {
				zs[k] = append(zs[k], zero(ec.e[k][j]))
			}
			for _, j := range jb.pCols {
				zs[k] = append(zs[k], zero(pc.e[k][j]))
			}
		}
		var w [][]float64
		if jb.weights {
			w = ec.e
		}
		var hidden []int // error columns hidden from W, restored below
		for _, gi := range jb.hide {
			hidden = append(hidden, groups[gi]...)
		}
		for k, row := range ec.e {
			held[k] = held[k][:0]
			for _, j := range hidden {
				held[k] = append(held[k], row[j])
				row[j] = math.NaN()
			}
		}
		r, err := reconcile.Reconcile(hs, zs, h.method, w, reconcile.Options{})
		for k, row := range ec.e {
			for c, j := range hidden {
				row[j] = held[k][c]
			}
		}
		if err != nil {
			return nil, nil, err
		}
		for k := range zs {
			for c, j := range jb.eCols {
				eOut[k][j] = r.Forecasts[k][c]
			}
			for c, j := range jb.pCols {
				pOut[k][j] = r.Forecasts[k][len(jb.eCols)+c]
			}
		}
	}
	return eOut, pOut, nil
}

// zero is v, or 0 when v is NaN (a missing error counts 0 in P e).
func zero(v float64) float64 {
	if math.IsNaN(v) {
		return 0
	}
	return v
}

// own returns node k's reconciled errors rec (one per column) at its own origins and steps,
// origin-major, keeping only the origins where the node had every step's error (the rectangle
// errorBands wants); nil when none.
func (ec errorCols) own(k int, rec []float64) [][]float64 {
	var out [][]float64
	for _, idx := range ec.origin[k] {
		row := make([]float64, len(idx))
		whole := len(idx) > 0 && (len(out) == 0 || len(idx) == len(out[0]))
		for s, j := range idx {
			whole = whole && !math.IsNaN(ec.e[k][j])
			row[s] = rec[j]
		}
		if whole {
			out = append(out, row)
		}
	}
	return out
}

// errorBands returns a node's quantiles from its reconciled backtest errors errs[i][k] (origin
// i, step k+1, n >= 2 origins) around its reconciled mean:
//
//	s_k  = sqrt(Σ_i errs[i][k]² / n)          (about zero, as for W: a bias counts as error)
//	q_jk = mean_k + s_k · t_n(p_j)
//
// the normal prediction interval for one new error when its variance is estimated from n
// independent zero-mean errors: n s_k² / σ² is χ²_n, so e_new / s_k follows Student's t with n
// degrees of freedom (common practice). The origins are a horizon apart, so their test windows
// do not overlap. Past the errors' horizon s_k grows as s_last · sqrt(k / last) (the random-walk
// rule selection's empirical quantiles use). Clipped at zero for non-negative data; nil with
// fewer than 2 origins or a spread that is not finite. Quantiles are non-decreasing in the
// level since t_n is.
func (h *hierarchy) errorBands(mean []float64, errs [][]float64) [][]float64 {
	n := len(errs)
	if n < 2 || len(errs[0]) == 0 {
		return nil
	}
	hb := min(len(errs[0]), len(mean))
	s := make([]float64, len(mean))
	for k := 0; k < hb; k++ {
		var ss float64
		for _, e := range errs {
			ss += e[k] * e[k]
		}
		s[k] = math.Sqrt(ss / float64(n))
	}
	for k := hb; k < len(mean); k++ {
		s[k] = s[hb-1] * math.Sqrt(float64(k+1)/float64(hb))
	}
	t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(n)}
	qs := make([][]float64, len(h.quantileLevels))
	for j, p := range h.quantileLevels {
		c := t.Quantile(p)
		qs[j] = make([]float64, len(mean))
		for k := range mean {
			v := mean[k] + s[k]*c
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil
			}
			if h.nonNegative && v < 0 {
				v = 0
			}
			qs[j][k] = v
		}
	}
	return qs
}

// recentred is a node's base quantiles moved by its reconciliation, q̃ = q̂ + ỹ − ŷ, clipped at
// zero for non-negative data.
func (h *hierarchy) recentred(n NodeBase, mean []float64) [][]float64 {
	qs := make([][]float64, len(n.Quantiles))
	for j, q := range n.Quantiles {
		qs[j] = make([]float64, len(q))
		for t := range q {
			v := q[t] + mean[t] - n.Mean[t]
			if h.nonNegative && v < 0 {
				v = 0
			}
			qs[j][t] = v
		}
	}
	return qs
}

// levelSums gathers, by level name, the accuracy and calibration sums of evaluated nodes.
type levelSums struct {
	acc map[string]*summary.Accuracy
	cal map[string]*summary.Calibration
}

// addAccuracy adds a's sums to level l (nothing when a evaluated no node).
func (s *levelSums) addAccuracy(l string, a summary.Accuracy) {
	if a.Evaluated == 0 {
		return
	}
	if s.acc == nil {
		s.acc = map[string]*summary.Accuracy{}
	}
	if s.acc[l] == nil {
		s.acc[l] = &summary.Accuracy{}
	}
	s.acc[l].Add(a)
}

// addCalibration adds c's sums to level l; c is left out when its quantile levels differ from
// those already added (summary.Calibration.Add), as a unit's are.
func (s *levelSums) addCalibration(l string, c summary.Calibration) {
	if c.Series == 0 {
		return
	}
	if s.cal == nil {
		s.cal = map[string]*summary.Calibration{}
	}
	if s.cal[l] == nil {
		s.cal[l] = &summary.Calibration{}
	}
	s.cal[l].Add(c)
}

// add adds one evaluation row's accuracy and its series' calibration (cals, by key) to level l.
func (s *levelSums) add(l string, r tables.EvaluationRow, cals map[string]summary.Calibration) {
	var a summary.Accuracy
	accumulate(&a, r)
	s.addAccuracy(l, a)
	if c, ok := cals[r.Key]; ok {
		s.addCalibration(l, c)
	}
}

// summaries turns per-level node counts and the sums into summary levels, sorted by name.
func (s levelSums) summaries(nodes map[string]int) []summary.Level {
	names := make([]string, 0, len(nodes))
	for n := range nodes {
		names = append(names, n)
	}
	sort.Strings(names)
	out := make([]summary.Level, 0, len(names))
	for _, n := range names {
		l := summary.Level{Name: n, Nodes: nodes[n]}
		if a := s.acc[n]; a != nil && a.Evaluated > 0 {
			l.Accuracy = a
		}
		if c := s.cal[n]; c != nil && c.Series > 0 {
			l.Calibration = c
		}
		out = append(out, l)
	}
	return out
}

// lastPeriod is the period (on the source's calendar) that holds t.
func lastPeriod(src runconfig.Source, t time.Time) (time.Time, error) {
	f, err := series.ParseFrequency(src.Frequency)
	if err != nil {
		return time.Time{}, fmt.Errorf("source.frequency: %v", err)
	}
	cal := series.Calendar{Freq: f, Anchor: series.DefaultWeekAnchor}
	if f == series.Weekly {
		if cal.Anchor, err = series.ParseWeekday(src.WeekAnchor); err != nil {
			return time.Time{}, fmt.Errorf("source.weekAnchor: %v", err)
		}
	}
	return cal.PeriodStart(t), nil
}

// extendTo appends zeros to every series that ends before end (a period), so that all end
// there: demand not recorded in the newest periods counts as zero, as in the sums. A note
// records it.
func extendTo(ss []series.Series, end time.Time) {
	if end.IsZero() {
		return
	}
	for i := range ss {
		s := &ss[i]
		n := 0
		for s.Len() > 0 && s.PeriodAt(s.Len()-1).Before(end) && n < ingest.MaxPeriods {
			s.Values = append(s.Values, 0)
			n++
		}
		for name, c := range s.Covariates {
			for len(c) < s.Len() {
				c = append(c, math.NaN())
			}
			s.Covariates[name] = c
		}
		if n > 0 {
			s.Notes = append(s.Notes, fmt.Sprintf("extended with %d zero periods to the hierarchy's last period %s", n, end.Format(time.RFC3339)))
		}
	}
}
