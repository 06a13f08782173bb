// Package summary defines the compact JSON each trainer pod writes to its termination message
// (at most MaxBytes), the only channel by which results reach the controller, which never reads
// storage. Sums rather than means are reported so that the controller aggregates accuracy exactly
// across shards: mean = sum / count over all folded shards.
package summary

import (
	"encoding/json"
	"fmt"
)

// MaxBytes is the Kubernetes limit on a termination message.
const MaxBytes = 4096

// Kinds of summary, one per trainer command.
const (
	KindPlan    = "plan"
	KindTrain   = "train"
	KindPublish = "publish"
	// KindReconcile is the summary of `almanac-trainer reconcile`, the step between train and
	// publish that makes the nodes spanning shards add up (run only when the plan asks for it).
	KindReconcile = "reconcile"
)

// Summary is one command's result. Fields a kind does not use stay zero and are omitted.
type Summary struct {
	Kind string `json:"kind"`
	// Error, when set, is the reason the command failed (trimmed to fit).
	Error string `json:"error,omitempty"`

	// Plan: units and shards cut, series and input bytes seen.
	Units  int   `json:"units,omitempty"`
	Shards int   `json:"shards,omitempty"`
	Bytes  int64 `json:"bytes,omitempty"`
	// Reconcile (plan) is true when the run has hierarchy nodes that span shards: the
	// controller then runs the reconcile step after train and before publish.
	Reconcile bool `json:"reconcile,omitempty"`
	// DroppedMembers and HeldMembers (plan, selection.design Auto) are the zoo members the
	// design left out for cost and those that kept the previous run's cost verdict
	// (design.Record's fields of the same names; a zoo's worth of short names at most).
	DroppedMembers []string `json:"droppedMembers,omitempty"`
	HeldMembers    []string `json:"heldMembers,omitempty"`

	// Train: which shard, and its counts.
	Shard    int `json:"shard,omitempty"`
	Series   int `json:"series,omitempty"`
	Trained  int `json:"trained,omitempty"`
	Rejected int `json:"rejected,omitempty"`
	// Models counts series by chosen model family (bounded cardinality: families, not configs).
	Models map[string]int `json:"models,omitempty"`
	// Designs counts series by the design that forecast them (trainer/design; a handful of
	// names such as "ets-theta" or "per-series").
	Designs map[string]int `json:"designs,omitempty"`
	// DesignsByShard (selection.design Auto) counts, of Designs, the series whose design the
	// shard chose on its own series because the plan's decision did not hold their segment;
	// the others' design was chosen once for the run by the plan.
	DesignsByShard map[string]int `json:"designsByShard,omitempty"`
	// Accuracy holds the error sums of this shard's evaluation of the previous run's forecasts.
	Accuracy *Accuracy `json:"accuracy,omitempty"`
	// Calibration holds the coverage counts, pinball and bias sums of that evaluation.
	Calibration *Calibration `json:"calibration,omitempty"`
	// Stability sums how far this shard's new forecasts moved from the previous run's.
	Stability *Stability `json:"stability,omitempty"`
	// Levels (train and reconcile) holds, per hierarchy level, the nodes this command
	// forecast and the accuracy sums of their evaluation: a shard reports the levels of the
	// whole sub-trees it holds, the reconcile step the nodes that span shards. The controller
	// adds every source's entry of the same Name (nodes and sums), so each node must be
	// reported by exactly one source.
	Levels []Level `json:"levels,omitempty"`
	// MaxDeviation (reconcile) is the largest relative difference, over every aggregate,
	// period and promised quantile, between an aggregate's reconciled forecast and the sum of
	// its children's: the coherence the step checked before it wrote its results.
	MaxDeviation float64 `json:"maxDeviation,omitempty"`
	// DurationSeconds is the command's wall time; SeriesPerSecond its training throughput.
	DurationSeconds float64 `json:"durationSeconds,omitempty"`
	SeriesPerSecond float64 `json:"seriesPerSecond,omitempty"`

	// Publish: units whose previous forecast was carried forward because their shard failed.
	CarriedForward int    `json:"carriedForward,omitempty"`
	Manifest       string `json:"manifest,omitempty"`
	// Missing counts units with neither this run's output nor a previous forecast; the
	// manifest then says the run is incomplete.
	Missing int `json:"missing,omitempty"`
	// Broken (plan, train, publish) names the input objects the command could not read and went
	// on without (at most three, with their reasons, and the count); their series keep their
	// previous forecasts. The controller marks a published run with broken input Degraded.
	Broken string `json:"broken,omitempty"`
	// Refused is true when the publish guard refused the run (exit 5): Error says why, with
	// the counts and the most frequent rejection reasons; latest.json was not moved.
	Refused bool `json:"refused,omitempty"`
}

