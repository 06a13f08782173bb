package pipeline

import (
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"sort"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/reconcile"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/summary"
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
// forecasts and one-step residuals of every node it forecast (nodes.json). The reconcile step
// adds the partial sums into the spanning nodes' histories, forecasts them with the same design,
// and reconciles the whole tree at once from the base forecasts (one projection over all nodes is
// the MinT optimum; reconciling sub-trees and then the top separately is not), replacing the
// units' forecasts with the reconciled ones (RunReconcile).
//
// Quantiles. Reconciliation moves the means; each node's quantiles keep their distance from
// the node's mean (q̃ = q̂ + ỹ − ŷ, clipped at zero for non-negative data): the node's own base
// predictive spread, from its model or its backtest errors, re-centred on the coherent mean.
// Quantiles of sums are not sums of quantiles, so coherence is promised for the means only.

// MaxResiduals bounds the one-step residuals per node kept for the MinT methods: the last
// MaxResiduals periods (five years of weekly data). A covariance of n nodes needs more periods
// than nodes to be estimated without shrinkage; more periods cost memory in nodes.json.
const MaxResiduals = 260

// hierarchy is a run's spec.hierarchy in the trainer's terms.
type hierarchy struct {
	keys   []string
	levels []hierLevel
	// bottom is the bottom level's name (every key column).
	bottom      string
	shardBy     []int // key column indices, ascending
	method      reconcile.Method
	nonNegative bool
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

// NodesVersion is the version of nodes.json.
const NodesVersion = 1

// NodesFile is nodes.json, what a unit of a hierarchical run leaves for the reconcile step:
// the base (unreconciled) forecasts and residuals of every node train forecast, and the
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
	// ResidualEnd is the period of the last residual (the node's last history period).
	ResidualEnd time.Time `json:"residualEnd"`
	Residuals   floats    `json:"residuals,omitempty"`
}

// Partial is a spanning node's history summed over one unit's series.
type Partial struct {
	Key    string    `json:"key"`
	Level  string    `json:"level"`
	Start  time.Time `json:"start"`
	Values floats    `json:"values"`
}

// usesResiduals reports whether the run's method reads residuals (the MinT methods); the
// others get none in nodes.json, which then holds little more than the forecasts.
func (h *hierarchy) usesResiduals() bool {
	return h.method == reconcile.MinTShrink || h.method == reconcile.MinTSample
}

// baseOf records a forecast node's base forecast, with the last MaxResiduals residuals when
// the method uses them.
func (h *hierarchy) baseOf(s series.Series, level string, r design.Result) NodeBase {
	nb := NodeBase{Key: s.Key, Level: level, Model: r.Chosen, First: s.PeriodAt(s.Len()), Mean: slices.Clone(r.Mean),
		ResidualEnd: s.PeriodAt(s.Len() - 1)}
	for _, q := range r.Quantiles {
		nb.Quantiles = append(nb.Quantiles, slices.Clone(q))
	}
	if !h.usesResiduals() {
		return nb
	}
	res := r.Residuals
	if len(res) > MaxResiduals {
		res = res[len(res)-MaxResiduals:]
	}
	nb.Residuals = slices.Clone(res)
	return nb
}

// treeResult is a reconciled tree: coherent means and re-centred quantiles by node key.
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
}

// reconcileTree reconciles the nodes (bottom series and aggregates, any order) with the run's
// method. Every node must have a mean of the same horizon; residuals are aligned at their
// ResidualEnd periods. Aggregates whose level the nodes hold but with no bottom node under them
// are dropped (named in dropped).
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
	end := time.Time{}
	for k, i := range order {
		base[k] = nodes[i].Mean
		if nodes[i].ResidualEnd.After(end) {
			end = nodes[i].ResidualEnd
		}
	}
	var resid [][]float64
	if h.usesResiduals() {
		resid = make([][]float64, len(order))
		for k, i := range order {
			row := make([]float64, MaxResiduals)
			for t := range row {
				row[t] = math.NaN()
			}
			r := nodes[i].Residuals
			shift := periodsBetween(freq, nodes[i].ResidualEnd, end)
			for t := 0; t < len(r); t++ {
				at := MaxResiduals - 1 - shift - (len(r) - 1 - t)
				if at >= 0 && at < MaxResiduals {
					row[at] = r[t]
				}
			}
			resid[k] = row
		}
	}
	res, err := reconcile.Reconcile(hs, base, h.method, resid, reconcile.Options{NonNegative: h.nonNegative})
	if err != nil {
		return treeResult{}, fmt.Errorf("hierarchy: %w", err)
	}
	tr.method, tr.lambda, tr.note = res.Method, res.Lambda, res.Note
	tr.deviation = reconcile.MaxDeviation(hs, res.Forecasts)
	tr.mean = make(map[string][]float64, len(order))
	tr.quantiles = make(map[string][][]float64, len(order))
	for k, i := range order {
		n := nodes[i]
		tr.mean[n.Key] = res.Forecasts[k]
		qs := make([][]float64, len(n.Quantiles))
		for j, q := range n.Quantiles {
			qs[j] = make([]float64, len(q))
			for t := range q {
				v := q[t] + res.Forecasts[k][t] - n.Mean[t]
				if h.nonNegative && v < 0 {
					v = 0
				}
				qs[j][t] = v
			}
		}
		tr.quantiles[n.Key] = qs
	}
	return tr, nil
}

// levelSummaries turns per-level node counts and accuracy into summary levels, sorted by name.
func levelSummaries(nodes map[string]int, acc map[string]*summary.Accuracy) []summary.Level {
	names := make([]string, 0, len(nodes))
	for n := range nodes {
		names = append(names, n)
	}
	sort.Strings(names)
	out := make([]summary.Level, 0, len(names))
	for _, n := range names {
		l := summary.Level{Name: n, Nodes: nodes[n]}
		if a := acc[n]; a != nil && a.Evaluated > 0 {
			l.Accuracy = a
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
