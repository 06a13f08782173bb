package v1alpha1

import (
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// ConcurrencyPolicy says what to do when a run is due while another run of the portfolio is active.
// +kubebuilder:validation:Enum=Forbid;Replace
type ConcurrencyPolicy string

const (
	// ForbidConcurrent skips the due run while another is active and records that in an Event.
	ForbidConcurrent ConcurrencyPolicy = "Forbid"
	// ReplaceConcurrent stops the active run (its Jobs are deleted) and starts the due one.
	ReplaceConcurrent ConcurrencyPolicy = "Replace"
)

// DataFormat is the encoding of input or output tables.
// +kubebuilder:validation:Enum=csv;parquet
type DataFormat string

const (
	// FormatCSV is comma-separated text with a header row.
	FormatCSV DataFormat = "csv"
	// FormatParquet is Apache Parquet.
	FormatParquet DataFormat = "parquet"
)

// Partitioning is what the input's layout promises about where a series' rows are.
// +kubebuilder:validation:Enum=HashBuckets;Objects;RowGroups
type Partitioning string

const (
	// PartitionHashBuckets promises nothing: the units are hash buckets of the series key, and
	// every train pod reads the whole input, keeping only its buckets' rows.
	PartitionHashBuckets Partitioning = "HashBuckets"
	// PartitionObjects promises that all rows of a series are in one object (e.g. one file per
	// depot): each object is a unit, and a train pod reads only its own objects.
	PartitionObjects Partitioning = "Objects"
	// PartitionRowGroups (Parquet only) promises that all rows of a series are in one row group:
	// row-group ranges are the units.
	PartitionRowGroups Partitioning = "RowGroups"
)

// Frequency is the regular spacing of the input series.
// +kubebuilder:validation:Enum=Hourly;Daily;Weekly;Monthly;Quarterly;Yearly
type Frequency string

// The supported frequencies.
const (
	Hourly    Frequency = "Hourly"
	Daily     Frequency = "Daily"
	Weekly    Frequency = "Weekly"
	Monthly   Frequency = "Monthly"
	Quarterly Frequency = "Quarterly"
	Yearly    Frequency = "Yearly"
)

// Weekday anchors weekly periods.
// +kubebuilder:validation:Enum=Monday;Tuesday;Wednesday;Thursday;Friday;Saturday;Sunday
type Weekday string

// ModelFamily names a family of forecasting models in the zoo.
// +kubebuilder:validation:Enum=Mean;Naive;SeasonalNaive;Drift;SeasonalAdjustedNaive;ETS;Theta;Croston;SBA;TSB;ARIMA;ETSARIMATheta;Ridge;Lasso;GradientBoosting;MSTLETS;MSTLTheta;MSTLARIMA;OTM;DOTM;CES;ETSARIMADOTMCESMedian;ETSARIMADOTMCESMean;FourierARIMA
type ModelFamily string

// The model families.
const (
	FamilyMean                  ModelFamily = "Mean"
	FamilyNaive                 ModelFamily = "Naive"
	FamilySeasonalNaive         ModelFamily = "SeasonalNaive"
	FamilyDrift                 ModelFamily = "Drift"
	FamilySeasonalAdjustedNaive ModelFamily = "SeasonalAdjustedNaive"
	FamilyETS                   ModelFamily = "ETS"
	FamilyTheta                 ModelFamily = "Theta"
	FamilyCroston               ModelFamily = "Croston"
	FamilySBA                   ModelFamily = "SBA"
	FamilyTSB                   ModelFamily = "TSB"
	// FamilyARIMA is seasonal ARIMA with automatic order selection (KPSS and seasonal-strength
	// differencing, stepwise AICc search; Hyndman & Khandakar 2008).
	FamilyARIMA ModelFamily = "ARIMA"
	// FamilyETSARIMATheta is the equal-weight mean of the ETS, ARIMA and Theta families.
	FamilyETSARIMATheta ModelFamily = "ETSARIMATheta"
	// FamilyRidge is linear regression on the features of spec.features with an L2 penalty.
	FamilyRidge ModelFamily = "Ridge"
	// FamilyLasso is linear regression on the features with an L1 penalty (Tibshirani 1996).
	FamilyLasso ModelFamily = "Lasso"
	// FamilyGradientBoosting is an ensemble of shallow regression trees fitted stage by stage to
	// the residuals (Friedman 2001), on the features.
	FamilyGradientBoosting ModelFamily = "GradientBoosting"
	// FamilyMSTLETS, FamilyMSTLTheta and FamilyMSTLARIMA model every seasonal cycle (see
	// seasonalPeriods): MSTL decomposition (Bandara, Hyndman & Bergmeir 2021), then ETS without a
	// season, Theta, or non-seasonal ARIMA on the seasonally adjusted series, the last cycle of
	// each seasonal component repeated and added back.
	FamilyMSTLETS   ModelFamily = "MSTLETS"
	FamilyMSTLTheta ModelFamily = "MSTLTheta"
	FamilyMSTLARIMA ModelFamily = "MSTLARIMA"
	// FamilyOTM is the optimised Theta model: Theta with θ and the smoothing weight estimated
	// (Fiorucci, Pellegrini, Louzada, Petropoulos & Koehler 2016).
	FamilyOTM ModelFamily = "OTM"
	// FamilyDOTM is the dynamic optimised Theta model: as OTM, with the trend line refitted at
	// every period (Fiorucci et al. 2016).
	FamilyDOTM ModelFamily = "DOTM"
	// FamilyCES is complex exponential smoothing (Svetunkov, Kourentzes & Ord 2022), on the
	// seasonally adjusted series.
	FamilyCES ModelFamily = "CES"
	// FamilyETSARIMADOTMCESMedian is the median of the ETS, ARIMA, DOTM and CES families
	// (Petropoulos & Svetunkov 2020).
	FamilyETSARIMADOTMCESMedian ModelFamily = "ETSARIMADOTMCESMedian"
	// FamilyETSARIMADOTMCESMean is the equal-weight mean of the ETS, ARIMA, DOTM and CES families.
	FamilyETSARIMADOTMCESMean ModelFamily = "ETSARIMADOTMCESMean"
	// FamilyFourierARIMA is dynamic harmonic regression: sine/cosine pairs for every seasonal
	// cycle (their number chosen per series by AICc) with non-seasonal ARIMA errors.
	FamilyFourierARIMA ModelFamily = "FourierARIMA"
)

// ErrorMetric is a forecast accuracy measure.
// +kubebuilder:validation:Enum=MASE;RMSSE;sMAPE;MAPE;MAE;RMSE;WAPE
type ErrorMetric string

// The error metrics.
const (
	MetricMASE  ErrorMetric = "MASE"
	MetricRMSSE ErrorMetric = "RMSSE"
	MetricSMAPE ErrorMetric = "sMAPE"
	MetricMAPE  ErrorMetric = "MAPE"
	MetricMAE   ErrorMetric = "MAE"
	MetricRMSE  ErrorMetric = "RMSE"
	MetricWAPE  ErrorMetric = "WAPE"
)

// CombineMethod is how the forecasts of the best members are combined.
// +kubebuilder:validation:Enum=Mean;Median
type CombineMethod string

// BacktestRefit says when backtest fits are estimated: Once or EveryOrigin.
// +kubebuilder:validation:Enum=Once;EveryOrigin
type BacktestRefit string

// The backtest refit choices.
const (
	RefitOnce        BacktestRefit = "Once"
	RefitEveryOrigin BacktestRefit = "EveryOrigin"
)

// QuantileWidth says how far the published quantiles lie from the mean: Backtest or Model.
// +kubebuilder:validation:Enum=Backtest;Model
type QuantileWidth string

// The quantile width choices.
const (
	// QuantileWidthBacktest scales the chosen designs' quantiles by the unit's pooled backtest.
	QuantileWidthBacktest QuantileWidth = "Backtest"
	// QuantileWidthModel publishes the chosen designs' quantiles as they are.
	QuantileWidthModel QuantileWidth = "Model"
)

// SelectionDesign says how a run decides its forecasting design: Auto, PerSeries or Fixed.
// +kubebuilder:validation:Enum=Auto;PerSeries;Fixed
type SelectionDesign string

// The design choices.
const (
	DesignAuto      SelectionDesign = "Auto"
	DesignPerSeries SelectionDesign = "PerSeries"
	DesignFixed     SelectionDesign = "Fixed"
)

// The combination methods.
const (
	CombineMean   CombineMethod = "Mean"
	CombineMedian CombineMethod = "Median"
)

// DriftAction is what the controller does when accuracy drifts.
// +kubebuilder:validation:Enum=Report;Retrain
type DriftAction string

const (
	// DriftReport only sets the AccuracyDrift condition and emits an Event.
	DriftReport DriftAction = "Report"
	// DriftRetrain also starts a run with trigger Drift, at most once per cooldown.
	DriftRetrain DriftAction = "Retrain"
)

// ForecastPortfolioSpec is the desired state of a portfolio: where its series live, when to
// retrain, which models to try, how to choose, how to shard the work and when to call accuracy slipped.
// +kubebuilder:validation:XValidation:rule="!has(self.selection) || !has(self.selection.combine) || self.selection.combine.top <= size(self.models)",message="selection.combine.top must not exceed the number of models"
// +kubebuilder:validation:XValidation:rule="!has(self.features) || !has(self.features.covariates) || self.features.covariates.all(c, has(self.source.columns) && has(self.source.columns.covariates) && c in self.source.columns.covariates)",message="features.covariates must be listed in source.columns.covariates"
// +kubebuilder:validation:XValidation:rule="!has(self.features) || self.models.exists(m, m.family in ['Ridge', 'Lasso', 'GradientBoosting'])",message="features are used only by the regression families Ridge, Lasso and GradientBoosting: add one to models"
// +kubebuilder:validation:XValidation:rule="!(self.source.uri.split('?')[0].endsWith('/') && (self.output.uri.split('?')[0].endsWith('/') ? self.output.uri.split('?')[0] : self.output.uri.split('?')[0] + '/').startsWith(self.source.uri.split('?')[0])) && !self.source.uri.split('?')[0].startsWith((self.output.uri.split('?')[0].endsWith('/') ? self.output.uri.split('?')[0] : self.output.uri.split('?')[0] + '/'))",message="output.uri and source.uri must not overlap: a run would read its own outputs as input"
// +kubebuilder:validation:XValidation:rule="!has(self.hierarchy) || self.hierarchy.levels.all(l, l.all(c, c in (has(self.source.columns) && has(self.source.columns.series) ? self.source.columns.series : ['series'])) && l.size() < size((has(self.source.columns) && has(self.source.columns.series) ? self.source.columns.series : ['series'])))",message="hierarchy.levels may name only columns of source.columns.series, and each level must leave at least one out (the bottom level, every key column, is implied)"
// +kubebuilder:validation:XValidation:rule="!has(self.hierarchy) || !has(self.hierarchy.shardBy) || (self.hierarchy.shardBy.all(c, c in (has(self.source.columns) && has(self.source.columns.series) ? self.source.columns.series : ['series'])) && self.hierarchy.shardBy.size() < size((has(self.source.columns) && has(self.source.columns.series) ? self.source.columns.series : ['series'])))",message="hierarchy.shardBy may name only columns of source.columns.series, and must leave at least one out"
// +kubebuilder:validation:XValidation:rule="!has(self.hierarchy) || !has(self.features) || !has(self.features.covariates)",message="hierarchy aggregates have no covariates (a sum of prices means nothing): drop features.covariates or the hierarchy"
type ForecastPortfolioSpec struct {
	// schedule is when to retrain, a 5-field cron expression (minute hour day-of-month month
	// day-of-week) or a macro such as @daily, evaluated in timeZone. Time zones go in timeZone,
	// not in the schedule.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=128
	// +kubebuilder:validation:XValidation:rule="!self.contains('TZ')",message="schedule must not set a time zone (TZ= or CRON_TZ=); use spec.timeZone"
	// +kubebuilder:validation:XValidation:rule="self.matches('^\\\\s*(@(yearly|annually|monthly|weekly|daily|midnight|hourly)|\\\\S+(\\\\s+\\\\S+){4})\\\\s*$')",message="schedule must have 5 fields (minute hour day-of-month month day-of-week) or be a macro like @daily"
	Schedule string `json:"schedule"`

	// timeZone is the IANA time zone the schedule is read in, e.g. "Europe/Berlin". Default UTC.
	// Daylight-saving gaps and repeats are handled as Kubernetes CronJob handles them.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	// +kubebuilder:validation:Pattern=`^[A-Za-z][A-Za-z0-9_+\-]*(/[A-Za-z0-9_+\-]+)*$`
	TimeZone *string `json:"timeZone,omitempty"`

	// suspend stops new scheduled and drift runs; an active run finishes. Default false.
	// +optional
	Suspend *bool `json:"suspend,omitempty"`

	// startingDeadlineSeconds is how late a scheduled run may start, e.g. after controller
	// downtime; a run later than this is skipped and reported as missed. Unset: no deadline.
	// +optional
	// +kubebuilder:validation:Minimum=1
	StartingDeadlineSeconds *int64 `json:"startingDeadlineSeconds,omitempty"`

	// concurrencyPolicy says what happens when a run is due while another is active:
	// Forbid (default) skips it, Replace stops the active run and starts the new one.
	// +optional
	// +kubebuilder:default=Forbid
	ConcurrencyPolicy ConcurrencyPolicy `json:"concurrencyPolicy,omitempty"`

	// successfulRunsHistoryLimit is how many succeeded ForecastRuns to keep. Default 3.
	// +optional
	// +kubebuilder:default=3
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100
	SuccessfulRunsHistoryLimit *int32 `json:"successfulRunsHistoryLimit,omitempty"`

	// failedRunsHistoryLimit is how many failed ForecastRuns to keep. Default 1.
	// +optional
	// +kubebuilder:default=1
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100
	FailedRunsHistoryLimit *int32 `json:"failedRunsHistoryLimit,omitempty"`

	// source says where the input series live and how to read them.
	// +required
	Source DataSource `json:"source"`

	// output says where forecasts are published.
	// +required
	Output DataOutput `json:"output"`

	// horizon is how many periods ahead to forecast.
	// +required
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=1000
	Horizon int32 `json:"horizon"`

	// quantilePercents are the forecast quantiles to publish, as integer percents strictly
	// increasing in 1..99, e.g. [10, 50, 90]. Default [10, 50, 90].
	// +optional
	// +kubebuilder:default={10,50,90}
	// +kubebuilder:validation:MaxItems=19
	// +kubebuilder:validation:items:Minimum=1
	// +kubebuilder:validation:items:Maximum=99
	// +kubebuilder:validation:XValidation:rule="self.all(i, self.exists_one(j, j == i)) && self.isSorted()",message="quantilePercents must be strictly increasing"
	QuantilePercents []int32 `json:"quantilePercents,omitempty"`

	// quantileWidth says how far the published quantiles lie from the mean. Each series first
	// gets the quantiles of its chosen design: its members' predictive distributions, or their
	// backtest errors for members without one. Backtest (default): then, in every trainer unit
	// of at least 30 such series, each quantile level's distance from the mean is multiplied by
	// one factor (0.33 to 3), the one that puts the level's share of the unit's pooled
	// rolling-origin backtest errors at or below it (split-conformal calibration on the
	// backtest; Lei et al. 2018, JASA 113), because the members' widths are too narrow or too
	// wide by about the same factor across similar series. Model: the designs' quantiles as
	// they are. A run with spec.hierarchy builds every node's quantiles from its reconciled
	// backtest errors either way.
	// +optional
	// +kubebuilder:default=Backtest
	QuantileWidth QuantileWidth `json:"quantileWidth,omitempty"`

	// models is the zoo: every member is fitted to every series and backtested; the best per
	// series (or a combination) is published. Listed from simplest to most complex: ties go to
	// the earlier member.
	// +required
	// +kubebuilder:validation:MinItems=1
	// +kubebuilder:validation:MaxItems=32
	// +kubebuilder:validation:XValidation:rule="self.all(m, self.exists_one(n, (has(n.name) ? n.name : n.family) == (has(m.name) ? m.name : m.family)))",message="models must have unique names (name defaults to family)"
	Models []ModelSpec `json:"models"`

	// features declares what the regression members (Ridge, Lasso, GradientBoosting) learn
	// from: calendar, events, seasonal waves, lags, trailing windows and covariates, and how
	// they are narrowed down. Other families ignore it.
	// +optional
	Features *FeaturesSpec `json:"features,omitempty"`

	// selection says how the best model per series is chosen.
	// +optional
	// +kubebuilder:default={}
	Selection SelectionSpec `json:"selection,omitempty"`

	// sharding limits how the work is cut and how many trainer pods run at once.
	// +optional
	// +kubebuilder:default={}
	Sharding ShardingSpec `json:"sharding,omitempty"`

	// trainer describes the trainer pods.
	// +required
	Trainer TrainerSpec `json:"trainer"`

	// drift says when realized accuracy counts as slipped against what the backtest promised.
	// +optional
	// +kubebuilder:default={}
	Drift DriftSpec `json:"drift,omitempty"`

	// publish is the publish guard: the least a run must forecast before it replaces the
	// published forecasts. A run below it fails with reason PublishRefused, naming its counts
	// and the most frequent rejection reasons, and the previous run stays published.
	// +optional
	// +kubebuilder:default={}
	Publish PublishSpec `json:"publish,omitempty"`

	// hierarchy adds aggregation levels over the key columns (depot totals, item totals, the
	// grand total), forecasts every node and reconciles them so that every level adds up.
	// Absent: only the input series are forecast.
	// +optional
	Hierarchy *HierarchySpec `json:"hierarchy,omitempty"`
}

// PublishSpec is the publish guard; each check is off at its permissive end (0, or 100 for
// the cap).
type PublishSpec struct {
	// minForecastPercent: the series with a published forecast (this run's, and those of
	// units carried forward) must be at least this percent of the series the run planned.
	// Default 80.
	// +optional
	// +kubebuilder:default=80
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100
	MinForecastPercent *int32 `json:"minForecastPercent,omitempty"`

	// minPreviousPercent: they must also be at least this percent of the series the previous
	// published run forecast (not checked on a first run). Default 80.
	// +optional
	// +kubebuilder:default=80
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100
	MinPreviousPercent *int32 `json:"minPreviousPercent,omitempty"`

	// maxCarriedForwardPercent: at most this percent of the run's units may be carried
	// forward from an earlier run or have no forecast at all. Default 50.
	// +optional
	// +kubebuilder:default=50
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100
	MaxCarriedForwardPercent *int32 `json:"maxCarriedForwardPercent,omitempty"`

	// maxCarriedRuns: a series that a run rejects (its rows are unusable, or no model could
	// forecast it) keeps its previous forecast, marked in the forecasts table by the
	// carried_runs and carried_from columns, for at most this many runs in a row; after that
	// it has no forecast until a run accepts it again. 0 turns per-series carry-forward off.
	// Carried series do not count as forecast for minForecastPercent and minPreviousPercent,
	// and at most maxCarriedForwardPercent of the planned series may be carried. Default 3.
	// +optional
	// +kubebuilder:default=3
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100
	MaxCarriedRuns *int32 `json:"maxCarriedRuns,omitempty"`

	// maxStalePeriods declares how stale a series may be. A forecast period is past when it
	// ends at or before the run's cutoff (its scheduled time, or the time a manual run
	// planned). Whatever the value, a series whose whole forecast is past is rejected as
	// stale (a hierarchical run whose newest period is that old fails). With a value above 0,
	// a series with more past periods than this is rejected too, and no published forecast
	// has a past period (those of a series within the limit are left out). 0, the default,
	// sets no limit short of the horizon: a series whose data arrives late publishes every
	// step, past ones included, which the next run evaluates.
	// +kubebuilder:default=0
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=10000
	MaxStalePeriods *int32 `json:"maxStalePeriods,omitempty"`
}

// DataSource locates the input table (long format: one row per series and period).
// +kubebuilder:validation:XValidation:rule="!has(self.partitioning) || self.partitioning != 'RowGroups' || (has(self.format) && self.format == 'parquet')",message="partitioning RowGroups needs format parquet"
type DataSource struct {
	// uri is a blob URL of one object or a prefix ending in "/": file://, s3://, gs://, azblob://
	// or mem://. For s3 an endpoint may be given as a query parameter.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=2048
	// +kubebuilder:validation:XValidation:rule="self.matches('^(file|s3|gs|azblob|mem)://')",message="uri must start with file://, s3://, gs://, azblob:// or mem://"
	// +kubebuilder:validation:XValidation:rule="!self.contains('/../') && !self.endsWith('/..')",message="uri must not contain '..' path segments"
	URI string `json:"uri"`

	// format is the input encoding: csv (with a header row) or parquet. Default csv.
	// +optional
	// +kubebuilder:default=csv
	Format DataFormat `json:"format,omitempty"`

	// columns maps the input table's columns.
	// +optional
	// +kubebuilder:default={}
	Columns ColumnMapping `json:"columns,omitempty"`

	// frequency is the spacing of the periods.
	// +required
	Frequency Frequency `json:"frequency"`

	// weekAnchor is the weekday weekly periods start on. Default Monday. Only for Weekly.
	// +optional
	WeekAnchor Weekday `json:"weekAnchor,omitempty"`

	// dateLayout is the layout of the date column as a Go reference-time layout, e.g.
	// "02/01/2006". Default: ISO 8601 dates or date-times.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	DateLayout string `json:"dateLayout,omitempty"`

	// nonNegative marks the values as demand that cannot be negative: negative values are
	// cleaned and forecasts and quantiles are clipped at zero. Default true.
	// +optional
	// +kubebuilder:default=true
	NonNegative *bool `json:"nonNegative,omitempty"`

	// partitioning says what the input's layout promises about where each series' rows are,
	// which decides how the work is cut: HashBuckets (default; no promise, every train pod
	// reads all input and keeps its share of series), Objects (each series lies wholly in one
	// object; pods read only their objects) or RowGroups (Parquet; each series in one row group).
	// A wrong promise splits a series across shards, so keep the default unless it holds.
	// +optional
	// +kubebuilder:default=HashBuckets
	Partitioning Partitioning `json:"partitioning,omitempty"`

	// credentialsSecretRef names a Secret in the portfolio's namespace whose keys are passed to
	// the trainer pods as environment variables (e.g. AWS_ACCESS_KEY_ID). The controller has no
	// right to read it; a missing Secret shows as the run's Stalled condition (MissingSecret)
	// once a trainer pod cannot start.
	// +optional
	CredentialsSecretRef *SecretReference `json:"credentialsSecretRef,omitempty"`
}

// SecretReference names a Secret in the same namespace as the referring object.
type SecretReference struct {
	// name of the Secret.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=253
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?(\.[a-z0-9]([-a-z0-9]*[a-z0-9])?)*$`
	Name string `json:"name"`
}

// ColumnMapping names the input columns.
// +kubebuilder:validation:XValidation:rule="!has(self.series) || !has(self.covariates) || self.covariates.all(c, !(c in self.series))",message="covariates must not repeat a series key column"
// +kubebuilder:validation:XValidation:rule="(has(self.date) ? self.date : 'date') != (has(self.value) ? self.value : 'value')",message="date and value must be different columns"
type ColumnMapping struct {
	// series are the key columns; together they identify a series (e.g. ["item", "depot"]).
	// Default ["series"].
	// +optional
	// +kubebuilder:default={series}
	// +kubebuilder:validation:MinItems=1
	// +kubebuilder:validation:MaxItems=8
	// +kubebuilder:validation:items:MinLength=1
	// +kubebuilder:validation:items:MaxLength=128
	// +kubebuilder:validation:XValidation:rule="self.all(c, self.exists_one(d, d == c))",message="series key columns must be unique"
	Series []string `json:"series,omitempty"`

	// date is the period column. Default "date".
	// +optional
	// +kubebuilder:default=date
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=128
	Date string `json:"date,omitempty"`

	// value is the observation column. Default "value".
	// +optional
	// +kubebuilder:default=value
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=128
	Value string `json:"value,omitempty"`

	// covariates are extra numeric columns carried with each series (prices, promotions).
	// +optional
	// +kubebuilder:validation:MaxItems=64
	// +kubebuilder:validation:items:MinLength=1
	// +kubebuilder:validation:items:MaxLength=128
	Covariates []string `json:"covariates,omitempty"`
}

// DataOutput says where and how results are written.
type DataOutput struct {
	// uri is the blob URL prefix runs are written under (runs/<run>/..., latest.json).
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=2048
	// +kubebuilder:validation:XValidation:rule="self.matches('^(file|s3|gs|azblob|mem)://')",message="uri must start with file://, s3://, gs://, azblob:// or mem://"
	// +kubebuilder:validation:XValidation:rule="!self.contains('/../') && !self.endsWith('/..')",message="uri must not contain '..' path segments"
	URI string `json:"uri"`

	// format of the published tables: parquet (default) or csv.
	// +optional
	// +kubebuilder:default=parquet
	Format DataFormat `json:"format,omitempty"`
}

// ModelSpec is one member of the zoo.
// +kubebuilder:validation:XValidation:rule="!has(self.ets) || self.family == 'ETS'",message="ets settings are only for family ETS"
// +kubebuilder:validation:XValidation:rule="!has(self.smoothing) || self.family in ['Croston', 'SBA', 'TSB']",message="smoothing settings are only for families Croston, SBA and TSB"
// +kubebuilder:validation:XValidation:rule="!has(self.smoothing) || !has(self.smoothing.beta) || self.family == 'TSB'",message="smoothing.beta is only for family TSB"
// +kubebuilder:validation:XValidation:rule="!has(self.regression) || self.family in ['Ridge', 'Lasso', 'GradientBoosting']",message="regression settings are only for families Ridge, Lasso and GradientBoosting"
// +kubebuilder:validation:XValidation:rule="!has(self.seasonalPeriods) || self.family in ['MSTLETS', 'MSTLTheta', 'MSTLARIMA', 'FourierARIMA']",message="seasonalPeriods are only for families MSTLETS, MSTLTheta, MSTLARIMA and FourierARIMA"
// +kubebuilder:validation:XValidation:rule="!has(self.regression) || !has(self.regression.penalty) || self.family in ['Ridge', 'Lasso']",message="regression.penalty is only for families Ridge and Lasso"
// +kubebuilder:validation:XValidation:rule="!has(self.regression) || !has(self.regression.boosting) || self.family == 'GradientBoosting'",message="regression.boosting is only for family GradientBoosting"
type ModelSpec struct {
	// family of the model.
	// +required
	Family ModelFamily `json:"family"`

	// name is the member's unique name in the zoo and in outputs. Default: the family.
	// +optional
	// +kubebuilder:validation:MaxLength=63
	// +kubebuilder:validation:Pattern=`^[A-Za-z][A-Za-z0-9_.-]*$`
	Name string `json:"name,omitempty"`

	// seasonLength overrides the season length implied by the frequency (Hourly 24, Daily 7,
	// Weekly 52, Monthly 12, Quarterly 4, Yearly 1). 1 means no season.
	// +optional
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=8784
	SeasonLength *int32 `json:"seasonLength,omitempty"`

	// seasonalPeriods overrides the cycles the multi-seasonal families (MSTL*, FourierARIMA)
	// model, as decimals from 2 to 8784, e.g. ["24", "168"]. Default: the frequency's (Hourly 24
	// and 168, Daily 7 and 365.25, Weekly 52.18, Monthly 12, Quarterly 4, Yearly none). Only
	// for those families.
	// +optional
	// +listType=atomic
	// +kubebuilder:validation:MaxItems=4
	// +kubebuilder:validation:items:Pattern=`^[0-9]{1,4}(\.[0-9]{1,4})?$`
	// +kubebuilder:validation:items:MaxLength=9
	SeasonalPeriods []string `json:"seasonalPeriods,omitempty"`

	// ets restricts the exponential-smoothing forms searched. Default: every admissible form.
	// +optional
	ETS *ETSSettings `json:"ets,omitempty"`

	// smoothing fixes the smoothing weights of the intermittent-demand families. Default: estimated.
	// +optional
	Smoothing *SmoothingSettings `json:"smoothing,omitempty"`

	// regression tunes the learner of the regression families. Default: penalty chosen per
	// series, one model per series, the trees of GradientBoosting as documented under boosting.
	// +optional
	Regression *RegressionSettings `json:"regression,omitempty"`
}

// ETSComponent is the code of one ETS component form.
// +kubebuilder:validation:Enum=N;A;Ad;M
// +kubebuilder:validation:MaxLength=2
type ETSComponent string

// ETSSettings restricts the forms of the automatic ETS search (Hyndman et al. 2008 taxonomy).
type ETSSettings struct {
	// errors lists the error forms to try: A (additive), M (multiplicative). Default both.
	// +optional
	// +kubebuilder:validation:MaxItems=2
	// +kubebuilder:validation:XValidation:rule="self.all(c, c in ['A', 'M'])",message="errors may only be A or M"
	Errors []ETSComponent `json:"errors,omitempty"`

	// trends lists the trend forms: N (none), A (additive), Ad (damped additive). Default all.
	// Quote the codes in YAML ("N"): unquoted N is read as a boolean by YAML 1.1 parsers.
	// +optional
	// +kubebuilder:validation:MaxItems=3
	// +kubebuilder:validation:XValidation:rule="self.all(c, c in ['N', 'A', 'Ad'])",message="trends may only be N, A or Ad"
	Trends []ETSComponent `json:"trends,omitempty"`

	// seasons lists the season forms: N (none), A (additive), M (multiplicative). Default all.
	// +optional
	// +kubebuilder:validation:MaxItems=3
	// +kubebuilder:validation:XValidation:rule="self.all(c, c in ['N', 'A', 'M'])",message="seasons may only be N, A or M"
	Seasons []ETSComponent `json:"seasons,omitempty"`
}

// SmoothingSettings fixes smoothing weights, as decimal strings in (0, 1].
type SmoothingSettings struct {
	// alpha smooths demand sizes (and intervals for Croston and SBA), e.g. "0.1".
	// +optional
	// +kubebuilder:validation:Pattern=`^(0?\.[0-9]{1,6}|1(\.0{1,6})?)$`
	// +kubebuilder:validation:MaxLength=8
	// +kubebuilder:validation:XValidation:rule="double(self) > 0.0",message="alpha must be greater than 0"
	Alpha string `json:"alpha,omitempty"`

	// beta smooths the demand probability of TSB, e.g. "0.05".
	// +optional
	// +kubebuilder:validation:Pattern=`^(0?\.[0-9]{1,6}|1(\.0{1,6})?)$`
	// +kubebuilder:validation:MaxLength=8
	// +kubebuilder:validation:XValidation:rule="double(self) > 0.0",message="beta must be greater than 0"
	Beta string `json:"beta,omitempty"`
}

// SelectionSpec says how each series' model is chosen.
// +kubebuilder:validation:XValidation:rule="!has(self.combine) || !has(self.design) || self.design != 'PerSeries'",message="selection.combine is not used with design PerSeries (use Fixed or Auto)"
type SelectionSpec struct {
	// design says how the forecasting design is decided. Auto (default): once per run the plan
	// step takes a sample of at most 2000 of the portfolio's series (by a hash of their keys),
	// scores candidate designs built from models on each sampled series' last horizon training
	// points (fixed combinations: the mean of ETS, Theta and DOTM when all three are listed,
	// else the mean of ETS and Theta when both are; the mean and the median of each series' 3
	// best members, the declared combination, each series' best member) and keeps per segment (frequency x demand class x history length)
	// the simplest design within one standard error of the best (Hastie, Tibshirani & Friedman
	// 2009, 7.10); every trainer shard runs it on the full histories of its series and decides
	// by the same rule on its own series only for a segment the sample did not hold; designs
	// over the designCostPercent budget are not weighed. PerSeries: each series gets its best
	// member by backtest. Fixed: exactly models and combine as declared. The chosen design is
	// in the models table's design and design_chosen_by columns and in the run's status.
	// +optional
	// +kubebuilder:default=Auto
	Design SelectionDesign `json:"design,omitempty"`

	// designCostPercent is Auto's CPU budget per series, in percent of the simplest
	// candidate design's CPU time (each member is timed alone on a few series of each segment;
	// the most expensive members leave the candidates until every candidate fits; Ridge, Lasso
	// and GradientBoosting, the only members that read planned covariates and events, never
	// leave and do not count against the budget). A ratio rather than milliseconds, so one
	// value suits every machine and series length. The members are timed interleaved, so that
	// the node's load falls on all alike, and a member whose cost lies within 20% of the
	// budget keeps the previous run's verdict, so that timing noise does not move it in and
	// out of the zoo from run to run. The run's status.droppedMembers and status.heldMembers
	// name them; its plan.json (design) and report give each member's cost. Default 500.
	// +optional
	// +kubebuilder:default=500
	// +kubebuilder:validation:Minimum=100
	// +kubebuilder:validation:Maximum=100000
	DesignCostPercent int32 `json:"designCostPercent,omitempty"`

	// metric ranks the zoo members by backtest error. Default MASE (Hyndman & Koehler 2006).
	// MASE and RMSSE scale by the history's mean naive change at the season length, or at one
	// period when the history holds fewer than two seasons.
	// +optional
	// +kubebuilder:default=MASE
	Metric ErrorMetric `json:"metric,omitempty"`

	// backtestOrigins is the number of rolling forecast origins per series. Default 3.
	// +optional
	// +kubebuilder:default=3
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=52
	BacktestOrigins int32 `json:"backtestOrigins,omitempty"`

	// backtestStep is the number of periods between rolling origins. Default 1.
	// +optional
	// +kubebuilder:default=1
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=366
	BacktestStep int32 `json:"backtestStep,omitempty"`

	// backtestRefit says when members are estimated during the backtest. Once (default): each
	// member is fitted at the earliest origin and carried to the later origins with its
	// estimates fixed, re-running only its filter where the family allows it (ETS, ARIMA and
	// their combination; the others are refitted); EveryOrigin: every member is re-estimated at
	// every origin (Tashman 2000, "updating" against "recalibrating"). With Once an ETS or
	// ARIMA member is estimated once per series whatever backtestOrigins is; the published
	// forecasts are fitted on the whole history either way.
	// +optional
	// +kubebuilder:default=Once
	BacktestRefit BacktestRefit `json:"backtestRefit,omitempty"`

	// combine, when set, also scores the combination of the best members and publishes it
	// for series where it backtests best, or within combine.marginPercent of the best member.
	// +optional
	Combine *CombineSpec `json:"combine,omitempty"`
}

// CombineSpec configures forecast combination.
type CombineSpec struct {
	// top is how many of the best members to combine.
	// +required
	// +kubebuilder:validation:Minimum=2
	// +kubebuilder:validation:Maximum=10
	Top int32 `json:"top"`

	// method combines their forecasts: Mean (default) or Median.
	// +optional
	// +kubebuilder:default=Mean
	Method CombineMethod `json:"method,omitempty"`

	// marginPercent prefers the combination: it is published unless the best single member's
	// backtest score is lower than the combination's by more than this percent of the best
	// member's score (the combination is kept while combined <= best * (1 + marginPercent/100)).
	// 0 (default) publishes it only where it backtests strictly better; a large value such as
	// 10000 in effect always publishes it, a fixed combination of the top members. Fixed
	// combinations are robust against the selection noise of a few backtest origins
	// (Petropoulos & Svetunkov 2020, "A simple combination of univariate models"; the M4
	// results, Makridakis, Spiliotis & Assimakopoulos 2020).
	// +optional
	// +kubebuilder:default=0
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=10000
	MarginPercent int32 `json:"marginPercent,omitempty"`
}

// ShardingSpec limits how work is cut and run.
type ShardingSpec struct {
	// targetSeriesPerShard is about how many series one trainer pod trains. Default 2000.
	// +optional
	// +kubebuilder:default=2000
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=10000000
	TargetSeriesPerShard int32 `json:"targetSeriesPerShard,omitempty"`

	// maxParallel caps how many trainer pods of a run run at once. The controller gives each
	// active run parallelism = min(maxParallel, unfinished shards, its weighted share of the
	// manager's budget). Default 8.
	// +optional
	// +kubebuilder:default=8
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=10000
	MaxParallel int32 `json:"maxParallel,omitempty"`

	// shareWeight is this portfolio's weight when active runs share the manager's budget of
	// concurrent shards. Default 1.
	// +optional
	// +kubebuilder:default=1
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=100
	ShareWeight int32 `json:"shareWeight,omitempty"`

	// retriesPerShard is how many times a failing shard is retried (per-index backoff limit).
	// Default 2.
	// +optional
	// +kubebuilder:default=2
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=20
	RetriesPerShard *int32 `json:"retriesPerShard,omitempty"`

	// maxFailedShards is how many shards may fail for good while the run still publishes,
	// carrying forward their previous forecasts (the run is then Degraded). Default 0.
	// +optional
	// +kubebuilder:default=0
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=100000
	MaxFailedShards *int32 `json:"maxFailedShards,omitempty"`

	// buckets fixes the number of series-key hash buckets for HashBuckets input (0 or a power
	// of two up to 65536). Unset or 0: the trainer keeps the previous run's count and chooses
	// one on the first run from the series count and targetSeriesPerShard.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=65536
	// +kubebuilder:validation:XValidation:rule="self in [0, 1, 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048, 4096, 8192, 16384, 32768, 65536]",message="buckets must be 0 or a power of two"
	Buckets int32 `json:"buckets,omitempty"`

	// activeDeadlineSeconds bounds each of the run's Jobs. Unset: plan 7200, publish 3600,
	// train 3600 per wave of maxParallel shards plus 3600, so a hung pod cannot hold the
	// portfolio forever.
	// +optional
	// +kubebuilder:validation:Minimum=1
	ActiveDeadlineSeconds *int64 `json:"activeDeadlineSeconds,omitempty"`

	// stallAfterSeconds: a running train shard whose progress (units read, series done, units
	// written) has not moved for this long, or that printed no progress line for this long, is
	// named in the run's ShardsStalled condition. Default 900. At least 60: pods print a
	// progress line every 30 seconds.
	// +optional
	// +kubebuilder:default=900
	// +kubebuilder:validation:Minimum=60
	// +kubebuilder:validation:Maximum=604800
	StallAfterSeconds int32 `json:"stallAfterSeconds,omitempty"`
}

// TrainerSpec describes the trainer pods.
type TrainerSpec struct {
	// image is the almanac-trainer container image.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=512
	Image string `json:"image"`

	// imagePullPolicy of the trainer container. Default IfNotPresent.
	// +optional
	// +kubebuilder:default=IfNotPresent
	ImagePullPolicy corev1.PullPolicy `json:"imagePullPolicy,omitempty"`

	// resources of the trainer container.
	// +optional
	Resources corev1.ResourceRequirements `json:"resources,omitempty"`

	// nodeSelector constrains the trainer pods to matching nodes.
	// +optional
	NodeSelector map[string]string `json:"nodeSelector,omitempty"`

	// tolerations of the trainer pods.
	// +optional
	// +listType=atomic
	Tolerations []corev1.Toleration `json:"tolerations,omitempty"`

	// priorityClassName of the trainer pods.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	PriorityClassName string `json:"priorityClassName,omitempty"`

	// serviceAccountName runs the trainer pods under this ServiceAccount of the namespace (no
	// API token is mounted). Default: the namespace's default ServiceAccount.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	ServiceAccountName string `json:"serviceAccountName,omitempty"`

	// ttlSecondsAfterFinished deletes the run's finished Jobs after this long. Default 86400.
	// +optional
	// +kubebuilder:default=86400
	// +kubebuilder:validation:Minimum=0
	TTLSecondsAfterFinished *int32 `json:"ttlSecondsAfterFinished,omitempty"`
}

// DriftSpec says when accuracy counts as slipped. Realized error is measured on the new actuals
// that arrived since the previous run's forecasts; expected error is what that run's backtest
// promised, in the same metric. Drift is realized/expected above thresholdPercent/100, both
// aggregated over the evaluated series as aggregate says.
type DriftSpec struct {
	// metric compares expected and realized error. Default: the selection metric.
	// +optional
	Metric ErrorMetric `json:"metric,omitempty"`

	// thresholdPercent: accuracy drifts when realized error exceeds this percent of expected
	// error (e.g. 130 = 30% worse than promised). Must be above 100. Default 130.
	// +optional
	// +kubebuilder:default=130
	// +kubebuilder:validation:Minimum=101
	// +kubebuilder:validation:Maximum=10000
	ThresholdPercent int32 `json:"thresholdPercent,omitempty"`

	// minEvaluatedPoints is the fewest new (series, period) actuals needed before the
	// portfolio's drift is judged. Default 100.
	// +optional
	// +kubebuilder:default=100
	// +kubebuilder:validation:Minimum=1
	MinEvaluatedPoints int32 `json:"minEvaluatedPoints,omitempty"`

	// aggregate is how per-series errors are combined before expected and realized are
	// compared: GeometricMean (default; a few series with huge scaled errors, such as
	// near-constant ones, cannot decide it) or Mean (the arithmetic mean, what drift used
	// before this field existed).
	// +optional
	// +kubebuilder:default=GeometricMean
	Aggregate DriftAggregate `json:"aggregate,omitempty"`

	// calibrationFalseAlarmPercent, when set, also calls drift when the published quantiles
	// did not cover the new actuals as promised: for some level τ the count k of the n new
	// actuals at or below the τ quantile is outside E ± z·sqrt(deff·n·p(1−p) + V), E the
	// promised count (calibrationExpectation), p = E/n, deff Kish's design effect for the
	// correlation of one series' actuals across the horizon (estimated from the actuals), V
	// the sampling variance of a backtest promise, and z the normal quantile that makes a
	// forecast as good as promised trip this with at most this percent chance over all levels
	// (Bonferroni). Levels with an effective n·p·(1−p) < 5 are not judged. Absent:
	// calibration is reported, not judged.
	// +optional
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=20
	CalibrationFalseAlarmPercent int32 `json:"calibrationFalseAlarmPercent,omitempty"`

	// calibrationExpectation is what the coverage is judged against: Backtest (default), per
	// series the share its published quantiles covered on its own rolling-origin backtest
	// (the level itself for a series without one), so drift means "covers differently from
	// when it was trained"; or Nominal, the levels themselves, so drift means "the bands are
	// not what they say", even when the backtest already showed it.
	// +optional
	// +kubebuilder:default=Backtest
	CalibrationExpectation CalibrationExpectation `json:"calibrationExpectation,omitempty"`

	// maxBiasPercent, when set, also calls drift when the mean scaled error (forecast −
	// actual) / scale of the new actuals is beyond ± this percent of the scale. Absent: bias
	// is reported, not judged.
	// +optional
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=1000
	MaxBiasPercent int32 `json:"maxBiasPercent,omitempty"`

	// action on drift: Report (default) or Retrain.
	// +optional
	// +kubebuilder:default=Report
	Action DriftAction `json:"action,omitempty"`

	// cooldownSeconds is the least time between two drift-triggered runs. Default 21600.
	// +optional
	// +kubebuilder:default=21600
	// +kubebuilder:validation:Minimum=0
	CooldownSeconds *int64 `json:"cooldownSeconds,omitempty"`
}

// CalibrationExpectation is what realized coverage is compared with.
// +kubebuilder:validation:Enum=Backtest;Nominal
type CalibrationExpectation string

// Expectations of drift.calibrationExpectation.
const (
	// ExpectationBacktest: each series' share on its own backtest, the level where it has none.
	ExpectationBacktest CalibrationExpectation = "Backtest"
	// ExpectationNominal: the quantile levels.
	ExpectationNominal CalibrationExpectation = "Nominal"
)

// DriftAggregate combines per-series errors into one figure.
// +kubebuilder:validation:Enum=GeometricMean;Mean
type DriftAggregate string

// Aggregates of drift.aggregate.
const (
	// AggregateGeometricMean is exp(mean(log e_i)) over the series with e_i > 0
	// (Davydenko & Fildes 2013 average relative errors geometrically; Fleming & Wallace 1986).
	AggregateGeometricMean DriftAggregate = "GeometricMean"
	// AggregateMean is the arithmetic mean of e_i (Hyndman & Koehler 2006 average MASE so).
	AggregateMean DriftAggregate = "Mean"
)

// Condition types of a ForecastPortfolio.
const (
	// PortfolioReady is True when the spec is valid and the last run published.
	PortfolioReady = "Ready"
	// PortfolioReconciling is True while a run is active.
	PortfolioReconciling = "Reconciling"
	// PortfolioStalled is True when the controller cannot make progress without a user fix.
	PortfolioStalled = "Stalled"
	// PortfolioAccuracyDrift is True when realized accuracy slipped past the threshold.
	PortfolioAccuracyDrift = "AccuracyDrift"
)

// Condition reasons of a ForecastPortfolio, shared with Events.
const (
	ReasonInvalidSchedule = "InvalidSchedule"
	ReasonInvalidTimeZone = "InvalidTimeZone"
	ReasonMissingSecret   = "MissingSecret"
	ReasonRunActive       = "RunActive"
	ReasonRunSucceeded    = "RunSucceeded"
	ReasonRunFailed       = "RunFailed"
	ReasonNoRunYet        = "NoRunYet"
	ReasonSuspended       = "Suspended"
	ReasonWithinThreshold = "WithinThreshold"
	ReasonAboveThreshold  = "AboveThreshold"
	ReasonTooFewPoints    = "TooFewPoints"
	// ReasonLevelAboveThreshold: the run as a whole is within spec.drift.thresholdPercent,
	// but the nodes of some hierarchy level are above it (status.hierarchyLevels).
	ReasonLevelAboveThreshold = "LevelAboveThreshold"
	// ReasonCalibrationOff: the published quantiles covered the new actuals more or less
	// often than their levels by more than the binomial tolerance.
	ReasonCalibrationOff = "CalibrationOff"
	// ReasonBiased: the mean scaled error is beyond spec.drift.maxBiasPercent.
	ReasonBiased = "Biased"
	// ReasonCalibrationHeld: a hierarchy level's quantiles covered its new actuals as
	// promised and its bias is within spec.drift.maxBiasPercent (the rules that are set).
	ReasonCalibrationHeld = "CalibrationHeld"
	// ReasonLevelCalibrationOff: the input series' accuracy and calibration and every level's
	// accuracy are within spec.drift, but some hierarchy level's quantiles are not
	// (status.hierarchyLevels[].calibrationDrift).
	ReasonLevelCalibrationOff = "LevelCalibrationOff"
	// ReasonLevelBiased: as ReasonLevelCalibrationOff, for a level's bias alone.
	ReasonLevelBiased      = "LevelBiased"
	ReasonNotEvaluated     = "NotEvaluated"
	ReasonSpecValid        = "SpecValid"
	ReasonMissedSchedule   = "MissedSchedule"
	ReasonSkippedForbidden = "SkippedForbidden"
	// ReasonIdle: no run is active (the Reconciling condition is False).
	ReasonIdle = "Idle"
	// ReasonRunsReplaced: concurrencyPolicy Replace is stopping the active runs for a due one.
	ReasonRunsReplaced = "ReplacingRuns"
	// ReasonRunCreated: the controller started a scheduled or drift run (Event only).
	ReasonRunCreated = "RunCreated"
)

// ForecastPortfolioStatus is the observed state of a portfolio.
type ForecastPortfolioStatus struct {
	// observedGeneration is the spec generation this status was computed from.
	// +optional
	ObservedGeneration int64 `json:"observedGeneration,omitempty"`

	// conditions: Ready, Reconciling, Stalled, AccuracyDrift.
	// +optional
	// +listType=map
	// +listMapKey=type
	Conditions []metav1.Condition `json:"conditions,omitempty"`

	// lastScheduleTime is the schedule time of the last run started by the schedule.
	// +optional
	LastScheduleTime *metav1.Time `json:"lastScheduleTime,omitempty"`

	// nextScheduleTime is when the next scheduled run is due.
	// +optional
	NextScheduleTime *metav1.Time `json:"nextScheduleTime,omitempty"`

	// lastSuccessfulRun is the name of the newest run that published.
	// +optional
	LastSuccessfulRun string `json:"lastSuccessfulRun,omitempty"`

	// lastSuccessfulTime is when that run completed.
	// +optional
	LastSuccessfulTime *metav1.Time `json:"lastSuccessfulTime,omitempty"`

	// active lists the runs in progress.
	// +optional
	// +listType=atomic
	Active []corev1.LocalObjectReference `json:"active,omitempty"`

	// backlog is the work still to do in active runs.
	// +optional
	Backlog Backlog `json:"backlog,omitempty"`

	// accuracy is expected vs realized accuracy as of the newest run that evaluated any.
	// +optional
	Accuracy *AccuracyStatus `json:"accuracy,omitempty"`

	// hierarchyLevels is expected vs realized accuracy per hierarchy level (portfolios with
	// spec.hierarchy), from the same run as accuracy, top to bottom, with spec.drift's verdict
	// on each level alone. At most 9 entries: the 8 levels spec.hierarchy allows and the
	// bottom level.
	// +optional
	// +listType=map
	// +listMapKey=name
	HierarchyLevels []LevelAccuracy `json:"hierarchyLevels,omitempty"`

	// lastDriftRunTime is when the last drift-triggered run was started (for the cooldown).
	// +optional
	LastDriftRunTime *metav1.Time `json:"lastDriftRunTime,omitempty"`
}

// LevelAccuracy is one hierarchy level's accuracy as a run measured it on the previous run's
// forecasts of the level's nodes, and the drift verdict on it.
type LevelAccuracy struct {
	// name of the level, as the outputs' hierarchy_level column names it (e.g. total, depot,
	// item+depot).
	Name string `json:"name"`
	// nodes is how many nodes (series) of the level the run forecast.
	Nodes int64 `json:"nodes"`
	// accuracy compares the promised (backtest) and realized errors of the level's evaluated
	// nodes: metric, expected, realized, ratio and the geometric means, as status.accuracy.
	// +optional
	Accuracy *AccuracyStatus `json:"accuracy,omitempty"`
	// drift is spec.drift's rule (threshold, aggregate, minEvaluatedPoints) applied to this
	// level's nodes alone: AboveThreshold, WithinThreshold, TooFewPoints or NotEvaluated. A
	// level above the threshold makes AccuracyDrift True with reason LevelAboveThreshold
	// unless the run as a whole already is above it.
	// +optional
	Drift string `json:"drift,omitempty"`
	// calibrationDrift is spec.drift's calibration and bias rules (calibrationFalseAlarmPercent,
	// maxBiasPercent) applied to this level's nodes alone: CalibrationOff, Biased, or
	// CalibrationHeld when neither fires; absent when neither rule is set or the level's
	// nodes have no calibration on new actuals. The false-alarm rate is shared among the levels
	// judged (Bonferroni). A level off while the input series and every level's accuracy are
	// not makes AccuracyDrift True with reason LevelCalibrationOff or LevelBiased.
	// +optional
	CalibrationDrift string `json:"calibrationDrift,omitempty"`
}

// Backlog is the work still to do.
type Backlog struct {
	// shards not yet finished in active runs.
	Shards int32 `json:"shards"`
	// series not yet trained in active runs (from the plan's estimate).
	Series int64 `json:"series"`
}

// AccuracyStatus compares the accuracy a run's backtest promised with what it achieved on the
// actuals that arrived afterwards. Values are decimal strings (no floats in the API).
type AccuracyStatus struct {
	// metric of both values.
	Metric ErrorMetric `json:"metric,omitempty"`
	// expected is the mean backtest error of the evaluated series' published models.
	Expected string `json:"expected,omitempty"`
	// realized is their mean error on the new actuals.
	Realized string `json:"realized,omitempty"`
	// ratio is realized / expected.
	Ratio string `json:"ratio,omitempty"`
	// expectedGeometric is the geometric mean of the backtest errors, exp(mean(log e)), over
	// the evaluated series whose expected and realized errors are both above 0
	// (geometricSeries of them). A few series with huge scaled errors move it little.
	// +optional
	ExpectedGeometric string `json:"expectedGeometric,omitempty"`
	// realizedGeometric is the geometric mean of their errors on the new actuals.
	// +optional
	RealizedGeometric string `json:"realizedGeometric,omitempty"`
	// geometricRatio is realizedGeometric / expectedGeometric, the geometric mean of the
	// per-series ratios realized/expected; drift judges it unless drift.aggregate is Mean.
	// +optional
	GeometricRatio string `json:"geometricRatio,omitempty"`
	// geometricSeries is how many series the geometric means are over.
	// +optional
	GeometricSeries int64 `json:"geometricSeries,omitempty"`
	// calibration lists, per published quantile level, the share of new actuals at or below
	// the quantile (a calibrated forecast expects the level) and the mean scaled pinball loss.
	// +optional
	// +listType=atomic
	Calibration []QuantileCalibration `json:"calibration,omitempty"`
	// bandCoverage is the share of new actuals inside the widest published band (between the
	// lowest and highest quantile), to compare with bandLevel, its nominal coverage.
	// +optional
	BandCoverage string `json:"bandCoverage,omitempty"`
	// +optional
	BandLevel string `json:"bandLevel,omitempty"`
	// bias is the mean of (forecast − actual) / scale over the new actuals, the scale being the
	// series' in-sample mean absolute naive error: positive means over-forecasting.
	// +optional
	Bias string `json:"bias,omitempty"`
	// calibrationPoints is how many new actuals the calibration and bias are over.
	// +optional
	CalibrationPoints int64 `json:"calibrationPoints,omitempty"`
	// expectedBandCoverage is the share the widest band promised on the same actuals (per
	// series its backtest share, or bandLevel for a series without a backtest record).
	// +optional
	ExpectedBandCoverage string `json:"expectedBandCoverage,omitempty"`
	// expectedBias is the mean scaled bias of the backtested series on their own backtest,
	// weighted by their new actuals.
	// +optional
	ExpectedBias string `json:"expectedBias,omitempty"`
	// backtestSeries is how many evaluated series promised their backtest share (the others
	// promised the levels).
	// +optional
	BacktestSeries int64 `json:"backtestSeries,omitempty"`
	// movement is the mean of |new − previous forecast| / scale over the periods both the run
	// and the previous run forecast (movementPoints of them): how much the forecast moved, in
	// MASE units (1: by one typical in-sample naive step).
	// +optional
	Movement string `json:"movement,omitempty"`
	// +optional
	MovementPoints int64 `json:"movementPoints,omitempty"`
	// evaluatedSeries is how many series had new actuals to compare.
	EvaluatedSeries int64 `json:"evaluatedSeries,omitempty"`
	// evaluatedPoints is how many (series, period) actuals were compared.
	EvaluatedPoints int64 `json:"evaluatedPoints,omitempty"`
	// driftedSeries is how many series were individually above the threshold.
	DriftedSeries int64 `json:"driftedSeries,omitempty"`
	// run is the run that measured these values.
	Run string `json:"run,omitempty"`
}

// QuantileCalibration is one published quantile's record on the new actuals.
type QuantileCalibration struct {
	// level is the quantile's probability level, the share of actuals expected at or below it.
	Level string `json:"level"`
	// realized is the share of new actuals at or below the quantile.
	Realized string `json:"realized"`
	// pinballLoss is the mean pinball loss scaled by the series' in-sample mean absolute naive
	// error.
	PinballLoss string `json:"pinballLoss"`
	// expected is the share the forecasts promised at this level (per series its backtest
	// share, or the level itself).
	// +optional
	Expected string `json:"expected,omitempty"`
	// expectedPinballLoss is the mean scaled pinball loss on the backtest, over the series
	// that have one.
	// +optional
	ExpectedPinballLoss string `json:"expectedPinballLoss,omitempty"`
	// designEffect is Kish's design effect 1 + ρ·Σn_i(n_i−1)/Σn_i, with ρ the estimated
	// correlation of this level's hits within a series: how much wider than the binomial the
	// count's spread is.
	// +optional
	DesignEffect string `json:"designEffect,omitempty"`
}

// +kubebuilder:object:root=true
// +kubebuilder:subresource:status
// +kubebuilder:resource:shortName=fp,categories=almanac
// +kubebuilder:printcolumn:name="Ready",type=string,JSONPath=`.status.conditions[?(@.type=="Ready")].status`
// +kubebuilder:printcolumn:name="Schedule",type=string,JSONPath=`.spec.schedule`
// +kubebuilder:printcolumn:name="Suspend",type=boolean,JSONPath=`.spec.suspend`,priority=1
// +kubebuilder:printcolumn:name="Last Schedule",type=date,JSONPath=`.status.lastScheduleTime`
// +kubebuilder:printcolumn:name="Last Run",type=string,JSONPath=`.status.lastSuccessfulRun`
// +kubebuilder:printcolumn:name="Expected",type=string,JSONPath=`.status.accuracy.expected`
// +kubebuilder:printcolumn:name="Realized",type=string,JSONPath=`.status.accuracy.realized`
// +kubebuilder:printcolumn:name="Geo Ratio",type=string,JSONPath=`.status.accuracy.geometricRatio`,priority=1
// +kubebuilder:printcolumn:name="Drift",type=string,JSONPath=`.status.conditions[?(@.type=="AccuracyDrift")].status`
// +kubebuilder:printcolumn:name="Next",type=string,JSONPath=`.status.nextScheduleTime`,priority=1
// +kubebuilder:printcolumn:name="Age",type=date,JSONPath=`.metadata.creationTimestamp`

// ForecastPortfolio declares a portfolio of series to keep forecast: where they live, when to
// retrain, the model zoo, the selection rule, sharding limits and drift thresholds.
type ForecastPortfolio struct {
	metav1.TypeMeta   `json:",inline"`
	metav1.ObjectMeta `json:"metadata,omitempty"`

	// spec is the desired state.
	// +required
	Spec ForecastPortfolioSpec `json:"spec"`
	// status is the observed state, written by the controller only.
	// +optional
	Status ForecastPortfolioStatus `json:"status,omitempty"`
}

// +kubebuilder:object:root=true

// ForecastPortfolioList is a list of ForecastPortfolio.
type ForecastPortfolioList struct {
	metav1.TypeMeta `json:",inline"`
	metav1.ListMeta `json:"metadata,omitempty"`
	Items           []ForecastPortfolio `json:"items"`
}

func init() {
	SchemeBuilder.Register(&ForecastPortfolio{}, &ForecastPortfolioList{})
}
