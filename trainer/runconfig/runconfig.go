// Package runconfig is the resolved configuration of one forecast run: the controller renders it
// into the run's ConfigMap (config.json), every trainer pod reads it, and a run can be reproduced
// from it alone. It is plain JSON with no Kubernetes types, so the trainer stays independent of
// the API machinery.
package runconfig

import (
	"encoding/json"
	"fmt"
	"os"
	"slices"
	"time"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
)

// FileName is the name of the rendered configuration inside the ConfigMap and under runs/<run>/.
const FileName = "config.json"

// Config is everything one run needs.
type Config struct {
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
	ScheduledTime time.Time `json:"scheduledTime,omitempty"`
	// PreviousRun is the last successfully published run, whose forecasts this run evaluates and
	// carries forward for failed shards. Empty: read latest.json, and if absent this is the first run.
	PreviousRun string `json:"previousRun,omitempty"`

	Source    Source        `json:"source"`
	Output    Output        `json:"output"`
	Horizon   int           `json:"horizon"`
	Quantiles []float64     `json:"quantiles"`
	Zoo       []models.Spec `json:"zoo"`
	// Features declares the features of the zoo's regression members whose own Features is
	// nil (the portfolio's spec.features); nil leaves them to features.Defaults.
	Features  *features.Config `json:"features,omitempty"`
	Selection Selection        `json:"selection"`
	Sharding  Sharding         `json:"sharding"`
	Drift     Drift            `json:"drift"`
	// Publish is the publish guard; nil means DefaultPublish.
	Publish *Publish `json:"publish,omitempty"`
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
}

// DefaultPublish is the guard of a configuration without one, and the API's defaults.
var DefaultPublish = Publish{MinForecastPercent: 80, MinPreviousPercent: 80, MaxCarriedForwardPercent: 50}

// PublishGuard returns the configured guard or DefaultPublish.
func (c *Config) PublishGuard() Publish {
	if c.Publish == nil {
		return DefaultPublish
	}
	return *c.Publish
}

// Source says where the input series live and how to read them.
type Source struct {
	// URI is a blob URL (file://, s3://, gs://, azblob://, mem://) of one object or a prefix ending in "/".
	URI string `json:"uri"`
	// Format is "csv" or "parquet".
	Format string `json:"format"`
	// Columns maps the input table's columns.
	Columns Columns `json:"columns"`
	// Frequency is one of the series.Frequency values.
	Frequency string `json:"frequency"`
	// WeekAnchor is the weekday weekly periods start on ("Monday".."Sunday").
	WeekAnchor string `json:"weekAnchor,omitempty"`
	// DateLayout is a Go time layout for the date column; empty means ISO 8601 (date or date-time).
	DateLayout string `json:"dateLayout,omitempty"`
	// NonNegative marks the values as demand: negative values are treated per the cleaning rules.
	NonNegative bool `json:"nonNegative"`
	// Partitioning says how the input is laid out, which decides the units plan cuts:
	// PartitionNone ("", the default) makes no promise, and units are hash buckets of the series
	// key (every train shard reads all input and keeps its buckets' rows); PartitionObject
	// promises that all rows of a series are in one object, and each object is a unit;
	// PartitionRowGroup (Parquet only) promises that all rows of a series are in one row group,
	// and each row group is a unit. A broken promise makes a series appear in two units, each
	// forecasting it from part of its history, so the default is the safe one.
	Partitioning string `json:"partitioning,omitempty"`
}

// Input layouts for Source.Partitioning.
const (
	PartitionNone     = ""
	PartitionObject   = "object"
	PartitionRowGroup = "rowGroup"
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
	// Format of the per-unit tables: "parquet" (default) or "csv".
	Format string `json:"format"`
}

// Selection configures backtest and per-series choice.
type Selection struct {
	Metric        string `json:"metric"`
	Origins       int    `json:"origins"`
	Step          int    `json:"step"`
	CombineTop    int    `json:"combineTop,omitempty"`
	CombineMethod string `json:"combineMethod,omitempty"`
	// CombineMargin is a fraction >= 0 (selection.Config.CombineMargin): the combination is
	// chosen unless the best single member's backtest score is lower than the combination's by
	// more than this fraction of the best member's score. 0 chooses it only when strictly
	// better; the controller renders spec.selection.combine.marginPercent / 100. Checked by
	// selection.Config.Validate, like the other selection settings.
	CombineMargin float64 `json:"combineMargin,omitempty"`
	// UpdateBacktest fits each member once, at the earliest backtest origin, and carries the
	// fit forward to the later ones (selection.Config.BacktestUpdate); false re-estimates at
	// every origin.
	UpdateBacktest bool `json:"updateBacktest,omitempty"`
	// Design is how the trainer decides its design (trainer/design): "auto", "perSeries" or
	// "fixed". Empty means fixed, what a configuration written before the field meant; the
	// controller always renders it (spec.selection.design, default Auto).
	Design string `json:"design,omitempty"`
	// DesignCostLimit is Auto's CPU budget per series as a multiple of the simplest candidate
	// design's (design.Options.CostLimit; 0: design.DefaultCostLimit); the controller renders
	// spec.selection.designCostPercent / 100.
	DesignCostLimit float64 `json:"designCostLimit,omitempty"`
}

// The values of Selection.Design.
const (
	DesignAuto      = "auto"
	DesignPerSeries = "perSeries"
	DesignFixed     = "fixed"
)

