package v1alpha1

// ReconcileMethod is how the forecasts of a hierarchy are made to add up.
// +kubebuilder:validation:Enum=BottomUp;OLS;StructuralScaling;MinTShrink;MinTSample
type ReconcileMethod string

// The reconciliation methods. Each maps the base forecasts ŷ of every node to coherent ones
// ỹ = S G ŷ with G = (S' W⁻¹ S)⁻¹ S' W⁻¹ (Wickramasuriya, Athanasopoulos & Hyndman 2019,
// JASA 114(526); Hyndman & Athanasopoulos, Forecasting: Principles and Practice, 3rd ed.,
// section 11.3), S the summing matrix and W as below.
const (
	// ReconcileBottomUp sums the bottom series' forecasts; aggregates' own forecasts are unused.
	ReconcileBottomUp ReconcileMethod = "BottomUp"
	// ReconcileOLS takes W = I (Hyndman, Ahmed, Athanasopoulos & Shang 2011).
	ReconcileOLS ReconcileMethod = "OLS"
	// ReconcileStructuralScaling takes W diagonal with each node's count of bottom series
	// (Athanasopoulos, Hyndman, Kourentzes & Petropoulos 2017): no residuals needed.
	ReconcileStructuralScaling ReconcileMethod = "StructuralScaling"
	// ReconcileMinTShrink takes W the covariance of the nodes' backtest errors (aligned by
	// origin and step) shrunk towards its diagonal with the Schäfer & Strimmer (2005) intensity.
	ReconcileMinTShrink ReconcileMethod = "MinTShrink"
	// ReconcileMinTSample takes W the sample covariance of the backtest errors; it needs more
	// error columns (origins × steps) than nodes.
	ReconcileMinTSample ReconcileMethod = "MinTSample"
)

// HierarchySpec declares aggregation levels over the series key columns: every level is an
// ordinary series per distinct value of its columns, summed from the bottom series (one per
// full key), forecast by the same zoo and selection, and then reconciled so that every level
// adds up. A grouping attribute such as a category is declared as a key column
// (source.columns.series: [category, item, depot]); since an item has one category the key
// stays the same series.
// +kubebuilder:validation:XValidation:rule="self.levels.all(l, l.all(c, l.exists_one(d, d == c)))",message="a hierarchy level must name each column once"
// +kubebuilder:validation:XValidation:rule="self.levels.all(l, self.levels.exists_one(m, m.size() == l.size() && m.all(c, c in l)))",message="hierarchy levels must be distinct sets of columns"
// +kubebuilder:validation:XValidation:rule="!has(self.shardBy) || self.shardBy.all(c, self.shardBy.exists_one(d, d == c))",message="shardBy must name each column once"
type HierarchySpec struct {
	// levels lists the aggregation levels, each by the key columns its nodes are keyed by: e.g.
	// [[depot], [item], []] gives depot totals, item totals across depots and [] the grand
	// total. The bottom level (every key column) is implied. Each column must be one of
	// source.columns.series; a level lists a strict subset of them, each column once, and no two
	// levels list the same set.
	// +required
	// +listType=atomic
	// +kubebuilder:validation:MinItems=1
	// +kubebuilder:validation:MaxItems=8
	Levels []HierarchyLevel `json:"levels"`

	// shardBy are the key columns that keep a sub-tree on one shard: with HashBuckets input the
	// bucket of a series is the hash of these cells, so every series of a depot (say) lands on
	// one shard, and the levels that include all of them are summed and reconciled there. The
	// other levels span shards and are built and reconciled in the run's reconcile step from
	// what the shards wrote. Default: the columns of the first non-empty level. Ignored (every
	// level spans units) for Objects and RowGroups input, whose units promise nothing about
	// sub-trees.
	// +optional
	// +listType=atomic
	// +kubebuilder:validation:MinItems=1
	// +kubebuilder:validation:MaxItems=7
	// +kubebuilder:validation:items:MaxLength=128
	ShardBy []string `json:"shardBy,omitempty"`

	// method reconciles the levels: BottomUp, OLS, StructuralScaling (weights a node by its
	// number of bottom series; needs no errors), MinTShrink (default) or MinTSample. The MinT
	// methods weight the nodes by the covariance of their multi-step backtest errors, measured
	// at origins a horizon apart (a hierarchical run backtests each node's published forecast
	// there once more), so a shock shared by many series counts against their sums; MinTShrink
	// is the default because it alone beat the base forecasts at every level of the generated
	// item x depot benchmark (README). Above the trainer's dense limit (2000 nodes,
	// trainer/reconcile) MinTShrink keeps its covariance as a diagonal plus low rank (a missing
	// error counts as zero) and MinTSample weights each node by its error mean square; without
	// any node's errors both run as StructuralScaling, and the notes say so.
	// +optional
	// +kubebuilder:default=MinTShrink
	Method ReconcileMethod `json:"method,omitempty"`

	// nonNegative keeps every reconciled forecast at or above zero: the bottom series solve
	// the method's weighted least-squares problem under that constraint (BottomUp clips them
	// at zero), and every aggregate is the sum of its bottom series, so the levels still add
	// up. Default: source.nonNegative.
	// +optional
	NonNegative *bool `json:"nonNegative,omitempty"`
}

// HierarchyLevel is one aggregation level: the key columns its nodes are keyed by (none for
// the grand total).
// +kubebuilder:validation:MaxItems=7
// +kubebuilder:validation:items:MaxLength=128
type HierarchyLevel []string