// Level is one hierarchy level as one command saw it (see Summary.Levels).
type Level struct {
	// Name is the level's name, e.g. "total", "depot" or "item+depot" (the trainer's).
	Name string `json:"name"`
	// Nodes is how many nodes of the level this command forecast.
	Nodes int `json:"nodes"`
	// Accuracy holds the error sums of those nodes' evaluation of the previous run's
	// forecasts (absent when none had new actuals).
	Accuracy *Accuracy `json:"accuracy,omitempty"`
	// Calibration holds the counts and sums of the same nodes' previous quantiles on their new
	// actuals, as the summary's own Calibration does for the input series (absent when none
	// had any).
	Calibration *Calibration `json:"calibration,omitempty"`
}

// Accuracy carries sums so that means aggregate exactly: expected = ExpectedSum/Evaluated,
// realized = RealizedSum/Evaluated, both in Metric. The geometric means, which a few series
// with huge scaled errors cannot decide (Davydenko & Fildes 2013, "Measuring forecasting
// accuracy: the case of judgmental adjustments to SKU-level demand forecasts", IJF 29, average
// relative errors geometrically), come from log sums over the LogEvaluated series whose
// expected and realized errors are both above 0:
//
//	expectedGeometric = exp(ExpectedLogSum / LogEvaluated)
//	realizedGeometric = exp(RealizedLogSum / LogEvaluated)
type Accuracy struct {
	Metric          string  `json:"metric"`
	Evaluated       int     `json:"evaluated"`
	EvaluatedPoints int     `json:"evaluatedPoints"`
	ExpectedSum     float64 `json:"expectedSum"`
	RealizedSum     float64 `json:"realizedSum"`
	Drifted         int     `json:"drifted"`
	LogEvaluated    int     `json:"logEvaluated,omitempty"`
	ExpectedLogSum  float64 `json:"expectedLogSum,omitempty"`
	RealizedLogSum  float64 `json:"realizedLogSum,omitempty"`
}

// Calibration carries counts and sums over the new actuals of the previous run's quantile and
// mean forecasts (see pipeline.Calibrate), so that they fold exactly across shards: for each
// level τ = Levels[j], Below[j]/Points is the realized share of actuals at or below the τ
// quantile (a calibrated forecast expects τ), PinballSum[j]/Points the mean scaled pinball loss,
// and BiasSum/Points the mean scaled error forecast − actual.
//
// The remaining fields, absent from older trainers, carry the expectation and what the
// tolerance needs (trainer/coverage.Judge), summed over series i with n_i new actuals, b_ij of
// them at or below the level-j quantile, and p_ij the share the series' published forecast
// promised at level j: its backtest share (models table backtest_below_<q> / backtest_points,
// over m_i backtest points) when the previous models table has one, τ_j otherwise:
//
//	Pairs              = Σ_i n_i (n_i − 1)         BelowPairs[j]  = Σ_i b_ij (b_ij − 1)
//	Expected[j]        = Σ_i n_i p_ij              ExpectedVar[j] = Σ_{i backtested} n_i² p_ij (1 − p_ij) / m_i
//	BacktestSeries     = #{i backtested}           BacktestPoints = Σ_{i backtested} m_i
//	BacktestActuals    = Σ_{i backtested} n_i
//	ExpectedPinballSum[j] = Σ_{i backtested} n_i · (backtest mean scaled pinball of level j)
//	ExpectedBiasSum       = Σ_{i backtested} n_i · (backtest mean scaled bias)
type Calibration struct {
	Levels     []float64 `json:"levels"`
	Series     int       `json:"series"`
	Points     int       `json:"points"`
	Below      []int     `json:"below"`
	PinballSum []float64 `json:"pinballSum"`
	BiasSum    float64   `json:"biasSum"`

	Pairs              int       `json:"pairs,omitempty"`
	BelowPairs         []int     `json:"belowPairs,omitempty"`
	Expected           []float64 `json:"expected,omitempty"`
	ExpectedVar        []float64 `json:"expectedVar,omitempty"`
	BacktestSeries     int       `json:"backtestSeries,omitempty"`
	BacktestPoints     int       `json:"backtestPoints,omitempty"`
	BacktestActuals    int       `json:"backtestActuals,omitempty"`
	ExpectedPinballSum []float64 `json:"expectedPinballSum,omitempty"`
	ExpectedBiasSum    float64   `json:"expectedBiasSum,omitempty"`
}

