// Package runconfig is the resolved configuration of one forecast run: the controller renders it
// from a ForecastPortfolio into the run's ConfigMap (config.json), every trainer pod reads it,
// and a run can be reproduced from it alone.
//
// It speaks the API's language: every field has the name, the unit and the enum spelling of
// the ForecastPortfolio field it comes from (quantilePercents, models, backtestOrigins,
// thresholdPercent, windowStatistics, periodsBefore, pooled, Weekly, Objects, ...), with the
// apiserver's defaults written out, so nothing is left for the trainer to default. The file is
// versioned (apiVersion and kind, as Kubernetes objects are) and decoded strictly: an unknown
// key is an error naming it.
//
// The package is a contract, not engine: it imports neither the models nor the learners nor
// gonum (the controller links it), and it checks only what it can without them (required
// fields, ranges, the spellings it defines itself, decimal strings). The engine's own rules
// (frequency, metric, families, feature names, combine method) are checked by the trainer when
// it converts a Config into engine settings (trainer/pipeline.Check), before any input is read.
package runconfig

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"time"
)

// FileName is the name of the rendered configuration inside the ConfigMap and under runs/<run>/.
const FileName = "config.json"

// APIVersion and Kind head every run configuration; a file with another version is refused.
const (
	APIVersion = "trainer.almanac.dev/v1alpha1"
	Kind       = "ForecastRunConfig"
)

// Config is everything one run needs.
type Config struct {
	// APIVersion is APIVersion and Kind is Kind.
	APIVersion string `json:"apiVersion"`
	Kind       string `json:"kind"`
	// Portfolio and Namespace identify the ForecastPortfolio the run belongs to.
	Portfolio string `json:"portfolio"`
	Namespace string `json:"namespace"`
	// Run is the ForecastRun name; outputs go under runs/<Run>/ of the output URI.
	Run string `json:"run"`
	// Generation is the portfolio's metadata.generation the run was resolved from.
	Generation int64 `json:"generation"`
	// Trigger is Schedule, Manual or Drift.
	Trigger string `json:"trigger"`
	// ScheduledTime is the schedule time the run stands for (zero for manual runs).
	ScheduledTime time.Time `json:"scheduledTime,omitzero"`
	// PreviousRun is the last successfully published run, whose forecasts this run evaluates and
	// carries forward for failed shards. Empty: read latest.json, and if absent this is the first run.
	PreviousRun string `json:"previousRun,omitempty"`

	Source Source `json:"source"`
	Output Output `json:"output"`
	// Horizon is how many periods ahead to forecast.
	Horizon int `json:"horizon"`
	// QuantilePercents are the published quantiles as integer percents, strictly increasing in 1..99.
	QuantilePercents []int `json:"quantilePercents"`
	// QuantileWidth is QuantileWidthBacktest (the unit's pooled backtest scales the quantiles'
	// distances from the mean) or QuantileWidthModel (the chosen designs' quantiles as they are).
	QuantileWidth string `json:"quantileWidth"`
	// Models is the zoo, simplest first (ties go to the earlier member).
	Models []Model `json:"models"`
	// Features declares what the regression members learn from (spec.features); nil leaves
	// them to the trainer's default set for the frequency.
	Features  *Features `json:"features,omitempty"`
	Selection Selection `json:"selection"`
	Sharding  Sharding  `json:"sharding"`
	Drift     Drift     `json:"drift"`
	// Publish is the publish guard (spec.publish); nil means DefaultPublish.
	Publish *Publish `json:"publish,omitempty"`
	// Hierarchy adds aggregation levels (spec.hierarchy); nil forecasts the input series only.
	Hierarchy *Hierarchy `json:"hierarchy,omitempty"`
}