// Sharding configures how plan cuts units into shards.
type Sharding struct {
	// TargetSeriesPerShard is the number of series a shard should hold, approximately.
	TargetSeriesPerShard int `json:"targetSeriesPerShard"`
	// Buckets fixes the number of hash buckets for unpartitioned input (a power of two, at most
	// MaxBuckets). 0 lets plan keep the previous run's count, or choose one on the first run.
	Buckets int `json:"buckets,omitempty"`
}

// MaxBuckets bounds Sharding.Buckets.
const MaxBuckets = 1 << 16

// Drift configures how the trainer flags a series whose realized accuracy slipped.
type Drift struct {
	// Metric used for expected and realized error (same as selection unless set).
	Metric string `json:"metric"`
	// ThresholdRatio: a series drifts when realized / expected > ThresholdRatio.
	ThresholdRatio float64 `json:"thresholdRatio"`
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

// Parse decodes and validates a configuration; name is used in error messages.
func Parse(b []byte, name string) (*Config, error) {
	var c Config
	if err := json.Unmarshal(b, &c); err != nil {
		return nil, fmt.Errorf("runconfig: %s: %w", name, err)
	}
	if err := c.Validate(); err != nil {
		return nil, fmt.Errorf("runconfig: %s: %w", name, err)
	}
	return &c, nil
}

// Validate checks the fields the trainer cannot work without; errors name the JSON field.
func (c *Config) Validate() error {
	switch {
	case c.Run == "":
		return fmt.Errorf("run: must be set")
	case c.Source.URI == "":
		return fmt.Errorf("source.uri: must be set")
	case c.Source.Format != "csv" && c.Source.Format != "parquet":
		return fmt.Errorf("source.format: %q is not csv or parquet", c.Source.Format)
	case len(c.Source.Columns.Series) == 0:
		return fmt.Errorf("source.columns.series: at least one key column")
	case c.Source.Columns.Date == "" || c.Source.Columns.Value == "":
		return fmt.Errorf("source.columns: date and value must be named")
	case c.Output.URI == "":
		return fmt.Errorf("output.uri: must be set")
	case c.Output.Format != "" && c.Output.Format != "csv" && c.Output.Format != "parquet":
		return fmt.Errorf("output.format: %q is not csv or parquet", c.Output.Format)
	case c.Horizon < 1:
		return fmt.Errorf("horizon: must be >= 1, got %d", c.Horizon)
	case len(c.Zoo) == 0:
		return fmt.Errorf("zoo: at least one model")
	case c.Sharding.TargetSeriesPerShard < 1:
		return fmt.Errorf("sharding.targetSeriesPerShard: must be >= 1, got %d", c.Sharding.TargetSeriesPerShard)
	case c.Sharding.Buckets < 0 || c.Sharding.Buckets > MaxBuckets || c.Sharding.Buckets&(c.Sharding.Buckets-1) != 0:
		return fmt.Errorf("sharding.buckets: %d is not 0 or a power of two up to %d", c.Sharding.Buckets, MaxBuckets)
	case c.Source.Partitioning != PartitionNone && c.Source.Partitioning != PartitionObject && c.Source.Partitioning != PartitionRowGroup:
		return fmt.Errorf("source.partitioning: %q is not %q, %q or %q", c.Source.Partitioning, PartitionNone, PartitionObject, PartitionRowGroup)
	case c.Source.Partitioning == PartitionRowGroup && c.Source.Format != "parquet":
		return fmt.Errorf("source.partitioning: %q needs source.format parquet", PartitionRowGroup)
	case c.Selection.Design != "" && c.Selection.Design != DesignAuto && c.Selection.Design != DesignPerSeries && c.Selection.Design != DesignFixed:
		return fmt.Errorf("selection.design: %q is not %q, %q or %q", c.Selection.Design, DesignAuto, DesignPerSeries, DesignFixed)
	case c.Selection.DesignCostLimit != 0 && !(c.Selection.DesignCostLimit >= 1 && c.Selection.DesignCostLimit <= 1000):
		return fmt.Errorf("selection.designCostLimit: %v is not 0 (the default) or a ratio in [1, 1000]", c.Selection.DesignCostLimit)
	case c.Drift.ThresholdRatio < 0 || c.Drift.MinEvaluatedPoints < 0:
		return fmt.Errorf("drift: thresholdRatio and minEvaluatedPoints must be >= 0")
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
	}
	for i, q := range c.Quantiles {
		if !(q > 0 && q < 1) || (i > 0 && q <= c.Quantiles[i-1]) {
			return fmt.Errorf("quantiles[%d]: %v must be in (0,1) and strictly increasing", i, q)
		}
	}
	if err := c.checkFeatures(c.Features, ""); err != nil {
		return err
	}
	for i, m := range c.Zoo {
		if err := c.checkFeatures(m.Features, fmt.Sprintf("zoo[%d].", i)); err != nil {
			return err
		}
	}
	return nil
}

// checkFeatures validates a feature declaration (features.Config.Validate, whose errors start
// with "features.") and checks that every covariate it uses is one the input carries
// (source.columns.covariates): otherwise every series would fail the member at train time.
// prefix is prepended to the field path.
func (c *Config) checkFeatures(f *features.Config, prefix string) error {
	if f == nil {
		return nil
	}
	if err := f.Validate(); err != nil {
		return fmt.Errorf("%s%w", prefix, err)
	}
	for i, name := range f.Covariates {
		if !slices.Contains(c.Source.Columns.Covariates, name) {
			return fmt.Errorf("%sfeatures.covariates[%d]: %q is not among source.columns.covariates %v",
				prefix, i, name, c.Source.Columns.Covariates)
		}
	}
	return nil
}