// HasExpectation reports whether c carries the expectation fields (a trainer that sends them
// sends Expected for every level; BelowPairs and the backtest sums with it).
func (c Calibration) HasExpectation() bool {
	return len(c.Expected) == len(c.Levels) && len(c.BelowPairs) == len(c.Levels) &&
		len(c.ExpectedVar) == len(c.Levels) && len(c.ExpectedPinballSum) == len(c.Levels)
}

// Add folds b into c. It returns false, leaving c as it was, when both hold series and their
// levels differ (a run whose previous forecasts changed quantiles part way).
func (c *Calibration) Add(b Calibration) bool {
	if b.Series == 0 {
		return true
	}
	if c.Series == 0 {
		*c = Calibration{Levels: b.Levels, Below: make([]int, len(b.Levels)), PinballSum: make([]float64, len(b.Levels))}
		if b.HasExpectation() {
			n := len(b.Levels)
			c.BelowPairs, c.Expected, c.ExpectedVar, c.ExpectedPinballSum = make([]int, n), make([]float64, n), make([]float64, n), make([]float64, n)
		}
	}
	if len(c.Levels) != len(b.Levels) || len(b.Below) != len(b.Levels) || len(b.PinballSum) != len(b.Levels) {
		return false
	}
	for j := range c.Levels {
		if c.Levels[j] != b.Levels[j] {
			return false
		}
	}
	if c.HasExpectation() && b.HasExpectation() {
		c.Pairs += b.Pairs
		c.BacktestSeries += b.BacktestSeries
		c.BacktestPoints += b.BacktestPoints
		c.BacktestActuals += b.BacktestActuals
		c.ExpectedBiasSum += b.ExpectedBiasSum
		for j := range c.Levels {
			c.BelowPairs[j] += b.BelowPairs[j]
			c.Expected[j] += b.Expected[j]
			c.ExpectedVar[j] += b.ExpectedVar[j]
			c.ExpectedPinballSum[j] += b.ExpectedPinballSum[j]
		}
	} else {
		// one side from a trainer without the expectation: the sum has none
		c.Pairs, c.BelowPairs, c.Expected, c.ExpectedVar, c.ExpectedPinballSum = 0, nil, nil, nil, nil
		c.BacktestSeries, c.BacktestPoints, c.BacktestActuals, c.ExpectedBiasSum = 0, 0, 0, 0
	}
	c.Series += b.Series
	c.Points += b.Points
	for j := range c.Levels {
		c.Below[j] += b.Below[j]
		c.PinballSum[j] += b.PinballSum[j]
	}
	c.BiasSum += b.BiasSum
	return true
}