// Publish is the least a run must forecast before publish moves latest.json to it; below
// it publish writes no manifest, exits exitcode.Refused and the published run stays. The
// fields are integer percents, as in the portfolio's spec.publish; 0 turns a check off.
type Publish struct {
	// MinForecastPercent: the series with a published forecast (this run's and carried-forward
	// units') must be at least this percent of the series plan counted.
	MinForecastPercent int `json:"minForecastPercent"`
	// MinPreviousPercent: they must also be at least this percent of the series the previous
	// run published (no check on a first run).
	MinPreviousPercent int `json:"minPreviousPercent"`
	// MaxCarriedForwardPercent: at most this percent of the plan's units may be carried
	// forward or missing (100 turns the check off).
	MaxCarriedForwardPercent int `json:"maxCarriedForwardPercent"`
	// MaxCarriedRuns: a series the run rejects keeps its previous forecast, marked, for at
	// most this many runs in a row (0: never; configurations written before the field read
	// as 0). At most MaxCarriedForwardPercent of the planned series may be carried.
	MaxCarriedRuns int `json:"maxCarriedRuns"`
	// MaxStalePeriods: a series whose whole forecast ends at or before the cutoff is
	// rejected as stale whatever the value; above 0, so is a series whose last observation
	// is more than this many periods before the cutoff, and forecast periods that end at or
	// before the cutoff are not published. 0 sets no limit short of the horizon.
	MaxStalePeriods int `json:"maxStalePeriods"`
}

// DefaultPublish is the guard of a configuration without one (the controller always writes
// it). It equals the API's defaults; TestDefaultsAreTheCRDs (trainer/pipeline) holds it to the
// generated CRD.
var DefaultPublish = Publish{MinForecastPercent: 80, MinPreviousPercent: 80, MaxCarriedForwardPercent: 50, MaxCarriedRuns: 3}

// MaxCarriedRuns bounds Publish.MaxCarriedRuns, as the API's maximum does.
const MaxCarriedRuns = 100

// PublishGuard returns the configured guard or DefaultPublish.
func (c *Config) PublishGuard() Publish {
	if c.Publish == nil {
		return DefaultPublish
	}
	return *c.Publish
}

// Source says where the input series live and how to read them (spec.source).
type Source struct {
	// URI is a blob URL (file://, s3://, gs://, azblob://, mem://) of one object or a prefix ending in "/".
	URI string `json:"uri"`
	// Format is FormatCSV or FormatParquet.
	Format string `json:"format"`
	// Columns maps the input table's columns.
	Columns Columns `json:"columns"`
	// Frequency is the API's spelling: Hourly, Daily, Weekly, Monthly, Quarterly or Yearly.
	Frequency string `json:"frequency"`
	// WeekAnchor is the weekday weekly periods start on ("Monday".."Sunday").
	WeekAnchor string `json:"weekAnchor,omitempty"`
	// DateLayout is a Go time layout for the date column; empty means ISO 8601 (date or date-time).
	DateLayout string `json:"dateLayout,omitempty"`
	// NonNegative marks the values as demand: negative values are treated per the cleaning rules.
	NonNegative bool `json:"nonNegative"`
	// Partitioning says how the input is laid out, which decides the units plan cuts:
	// HashBuckets makes no promise, and units are hash buckets of the series key (every train
	// shard reads all input and keeps its buckets' rows); Objects promises that all rows of a
	// series are in one object, and each object is a unit; RowGroups (Parquet only) promises
	// that all rows of a series are in one row group, and each row group is a unit. A broken
	// promise makes a series appear in two units, each forecasting it from part of its
	// history, so the default (HashBuckets) is the safe one.
	Partitioning string `json:"partitioning"`
}

// Data formats, spelled as the files' extensions (the one exception to CamelCase enums: they
// also name the objects' suffix).
const (
	FormatCSV     = "csv"
	FormatParquet = "parquet"
)

// Input layouts for Source.Partitioning.
const (
	PartitionHashBuckets = "HashBuckets"
	PartitionObjects     = "Objects"
	PartitionRowGroups   = "RowGroups"
)

// Columns names the input table's columns.
type Columns struct {
	// Series are the key columns, in order; the output tables keep each under its own name.
	Series []string `json:"series"`
	// Date is the period column.
	Date string `json:"date"`
	// Value is the observation column.
	Value string `json:"value"`
	// Covariates are extra numeric columns carried along with the series.
	Covariates []string `json:"covariates,omitempty"`
}

// Output says where results go.
type Output struct {
	// URI is the blob URL prefix the run layout is written under.
	URI string `json:"uri"`
	// Format of the per-unit tables: FormatParquet or FormatCSV.
	Format string `json:"format"`
}

