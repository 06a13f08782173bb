package v1alpha1

import (
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// RunTrigger says why a run was started.
// +kubebuilder:validation:Enum=Schedule;Manual;Drift
type RunTrigger string

const (
	// TriggerSchedule: the portfolio's schedule was due.
	TriggerSchedule RunTrigger = "Schedule"
	// TriggerManual: a user created the run.
	TriggerManual RunTrigger = "Manual"
	// TriggerDrift: the previous run reported accuracy drift and the drift action is Retrain.
	TriggerDrift RunTrigger = "Drift"
)

// RunPhase is a one-word summary of a run for `kubectl get`. It is derived from the conditions
// and never read back by the controller.
// +kubebuilder:validation:Enum=Pending;Planning;Training;Reconciling;Publishing;Succeeded;Failed
type RunPhase string

// The run phases.
const (
	PhasePending  RunPhase = "Pending"
	PhasePlanning RunPhase = "Planning"
	PhaseTraining RunPhase = "Training"
	// PhaseReconciling: the reconcile step makes the hierarchy's nodes that span shards add up
	// (only runs whose plan asked for it).
	PhaseReconciling RunPhase = "Reconciling"
	PhasePublishing  RunPhase = "Publishing"
	PhaseSucceeded   RunPhase = "Succeeded"
	PhaseFailed      RunPhase = "Failed"
)

// ForecastRunSpec identifies one retraining of a portfolio. It is immutable.
// +kubebuilder:validation:XValidation:rule="self == oldSelf",message="spec is immutable"
// +kubebuilder:validation:XValidation:rule="self.trigger != 'Schedule' || has(self.scheduledTime)",message="scheduledTime is required when trigger is Schedule"
type ForecastRunSpec struct {
	// portfolioName is the ForecastPortfolio, in the same namespace, this run retrains.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=253
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?(\.[a-z0-9]([-a-z0-9]*[a-z0-9])?)*$`
	PortfolioName string `json:"portfolioName"`

	// trigger says why the run exists: Schedule, Manual (default: a user created it) or Drift.
	// +optional
	// +kubebuilder:default=Manual
	Trigger RunTrigger `json:"trigger,omitempty"`

	// scheduledTime is the schedule time the run stands for (required for trigger Schedule).
	// +optional
	ScheduledTime *metav1.Time `json:"scheduledTime,omitempty"`
}

// Condition types of a ForecastRun.
const (
	// RunSucceeded is True when the run published, False when it failed for good.
	RunSucceeded = "Succeeded"
	// RunDegraded is True when some shards failed and their previous forecasts were carried forward.
	RunDegraded = "Degraded"
	// RunProgressing is True while the run's Jobs are working.
	RunProgressing = "Progressing"
	// RunStalled is True while a trainer pod cannot start for a reason a user must fix (its
	// container waits in CreateContainerConfigError, e.g. the credentials Secret is missing);
	// absent otherwise. The run goes on by itself once the pod starts.
	RunStalled = "Stalled"
	// RunShardsStalled is True while some running train shard has shown no progress for
	// spec.sharding.stallAfterSeconds of its portfolio; the message names the shards.
	RunShardsStalled = "ShardsStalled"
)

// Condition reasons of a ForecastRun, shared with Events.
const (
	ReasonConfigRendered    = "ConfigRendered"
	ReasonPlanning          = "Planning"
	ReasonPlanFailed        = "PlanFailed"
	ReasonTraining          = "Training"
	ReasonTooManyFailures   = "TooManyShardFailures"
	ReasonPublishing        = "Publishing"
	ReasonPublishFailed     = "PublishFailed"
	ReasonPublished         = "Published"
	ReasonShardsFailed      = "ShardsFailed"
	ReasonAllShardsTrained  = "AllShardsTrained"
	ReasonPortfolioNotFound = "PortfolioNotFound"
	ReasonReplaced          = "Replaced"
	ReasonDeadlineExceeded  = "DeadlineExceeded"
	// ReasonNameTooLong: the run's name leaves no room for its Job names (63 characters).
	ReasonNameTooLong = "NameTooLong"
	// ReasonInvalidConfig: the portfolio spec could not be rendered into a run configuration.
	ReasonInvalidConfig = "InvalidConfig"
	// ReasonPublishRefused: the publish guard (spec.publish) found too few forecasts; the run
	// published nothing and the portfolio's latest forecasts are the previous run's.
	ReasonPublishRefused = "PublishRefused"
	// ReasonBrokenInput (Degraded): the run published without input objects it could not read;
	// their series kept their previous forecasts. The message names the objects.
	ReasonBrokenInput = "BrokenInput"
	// ReasonPodConfigError: a trainer pod's container waits in CreateContainerConfigError for
	// a reason other than a missing credentials Secret (the message quotes the kubelet).
	ReasonPodConfigError = "PodConfigError"
	// ReasonImageNotAllowed: spec.trainer.image is not in the install's allowed trainer images
	// (the controller's --trainer-image-prefixes); shared with the portfolio's Stalled condition.
	ReasonImageNotAllowed = "ImageNotAllowed"
	// ReasonReconciling: the reconcile step (forecast reconciliation across shards) is running.
	ReasonReconciling = "Reconciling"
	// ReasonReconcileFailed: the reconcile step failed; nothing was published.
	ReasonReconcileFailed = "ReconcileFailed"
	// ReasonReconciled (Event): the reconcile step finished and the run goes on to publish.
	ReasonReconciled = "Reconciled"
	// ReasonNoProgress: ShardsStalled True, a running shard's progress has not moved.
	ReasonNoProgress = "NoProgress"
	// ReasonShardsProgressing: ShardsStalled False, every running shard moved recently.
	ReasonShardsProgressing = "ShardsProgressing"
	// ReasonTrainingEnded: ShardsStalled False, the train Job has ended.
	ReasonTrainingEnded = "TrainingEnded"
)

// ForecastRunStatus is the observed state of a run.
type ForecastRunStatus struct {
	// observedGeneration is the spec generation this status was computed from.
	// +optional
	ObservedGeneration int64 `json:"observedGeneration,omitempty"`

	// phase is a one-word summary derived from the conditions, for display.
	// +optional
	Phase RunPhase `json:"phase,omitempty"`

	// conditions: Succeeded, Progressing, Degraded, ShardsStalled.
	// +optional
	// +listType=map
	// +listMapKey=type
	Conditions []metav1.Condition `json:"conditions,omitempty"`

	// portfolioGeneration is the portfolio generation the run's configuration was resolved from.
	// +optional
	PortfolioGeneration int64 `json:"portfolioGeneration,omitempty"`

	// configMapName holds the resolved run configuration mounted into every trainer pod.
	// +optional
	ConfigMapName string `json:"configMapName,omitempty"`

	// startTime is when the controller started working on the run.
	// +optional
	StartTime *metav1.Time `json:"startTime,omitempty"`

	// completionTime is when the run succeeded or failed.
	// +optional
	CompletionTime *metav1.Time `json:"completionTime,omitempty"`

	// shards counts the run's shards.
	// +optional
	Shards ShardCounts `json:"shards,omitempty"`

	// series counts the run's series.
	// +optional
	Series SeriesCounts `json:"series,omitempty"`

	// parallelism is the number of trainer pods the controller last allowed at once.
	// +optional
	Parallelism int32 `json:"parallelism"`

	// models counts series by chosen model family.
	// +optional
	// +listType=map
	// +listMapKey=model
	Models []ModelCount `json:"models,omitempty"`

	// designs counts series by the design that forecast them (spec.selection.design: with
	// Auto, the design chosen per segment, e.g. ets-theta or per-series, once for the run by
	// the plan step on a sample of the portfolio, or by a shard for a segment the sample did
	// not hold (chosenByShard); with PerSeries and Fixed, per-series and declared).
	// +optional
	// +listType=map
	// +listMapKey=design
	Designs []DesignCount `json:"designs,omitempty"`

	// droppedMembers names the model families the plan's automatic design (spec.selection.design
	// Auto) left out of every design for cost: on the plan's pilot they took more CPU time per
	// series than the budget, spec.selection.designCostPercent of the cost of the first design
	// weighed (for example the mean of ETS, Theta and DOTM). Empty when none was left out or the
	// design is declared. The run's report and plan.json give each member's measured cost.
	// +optional
	// +listType=atomic
	DroppedMembers []string `json:"droppedMembers,omitempty"`

	// heldMembers names the members whose cost lay within 20% of that budget and which this run
	// therefore kept in, or left out, as the previous run's plan had them, so that a member
	// near the budget does not come and go from run to run.
	// +optional
	// +listType=atomic
	HeldMembers []string `json:"heldMembers,omitempty"`

	// accuracy compares the previous run's promised and realized accuracy on this run's new actuals.
	// +optional
	Accuracy *AccuracyStatus `json:"accuracy,omitempty"`

	// accuracySums holds the exact error sums the accuracy block is computed from, as decimal
	// strings, so that folding more shards stays exact.
	// +optional
	AccuracySums *AccuracySums `json:"accuracySums,omitempty"`

	// calibrationSums holds the exact counts and sums the calibration in the accuracy block is
	// computed from.
	// +optional
	CalibrationSums *CalibrationSums `json:"calibrationSums,omitempty"`

	// stabilitySums holds the exact sums the movement in the accuracy block is computed from.
	// +optional
	StabilitySums *StabilitySums `json:"stabilitySums,omitempty"`

	// hierarchy reports a run of a portfolio with spec.hierarchy: whether its plan needed the
	// reconcile step, the coherence that step checked, and accuracy per level.
	// +optional
	Hierarchy *HierarchyStatus `json:"hierarchy,omitempty"`

	// output is where the run's results are.
	// +optional
	Output string `json:"output,omitempty"`

	// progress is where training stands: series done of planned, the current rate, the
	// estimated end and the stalled shards. The controller reads the last progress line each
	// running train pod prints to its log every 30 seconds (no storage read, no connection
	// held), each time it requeues the run (--progress-interval).
	// +optional
	Progress *RunProgress `json:"progress,omitempty"`
}

// RunProgress is a training's progress as of observedTime.
type RunProgress struct {
	// seriesDone counts series forecast or rejected so far: those of the folded shards plus
	// those the running shards' last progress lines report.
	SeriesDone int64 `json:"seriesDone"`
	// seriesPlanned is status.series.planned (the plan's count, an estimate when the input is
	// not partitioned by series).
	// +optional
	SeriesPlanned int64 `json:"seriesPlanned,omitempty"`
	// percent is 100 * seriesDone / seriesPlanned, rounded down, at most 100 (100 once the
	// train Job has ended).
	Percent int32 `json:"percent"`
	// seriesPerSecond is the current rate (a decimal string): the change of seriesDone between
	// two readings divided by the time between them, smoothed exponentially with weight 0.5
	// on the newest reading. Once training ended: the mean rate over the whole training.
	// +optional
	SeriesPerSecond string `json:"seriesPerSecond,omitempty"`
	// estimatedEnd is when training should end at the current rate: observedTime +
	// (seriesPlanned - seriesDone) / seriesPerSecond. Once training ended: when it did.
	// +optional
	EstimatedEnd *metav1.Time `json:"estimatedEnd,omitempty"`
	// trainingStartTime is when the controller first saw the train Job.
	// +optional
	TrainingStartTime *metav1.Time `json:"trainingStartTime,omitempty"`
	// observedTime is when the progress lines were last read.
	// +optional
	ObservedTime *metav1.Time `json:"observedTime,omitempty"`
	// runningShards counts the train pods running at observedTime.
	// +optional
	RunningShards int32 `json:"runningShards,omitempty"`
	// stalledShards are the running shard indexes, as ranges like "3,7-9", whose progress has
	// not moved for the portfolio's spec.sharding.stallAfterSeconds (condition ShardsStalled).
	// +optional
	StalledShards string `json:"stalledShards,omitempty"`
}

// HierarchyStatus is what a run knows of its hierarchy, folded from the plan, train and
// reconcile summaries.
type HierarchyStatus struct {
	// reconcileStep is true when the plan found hierarchy nodes that span shards, so the run
	// has a reconcile Job between train and publish.
	// +optional
	ReconcileStep bool `json:"reconcileStep,omitempty"`
	// maxDeviation is the largest relative difference between an aggregate's reconciled
	// forecast and the sum of its children's, over every aggregate, period and quantile that
	// promises it, as the reconcile step checked it before writing (0 is exact coherence).
	// +optional
	MaxDeviation string `json:"maxDeviation,omitempty"`
	// levels lists each level with its node count and the previous run's expected and realized
	// accuracy on its nodes, summed over every shard and the reconcile step.
	// +optional
	// +listType=map
	// +listMapKey=name
	Levels []HierarchyLevelStatus `json:"levels,omitempty"`
}

// HierarchyLevelStatus is one level of the hierarchy in a run.
type HierarchyLevelStatus struct {
	// name of the level, as the trainer names it in the outputs (e.g. total, depot, item+depot).
	Name string `json:"name"`
	// nodes is how many nodes (series) of the level the run forecast.
	Nodes int64 `json:"nodes"`
	// accuracy compares the previous run's promised and realized accuracy on this level's
	// nodes (metric, expected, realized, ratio and geometric means, as status.accuracy).
	// +optional
	Accuracy *AccuracyStatus `json:"accuracy,omitempty"`
	// accuracySums holds the exact sums the accuracy is computed from.
	// +optional
	AccuracySums *AccuracySums `json:"accuracySums,omitempty"`
	// calibrationSums holds the exact counts and sums of the level's quantiles on the new
	// actuals, from which accuracy's calibration, band coverage and bias are computed (as the
	// run's calibrationSums, for this level's nodes).
	// +optional
	CalibrationSums *CalibrationSums `json:"calibrationSums,omitempty"`
}

// ShardCounts counts shards of a run.
type ShardCounts struct {
	// total shards in the plan.
	Total int32 `json:"total"`
	// active shards with a running pod.
	Active int32 `json:"active"`
	// succeeded shards.
	Succeeded int32 `json:"succeeded"`
	// failed shards (out of retries).
	Failed int32 `json:"failed"`
	// folded is the set of shard indexes whose summaries are in this status, as ranges like "0-4,7".
	// +optional
	Folded string `json:"folded,omitempty"`
	// failedIndexes is the set of shard indexes that failed for good, as ranges.
	// +optional
	FailedIndexes string `json:"failedIndexes,omitempty"`
}

// SeriesCounts counts series of a run.
type SeriesCounts struct {
	// planned is the plan's count of series in the input (an estimate when the input is not
	// partitioned by series); the portfolio's backlog is planned minus total.
	// +optional
	Planned int64 `json:"planned,omitempty"`
	// total series seen by the shards folded so far.
	Total int64 `json:"total"`
	// trained series that got a forecast.
	Trained int64 `json:"trained"`
	// rejected series that could not be used (reasons in the run's rejected.csv files).
	Rejected int64 `json:"rejected"`
	// carriedForward units whose previous forecast was republished because their shard failed.
	// +optional
	CarriedForward int64 `json:"carriedForward,omitempty"`
}

// ModelCount is how many series chose one model family.
type ModelCount struct {
	// model family.
	Model string `json:"model"`
	// series that chose it.
	Series int64 `json:"series"`
}

// DesignCount is how many series one design forecast.
type DesignCount struct {
	// design name.
	Design string `json:"design"`
	// series it forecast.
	Series int64 `json:"series"`
	// chosenByShard counts the series among them whose design their shard chose on its own
	// series, because the plan's sample held no series of their segment; the design of the
	// others was chosen once for the run by the plan.
	// +optional
	ChosenByShard int64 `json:"chosenByShard,omitempty"`
}

// AccuracySums are running sums (decimal strings) behind an AccuracyStatus.
type AccuracySums struct {
	Metric          string `json:"metric,omitempty"`
	Evaluated       int64  `json:"evaluated"`
	EvaluatedPoints int64  `json:"evaluatedPoints"`
	ExpectedSum     string `json:"expectedSum"`
	RealizedSum     string `json:"realizedSum"`
	Drifted         int64  `json:"drifted"`
	// LogEvaluated counts the series with expected and realized error above 0, whose natural
	// logarithms ExpectedLogSum and RealizedLogSum add up (the geometric means' sums).
	// +optional
	LogEvaluated int64 `json:"logEvaluated,omitempty"`
	// +optional
	ExpectedLogSum string `json:"expectedLogSum,omitempty"`
	// +optional
	RealizedLogSum string `json:"realizedLogSum,omitempty"`
}

// CalibrationSums are running counts and sums (decimal strings) over the new actuals of the
// previous run's quantile and mean forecasts, each scaled by its series' in-sample mean
// absolute naive error: per level levels[j], below[j] actuals were at or below the quantile
// and pinballSums[j] is the sum of scaled pinball losses; biasSum sums (forecast − actual) /
// scale; all over points actuals of series series.
type CalibrationSums struct {
	// +listType=atomic
	Levels []string `json:"levels"`
	Series int64    `json:"series"`
	Points int64    `json:"points"`
	// +listType=atomic
	Below []int64 `json:"below"`
	// +listType=atomic
	PinballSums []string `json:"pinballSums"`
	BiasSum     string   `json:"biasSum"`

	// The expectation and what its tolerance needs (trainer/summary.Calibration): pairs sums
	// n_i(n_i − 1) over series, belowPairs[j] the same of the per-series counts below level j,
	// expected[j] the count the forecasts promised (per series its backtest share, or the
	// level itself), expectedVariances[j] the sampling variance of that promise, and the
	// backtest sums of the series whose promise came from their backtest. Absent when a shard's
	// trainer did not send them (the levels themselves are then the expectation).
	// +optional
	Pairs int64 `json:"pairs,omitempty"`
	// +optional
	// +listType=atomic
	BelowPairs []int64 `json:"belowPairs,omitempty"`
	// +optional
	// +listType=atomic
	Expected []string `json:"expected,omitempty"`
	// +optional
	// +listType=atomic
	ExpectedVariances []string `json:"expectedVariances,omitempty"`
	// +optional
	// +listType=atomic
	ExpectedPinballSums []string `json:"expectedPinballSums,omitempty"`
	// +optional
	ExpectedBiasSum string `json:"expectedBiasSum,omitempty"`
	// +optional
	BacktestSeries int64 `json:"backtestSeries,omitempty"`
	// +optional
	BacktestPoints int64 `json:"backtestPoints,omitempty"`
	// +optional
	BacktestActuals int64 `json:"backtestActuals,omitempty"`
}

// StabilitySums are running sums (decimal string) of how far the run's new forecasts moved
// from the previous run's: movementSum adds |new − previous| / scale over the points periods
// both forecast, of series series (scale: the series' in-sample mean absolute naive error).
type StabilitySums struct {
	Series      int64  `json:"series"`
	Points      int64  `json:"points"`
	MovementSum string `json:"movementSum"`
}

// +kubebuilder:object:root=true
// +kubebuilder:subresource:status
// +kubebuilder:resource:shortName=frun,categories=almanac
// +kubebuilder:printcolumn:name="Portfolio",type=string,JSONPath=`.spec.portfolioName`
// +kubebuilder:printcolumn:name="Trigger",type=string,JSONPath=`.spec.trigger`
// +kubebuilder:printcolumn:name="Phase",type=string,JSONPath=`.status.phase`
// +kubebuilder:printcolumn:name="Shards",type=integer,JSONPath=`.status.shards.total`
// +kubebuilder:printcolumn:name="Done",type=integer,JSONPath=`.status.shards.succeeded`
// +kubebuilder:printcolumn:name="Failed",type=integer,JSONPath=`.status.shards.failed`,priority=1
// +kubebuilder:printcolumn:name="Series",type=integer,JSONPath=`.status.series.trained`
// +kubebuilder:printcolumn:name="Progress",type=integer,JSONPath=`.status.progress.percent`,description="percent of planned series done"
// +kubebuilder:printcolumn:name="Series/s",type=string,JSONPath=`.status.progress.seriesPerSecond`,priority=1
// +kubebuilder:printcolumn:name="Est-End",type=string,JSONPath=`.status.progress.estimatedEnd`,priority=1
// +kubebuilder:printcolumn:name="Parallel",type=integer,JSONPath=`.status.parallelism`,priority=1
// +kubebuilder:printcolumn:name="Expected",type=string,JSONPath=`.status.accuracy.expected`
// +kubebuilder:printcolumn:name="Realized",type=string,JSONPath=`.status.accuracy.realized`
// +kubebuilder:printcolumn:name="Geo Ratio",type=string,JSONPath=`.status.accuracy.geometricRatio`,priority=1
// +kubebuilder:printcolumn:name="Coverage",type=string,JSONPath=`.status.accuracy.bandCoverage`,priority=1
// +kubebuilder:printcolumn:name="Promised",type=string,JSONPath=`.status.accuracy.expectedBandCoverage`,priority=1
// +kubebuilder:printcolumn:name="Age",type=date,JSONPath=`.metadata.creationTimestamp`

// ForecastRun is one retraining of a ForecastPortfolio: plan, train shards, publish.
type ForecastRun struct {
	metav1.TypeMeta   `json:",inline"`
	metav1.ObjectMeta `json:"metadata,omitempty"`

	// spec identifies the run; immutable.
	// +required
	Spec ForecastRunSpec `json:"spec"`
	// status is the observed state, written by the controller only.
	// +optional
	Status ForecastRunStatus `json:"status,omitempty"`
}

// +kubebuilder:object:root=true

// ForecastRunList is a list of ForecastRun.
type ForecastRunList struct {
	metav1.TypeMeta `json:",inline"`
	metav1.ListMeta `json:"metadata,omitempty"`
	Items           []ForecastRun `json:"items"`
}

func init() {
	SchemeBuilder.Register(&ForecastRun{}, &ForecastRunList{})
}