// Stability carries the movement of the new forecast against the previous run's over the
// periods both cover: MovementSum/Points is the mean scaled movement (see pipeline.Movement).
type Stability struct {
	Series      int     `json:"series"`
	Points      int     `json:"points"`
	MovementSum float64 `json:"movementSum"`
}

// Add folds b into s.
func (s *Stability) Add(b Stability) {
	s.Series += b.Series
	s.Points += b.Points
	s.MovementSum += b.MovementSum
}

// Add folds b into a; both must use the same metric.
func (a *Accuracy) Add(b Accuracy) {
	if a.Metric == "" {
		a.Metric = b.Metric
	}
	a.Evaluated += b.Evaluated
	a.EvaluatedPoints += b.EvaluatedPoints
	a.ExpectedSum += b.ExpectedSum
	a.RealizedSum += b.RealizedSum
	a.Drifted += b.Drifted
	a.LogEvaluated += b.LogEvaluated
	a.ExpectedLogSum += b.ExpectedLogSum
	a.RealizedLogSum += b.RealizedLogSum
}

// Encode marshals s, trimming the error text, then dropping the model counts, then the
// hierarchy levels' calibration expectations, then the levels' calibrations, and then the
// calibration's expectation if needed to stay within MaxBytes (the design counts, a few short
// names, and the levels' accuracy are kept).
func Encode(s Summary) ([]byte, error) {
	b, err := json.Marshal(s)
	if err != nil {
		return nil, err
	}
	if len(b) <= MaxBytes {
		return b, nil
	}
	if len(s.Error) > 1024 {
		s.Error = s.Error[:1024] + "..."
	}
	if b, err = json.Marshal(s); err == nil && len(b) <= MaxBytes {
		return b, nil
	}
	s.Models = map[string]int{"(truncated)": s.Trained}
	if b, err = json.Marshal(s); err != nil {
		return nil, err
	}
	for _, drop := range []func(*Calibration) *Calibration{withoutExpectation, func(*Calibration) *Calibration { return nil }} {
		if len(b) <= MaxBytes || !levelsCalibrated(s.Levels) {
			break
		}
		levels := make([]Level, len(s.Levels))
		for i, l := range s.Levels {
			levels[i] = l
			if l.Calibration != nil {
				levels[i].Calibration = drop(l.Calibration)
			}
		}
		s.Levels = levels
		if b, err = json.Marshal(s); err != nil {
			return nil, err
		}
	}
	if len(b) > MaxBytes && s.Calibration != nil && s.Calibration.HasExpectation() {
		// last resort: the calibration without its expectation (judged against the nominal
		// levels, with the binomial tolerance) rather than no summary
		s.Calibration = withoutExpectation(s.Calibration)
		if b, err = json.Marshal(s); err != nil {
			return nil, err
		}
	}
	if len(b) > MaxBytes {
		return nil, fmt.Errorf("summary: %d bytes after trimming, limit %d", len(b), MaxBytes)
	}
	return b, nil
}

// withoutExpectation is c without its expectation fields (judged against the nominal levels,
// with the binomial tolerance).
func withoutExpectation(c *Calibration) *Calibration {
	d := *c
	d.Pairs, d.BelowPairs, d.Expected, d.ExpectedVar, d.ExpectedPinballSum = 0, nil, nil, nil, nil
	d.BacktestSeries, d.BacktestPoints, d.BacktestActuals, d.ExpectedBiasSum = 0, 0, 0, 0
	return &d
}

// levelsCalibrated reports whether any level carries a calibration.
func levelsCalibrated(levels []Level) bool {
	for _, l := range levels {
		if l.Calibration != nil {
			return true
		}
	}
	return false
}

// Decode parses a termination message.
func Decode(b []byte) (Summary, error) {
	var s Summary
	if err := json.Unmarshal(b, &s); err != nil {
		return s, fmt.Errorf("summary: %w", err)
	}
	if s.Kind != KindPlan && s.Kind != KindTrain && s.Kind != KindPublish && s.Kind != KindReconcile {
		return s, fmt.Errorf("summary: unknown kind %q", s.Kind)
	}
	return s, nil
}