// Model is one member of the zoo (spec.models[i]).
type Model struct {
	// Family is one of the API's model families (ETS, Theta, ...).
	Family string `json:"family"`
	// Name is the member's unique name in the zoo; empty means Family.
	Name string `json:"name,omitempty"`
	// SeasonLength overrides the season length implied by the frequency; 0 keeps it.
	SeasonLength int `json:"seasonLength,omitempty"`
	// SeasonalPeriods overrides the periods of the multi-seasonal families (MSTL*), as decimal
	// strings from 2 to 8784.
	SeasonalPeriods []string `json:"seasonalPeriods,omitempty"`
	// ETS restricts the exponential-smoothing forms searched (component codes).
	ETS *ETS `json:"ets,omitempty"`
	// Smoothing fixes the weights of the intermittent-demand families.
	Smoothing *Smoothing `json:"smoothing,omitempty"`
	// Regression tunes the learner of the regression families.
	Regression *Regression `json:"regression,omitempty"`
}

// DisplayName is Name, or Family when Name is empty.
func (m Model) DisplayName() string {
	if m.Name != "" {
		return m.Name
	}
	return m.Family
}

// ETS lists the component forms to search: errors A, M; trends N, A, Ad; seasons N, A, M.
type ETS struct {
	Errors  []string `json:"errors,omitempty"`
	Trends  []string `json:"trends,omitempty"`
	Seasons []string `json:"seasons,omitempty"`
}

// Smoothing holds fixed smoothing weights as decimal strings in (0, 1]; empty means estimated.
type Smoothing struct {
	Alpha string `json:"alpha,omitempty"`
	Beta  string `json:"beta,omitempty"`
}

// Regression tunes a regression member.
type Regression struct {
	// Penalty is a decimal string above 0; empty means chosen per series.
	Penalty string `json:"penalty,omitempty"`
	// Pooled fits one model on all series of a shard together.
	Pooled bool `json:"pooled,omitempty"`
	// Boosting tunes the trees of GradientBoosting; nil means the API's defaults.
	Boosting *Boosting `json:"boosting,omitempty"`
}

// Boosting is models[].regression.boosting, resolved (render writes every field of a block
// the portfolio has).
type Boosting struct {
	// Rounds is the most trees of a step model, 1 to 5000.
	Rounds int `json:"rounds"`
	// Shrinkage is the weight of each tree as a decimal string in (0, 1].
	Shrinkage string `json:"shrinkage"`
	// TreeDepth is the depth of each tree, 1 to 12.
	TreeDepth int `json:"treeDepth"`
	// MinLeafRows is the fewest rows of a leaf, 1 to 1000.
	MinLeafRows int `json:"minLeafRows"`
	// RowSamplePercent is the percent of rows each tree is fitted on, 1 to 100.
	RowSamplePercent int `json:"rowSamplePercent"`
}

// Features is spec.features: what the regression members learn from.
type Features struct {
	// Calendar lists DayOfWeek, WeekOfYear, Month, Quarter, Weekend, PositionInMonth.
	Calendar []string  `json:"calendar,omitempty"`
	Events   []Event   `json:"events,omitempty"`
	Fourier  []Fourier `json:"fourier,omitempty"`
	// Lags are target lags in periods.
	Lags []int `json:"lags,omitempty"`
	// Windows are trailing-window lengths in periods; each gives every WindowStatistics entry.
	Windows []int `json:"windows,omitempty"`
	// WindowStatistics lists Mean, Min, Max, Std.
	WindowStatistics []string `json:"windowStatistics,omitempty"`
	// Covariates are input covariate columns used as features (each in source.columns.covariates).
	Covariates    []string          `json:"covariates,omitempty"`
	CovariateLags []int             `json:"covariateLags,omitempty"`
	Selection     *FeatureSelection `json:"selection,omitempty"`
}

// Event is one named holiday or event.
type Event struct {
	Name          string   `json:"name"`
	Dates         []string `json:"dates"`
	PeriodsBefore int      `json:"periodsBefore,omitempty"`
	PeriodsAfter  int      `json:"periodsAfter,omitempty"`
}

// Fourier asks for Order sine/cosine pairs of a cycle of Period periods (a decimal string, at least 2).
type Fourier struct {
	Period string `json:"period"`
	Order  int    `json:"order"`
}

// FeatureSelection narrows the generated features: Filter Correlation, MutualInformation or
// None; Embedded Lasso or None; FilterKeep and MaxFeatures 0 mean no limit.
type FeatureSelection struct {
	Filter      string `json:"filter,omitempty"`
	FilterKeep  int    `json:"filterKeep,omitempty"`
	Embedded    string `json:"embedded,omitempty"`
	MaxFeatures int    `json:"maxFeatures,omitempty"`
}

// Selection configures the backtest and the per-series choice (spec.selection).
type Selection struct {
	// Metric is the API's metric name (MASE, RMSSE, sMAPE, ...).
	Metric string `json:"metric"`
	// BacktestOrigins is the number of rolling origins and BacktestStep the periods between them.
	BacktestOrigins int `json:"backtestOrigins"`
	BacktestStep    int `json:"backtestStep"`
	// BacktestRefit is RefitOnce or RefitEveryOrigin.
	BacktestRefit string `json:"backtestRefit"`
	// Combine, when set, also scores the combination of the best members.
	Combine *Combine `json:"combine,omitempty"`
	// Design is how the trainer decides its design (trainer/design): DesignAuto, DesignPerSeries
	// or DesignFixed.
	Design string `json:"design"`
	// DesignCostPercent is Auto's CPU budget per series in percent of the simplest candidate
	// design's.
	DesignCostPercent int `json:"designCostPercent"`
}

// The values of Selection.Design.
const (
	DesignAuto      = "Auto"
	DesignPerSeries = "PerSeries"
	DesignFixed     = "Fixed"
)

// The values of Config.QuantileWidth.
const (
	QuantileWidthBacktest = "Backtest"
	QuantileWidthModel    = "Model"
)

// Backtest refit choices for Selection.BacktestRefit.
const (
	RefitOnce        = "Once"
	RefitEveryOrigin = "EveryOrigin"
)

// Combine configures forecast combination (spec.selection.combine).
type Combine struct {
	// Top is how many of the best members to combine (at least 2).
	Top int `json:"top"`
	// Method is Mean or Median.
	Method string `json:"method"`
	// MarginPercent keeps the combination while combined <= best * (1 + MarginPercent/100).
	MarginPercent int `json:"marginPercent"`
}

// Sharding configures how plan cuts units into shards.
type Sharding struct {
	// TargetSeriesPerShard is the number of series a shard should hold, approximately.
	TargetSeriesPerShard int `json:"targetSeriesPerShard"`
	// Buckets fixes the number of hash buckets for HashBuckets input (a power of two, at most
	// MaxBuckets). 0 lets plan keep the previous run's count, or choose one on the first run.
	Buckets int `json:"buckets,omitempty"`
}

// Overlap reports whether the output prefix and the source can hold the same objects: the
// output prefix inside a source prefix (later runs would list their own outputs as input), or
// the source inside the output prefix. Query parameters are ignored; the output URI is a prefix
// whether or not it ends in "/". The portfolio's CEL rule on spec checks the same.
func Overlap(source, output string) bool {
	src, _, _ := strings.Cut(source, "?")
	out, _, _ := strings.Cut(output, "?")
	if !strings.HasSuffix(out, "/") {
		out += "/"
	}
	return (strings.HasSuffix(src, "/") && strings.HasPrefix(out, src)) || strings.HasPrefix(src, out)
}

// MaxHorizon bounds Horizon: ten times the API's maximum (1000), for configurations written by
// hand; far larger horizons exhaust memory in the runtime, a crash no exit code can report.
const MaxHorizon = 10000

// MaxBuckets bounds Sharding.Buckets.
const MaxBuckets = 1 << 16

// Drift configures how the trainer flags a series whose realized accuracy slipped.
type Drift struct {
	// Metric used for expected and realized error (the controller writes the selection metric
	// when the portfolio names none).
	Metric string `json:"metric"`
	// ThresholdPercent: a series drifts when realized error exceeds this percent of expected.
	ThresholdPercent int `json:"thresholdPercent"`
	// MinEvaluatedPoints is the fewest new actuals a series needs before it is judged. The
	// controller renders min(portfolio spec.drift.minEvaluatedPoints, horizon): the spec's value
	// counts actuals across the whole portfolio and is applied by the controller to the sums.
	MinEvaluatedPoints int `json:"minEvaluatedPoints"`
}

// Load reads and validates a configuration file.
func Load(path string) (*Config, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("runconfig: %w", err)
	}
	return Parse(b, path)
}

// Parse decodes strictly (an unknown key, a wrong type or trailing data is an error) and
// validates a configuration; name (a file, a ConfigMap) is used in error messages.
func Parse(b []byte, name string) (*Config, error) {
	var c Config
	if err := decodeStrict(b, &c); err != nil {
		return nil, fmt.Errorf("runconfig: %s: %w", name, err)
	}
	if err := c.Validate(); err != nil {
		return nil, fmt.Errorf("runconfig: %s: %w", name, err)
	}
	return &c, nil
}

func decodeStrict(b []byte, c *Config) error {
	d := json.NewDecoder(bytes.NewReader(b))
	d.DisallowUnknownFields()
	if err := d.Decode(c); err != nil {
		var te *json.UnmarshalTypeError
		if errors.As(err, &te) && te.Field != "" {
			return fmt.Errorf("%s: %s is not a %s", te.Field, te.Value, te.Type)
		}
		return err
	}
	if _, err := d.Token(); !errors.Is(err, io.EOF) {
		return fmt.Errorf("data after the configuration object")
	}
	return nil
}

// Encode writes c as indented JSON with a final newline: the bytes the controller puts in the
// ConfigMap, and what `almanac-trainer render` prints.
func Encode(c *Config) ([]byte, error) {
	b, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

// Validate checks what the contract itself defines; errors start with the JSON path of the
// field. The engine's rules are checked by the trainer (trainer/pipeline.Check).
func (c *Config) Validate() error {
	switch {
	case c.APIVersion != APIVersion:
		return fmt.Errorf("apiVersion: %q is not %q", c.APIVersion, APIVersion)
	case c.Kind != Kind:
		return fmt.Errorf("kind: %q is not %q", c.Kind, Kind)
	case c.Run == "":
		return fmt.Errorf("run: must be set")
	case c.Source.URI == "":
		return fmt.Errorf("source.uri: must be set")
	case c.Source.Format != FormatCSV && c.Source.Format != FormatParquet:
		return fmt.Errorf("source.format: %q is not %s or %s", c.Source.Format, FormatCSV, FormatParquet)
	case c.Source.Frequency == "":
		return fmt.Errorf("source.frequency: must be set")
	case len(c.Source.Columns.Series) == 0:
		return fmt.Errorf("source.columns.series: at least one key column")
	case c.Source.Columns.Date == "":
		return fmt.Errorf("source.columns.date: must be set")
	case c.Source.Columns.Value == "":
		return fmt.Errorf("source.columns.value: must be set")
	case c.Source.Columns.Date == c.Source.Columns.Value:
		return fmt.Errorf("source.columns: date and value must be different columns, both are %q", c.Source.Columns.Date)
	case !slices.Contains([]string{PartitionHashBuckets, PartitionObjects, PartitionRowGroups}, c.Source.Partitioning):
		return fmt.Errorf("source.partitioning: %q is not %s, %s or %s", c.Source.Partitioning, PartitionHashBuckets, PartitionObjects, PartitionRowGroups)
	case c.Source.Partitioning == PartitionRowGroups && c.Source.Format != FormatParquet:
		return fmt.Errorf("source.partitioning: %s needs source.format %s", PartitionRowGroups, FormatParquet)
	case c.Output.URI == "":
		return fmt.Errorf("output.uri: must be set")
	case c.Output.Format != FormatCSV && c.Output.Format != FormatParquet:
		return fmt.Errorf("output.format: %q is not %s or %s", c.Output.Format, FormatCSV, FormatParquet)
	case Overlap(c.Source.URI, c.Output.URI):
		return fmt.Errorf("output.uri: %s and source.uri %s overlap: a run would read its own outputs as input", c.Output.URI, c.Source.URI)
	case c.Horizon < 1:
		return fmt.Errorf("horizon: must be >= 1, got %d", c.Horizon)
	case c.Horizon > MaxHorizon:
		return fmt.Errorf("horizon: must be <= %d, got %d", MaxHorizon, c.Horizon)
	case len(c.Models) == 0:
		return fmt.Errorf("models: at least one model")
	case c.QuantileWidth != QuantileWidthBacktest && c.QuantileWidth != QuantileWidthModel:
		return fmt.Errorf("quantileWidth: %q is not %s or %s", c.QuantileWidth, QuantileWidthBacktest, QuantileWidthModel)
	case c.Selection.Metric == "":
		return fmt.Errorf("selection.metric: must be set")
	case c.Selection.BacktestOrigins < 1:
		return fmt.Errorf("selection.backtestOrigins: must be >= 1, got %d", c.Selection.BacktestOrigins)
	case c.Selection.BacktestStep < 1:
		return fmt.Errorf("selection.backtestStep: must be >= 1, got %d", c.Selection.BacktestStep)
	case c.Selection.BacktestRefit != RefitOnce && c.Selection.BacktestRefit != RefitEveryOrigin:
		return fmt.Errorf("selection.backtestRefit: %q is not %s or %s", c.Selection.BacktestRefit, RefitOnce, RefitEveryOrigin)
	case c.Selection.Design != DesignAuto && c.Selection.Design != DesignPerSeries && c.Selection.Design != DesignFixed:
		return fmt.Errorf("selection.design: %q is not %s, %s or %s", c.Selection.Design, DesignAuto, DesignPerSeries, DesignFixed)
	case c.Selection.DesignCostPercent < 100:
		return fmt.Errorf("selection.designCostPercent: must be >= 100, got %d", c.Selection.DesignCostPercent)
	case c.Sharding.TargetSeriesPerShard < 1:
		return fmt.Errorf("sharding.targetSeriesPerShard: must be >= 1, got %d", c.Sharding.TargetSeriesPerShard)
	case c.Sharding.Buckets < 0 || c.Sharding.Buckets > MaxBuckets || c.Sharding.Buckets&(c.Sharding.Buckets-1) != 0:
		return fmt.Errorf("sharding.buckets: %d is not 0 or a power of two up to %d", c.Sharding.Buckets, MaxBuckets)
	case c.Drift.Metric == "":
		return fmt.Errorf("drift.metric: must be set")
	case c.Drift.ThresholdPercent < 1:
		return fmt.Errorf("drift.thresholdPercent: must be >= 1, got %d", c.Drift.ThresholdPercent)
	case c.Drift.MinEvaluatedPoints < 0:
		return fmt.Errorf("drift.minEvaluatedPoints: must be >= 0, got %d", c.Drift.MinEvaluatedPoints)
	}
	for i, k := range c.Source.Columns.Series {
		if k == "" || slices.Contains(c.Source.Columns.Series[:i], k) {
			return fmt.Errorf("source.columns.series[%d]: %q is empty or repeated", i, k)
		}
	}
	for i, p := range c.QuantilePercents {
		if p < 1 || p > 99 || (i > 0 && p <= c.QuantilePercents[i-1]) {
			return fmt.Errorf("quantilePercents[%d]: %d must be in 1..99 and strictly increasing", i, p)
		}
	}
	if cb := c.Selection.Combine; cb != nil {
		switch {
		case cb.Top < 2 || cb.Top > len(c.Models):
			return fmt.Errorf("selection.combine.top: %d is not in 2..%d (the number of models)", cb.Top, len(c.Models))
		case cb.Method == "":
			return fmt.Errorf("selection.combine.method: must be set")
		case cb.MarginPercent < 0:
			return fmt.Errorf("selection.combine.marginPercent: must be >= 0, got %d", cb.MarginPercent)
		}
	}
	if g := c.Publish; g != nil {
		for _, f := range []struct {
			name string
			v    int
		}{{"minForecastPercent", g.MinForecastPercent}, {"minPreviousPercent", g.MinPreviousPercent}, {"maxCarriedForwardPercent", g.MaxCarriedForwardPercent}} {
			if f.v < 0 || f.v > 100 {
				return fmt.Errorf("publish.%s: %d is not a percent in [0, 100]", f.name, f.v)
			}
		}
		if g.MaxCarriedRuns < 0 || g.MaxCarriedRuns > MaxCarriedRuns {
			return fmt.Errorf("publish.maxCarriedRuns: %d is not in [0, %d]", g.MaxCarriedRuns, MaxCarriedRuns)
		}
		if g.MaxStalePeriods < 0 || g.MaxStalePeriods > MaxHorizon {
			return fmt.Errorf("publish.maxStalePeriods: %d is not in [0, %d]", g.MaxStalePeriods, MaxHorizon)
		}
	}
	names := map[string]bool{}
	for i, m := range c.Models {
		if err := m.validate(); err != nil {
			return fmt.Errorf("models[%d].%w", i, err)
		}
		if names[m.DisplayName()] {
			return fmt.Errorf("models[%d]: the name %q is used twice (name defaults to family)", i, m.DisplayName())
		}
		names[m.DisplayName()] = true
	}
	if c.Features != nil {
		if err := c.Features.validate(c.Source.Columns.Covariates); err != nil {
			return fmt.Errorf("features.%w", err)
		}
	}
	if h := c.Hierarchy; h != nil {
		if err := h.validate(c.Source.Columns.Series); err != nil {
			return fmt.Errorf("hierarchy.%w", err)
		}
		if c.Features != nil && len(c.Features.Covariates) > 0 {
			return fmt.Errorf("hierarchy: aggregates have no covariates; features.covariates must be empty")
		}
	}
	return nil
}

// validate checks one member; errors start with the field below models[i].
func (m Model) validate() error {
	if m.Family == "" {
		return fmt.Errorf("family: must be set")
	}
	if m.SeasonLength < 0 {
		return fmt.Errorf("seasonLength: must be >= 1 when set, got %d", m.SeasonLength)
	}
	for i, p := range m.SeasonalPeriods {
		if x, err := Decimal(p, 0, 8784, true); err != nil || x < 2 {
			return fmt.Errorf("seasonalPeriods[%d]: %q is not a decimal from 2 to 8784", i, p)
		}
	}
	if s := m.Smoothing; s != nil {
		if _, err := Decimal(s.Alpha, 0, 1, true); err != nil {
			return fmt.Errorf("smoothing.alpha: %w", err)
		}
		if _, err := Decimal(s.Beta, 0, 1, true); err != nil {
			return fmt.Errorf("smoothing.beta: %w", err)
		}
	}
	if r := m.Regression; r != nil {
		if _, err := Decimal(r.Penalty, 0, math.Inf(1), false); err != nil {
			return fmt.Errorf("regression.penalty: %w", err)
		}
		if b := r.Boosting; b != nil {
			if err := b.validate(); err != nil {
				return fmt.Errorf("regression.boosting.%w", err)
			}
		}
	}
	return nil
}

// validate checks the ranges of the API's markers; errors start with the field below boosting.
func (b *Boosting) validate() error {
	for _, f := range []struct {
		name      string
		v, lo, hi int
	}{
		{"rounds", b.Rounds, 1, 5000},
		{"treeDepth", b.TreeDepth, 1, 12},
		{"minLeafRows", b.MinLeafRows, 1, 1000},
		{"rowSamplePercent", b.RowSamplePercent, 1, 100},
	} {
		if f.v < f.lo || f.v > f.hi {
			return fmt.Errorf("%s: %d is not in %d..%d", f.name, f.v, f.lo, f.hi)
		}
	}
	if b.Shrinkage == "" {
		return fmt.Errorf("shrinkage: must be set")
	}
	if _, err := Decimal(b.Shrinkage, 0, 1, true); err != nil {
		return fmt.Errorf("shrinkage: %w", err)
	}
	return nil
}

// validate checks the contract's part of the features (decimal strings, covariates the input
// carries); the names and ranges are the engine's (features.Config.Validate). Errors start
// with the field below features.
func (f *Features) validate(inputCovariates []string) error {
	for i, ft := range f.Fourier {
		p, err := Decimal(ft.Period, 0, math.Inf(1), false)
		if err != nil || p < 2 {
			return fmt.Errorf("fourier[%d].period: %q is not a decimal of at least 2", i, ft.Period)
		}
	}
	for i, name := range f.Covariates {
		if !slices.Contains(inputCovariates, name) {
			return fmt.Errorf("covariates[%d]: %q is not among source.columns.covariates %v", i, name, inputCovariates)
		}
	}
	return nil
}

// Decimal parses a decimal string of the API (no floats in the API) into lo < x <= hi when
// closed, lo < x < hi otherwise; the empty string is 0, "not set".
func Decimal(s string, lo, hi float64, closed bool) (float64, error) {
	if s == "" {
		return 0, nil
	}
	x, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(x) || !(x > lo) || x > hi || (!closed && x == hi) {
		if closed {
			return 0, fmt.Errorf("%q is not a decimal in (%v, %v]", s, lo, hi)
		}
		return 0, fmt.Errorf("%q is not a decimal above %v", s, lo)
	}
	return x, nil
}
