package v1alpha1

// This file holds spec.features (what the regression members of the zoo learn from) and the
// regression settings of a zoo member. The feature declaration sits at the portfolio level, not
// in each member: the calendar, the events and the covariates are facts about the data, shared by
// every learner, and one place to declare them is one place to check them against
// spec.source.columns. What differs between members is the learner (models[].regression).

// CalendarFeature names a feature derived from the period's date.
// +kubebuilder:validation:Enum=DayOfWeek;WeekOfYear;Month;Quarter;Weekend;PositionInMonth
type CalendarFeature string

// The calendar features.
const (
	CalendarDayOfWeek       CalendarFeature = "DayOfWeek"
	CalendarWeekOfYear      CalendarFeature = "WeekOfYear"
	CalendarMonth           CalendarFeature = "Month"
	CalendarQuarter         CalendarFeature = "Quarter"
	CalendarWeekend         CalendarFeature = "Weekend"
	CalendarPositionInMonth CalendarFeature = "PositionInMonth"
)

// WindowStatistic is a statistic of a trailing window of the series.
// +kubebuilder:validation:Enum=Mean;Min;Max;Std
type WindowStatistic string

// The window statistics.
const (
	WindowMean WindowStatistic = "Mean"
	WindowMin  WindowStatistic = "Min"
	WindowMax  WindowStatistic = "Max"
	WindowStd  WindowStatistic = "Std"
)

// FeatureFilter ranks generated features against the target before the learner sees them.
// +kubebuilder:validation:Enum=Correlation;MutualInformation;None
type FeatureFilter string

// The filters.
const (
	FilterCorrelation       FeatureFilter = "Correlation"
	FilterMutualInformation FeatureFilter = "MutualInformation"
	FilterNone              FeatureFilter = "None"
)

// EmbeddedSelection narrows the features inside a fitted model.
// +kubebuilder:validation:Enum=Lasso;None
type EmbeddedSelection string

// The embedded selection methods.
const (
	EmbeddedLasso EmbeddedSelection = "Lasso"
	EmbeddedNone  EmbeddedSelection = "None"
)

// FeaturesSpec declares the features the regression members (Ridge, Lasso, GradientBoosting)
// are built on and how they are narrowed down. Every feature uses only what is known at the
// forecast origin; covariates must be known for the forecast periods too (planned prices,
// promotion calendars), i.e. present in the input on rows after the history (see covariates).
// Unset: regression members use a broad default set for the frequency.
// +kubebuilder:validation:XValidation:rule="!has(self.covariateLags) || (has(self.covariates) && size(self.covariates) > 0)",message="covariateLags needs covariates"
// +kubebuilder:validation:XValidation:rule="!has(self.windowStatistics) || (has(self.windows) && size(self.windows) > 0)",message="windowStatistics needs windows"
type FeaturesSpec struct {
	// calendar lists features of the period's date: DayOfWeek, WeekOfYear, Month, Quarter,
	// Weekend, PositionInMonth (early, middle or late in the month). Features finer than the
	// frequency are skipped (DayOfWeek on monthly data).
	// +optional
	// +listType=set
	// +kubebuilder:validation:MaxItems=6
	Calendar []CalendarFeature `json:"calendar,omitempty"`

	// events are the holidays and events of the business (a 0/1 flag per period each).
	// +optional
	// +listType=map
	// +listMapKey=name
	// +kubebuilder:validation:MaxItems=64
	Events []EventSpec `json:"events,omitempty"`

	// fourier adds sine/cosine pairs for long or non-integer seasonal cycles.
	// +optional
	// +listType=atomic
	// +kubebuilder:validation:MaxItems=4
	Fourier []FourierSpec `json:"fourier,omitempty"`

	// lags are target lags in periods (1 = the previous period, 52 = a year ago in weekly data).
	// +optional
	// +listType=set
	// +kubebuilder:validation:MaxItems=16
	// +kubebuilder:validation:items:Minimum=1
	// +kubebuilder:validation:items:Maximum=8784
	Lags []int32 `json:"lags,omitempty"`

	// windows are trailing-window lengths in periods, at least 2; each window gives every
	// statistic in windowStatistics.
	// +optional
	// +listType=set
	// +kubebuilder:validation:MaxItems=8
	// +kubebuilder:validation:items:Minimum=2
	// +kubebuilder:validation:items:Maximum=8784
	Windows []int32 `json:"windows,omitempty"`

	// windowStatistics are the statistics of each window: Mean, Min, Max, Std. Default Mean.
	// +optional
	// +listType=set
	// +kubebuilder:validation:MaxItems=4
	WindowStatistics []WindowStatistic `json:"windowStatistics,omitempty"`

	// covariates names the input covariate columns used as features, each of which must be
	// listed in spec.source.columns.covariates. Their values for the forecast periods must be
	// in the input: for each of the horizon's periods after a series' last actual, a row with
	// the covariates filled and the value empty (or dated after the run's time; the value is
	// not read). Rows further ahead are ignored.
	// +optional
	// +listType=set
	// +kubebuilder:validation:MaxItems=64
	// +kubebuilder:validation:items:MinLength=1
	// +kubebuilder:validation:items:MaxLength=128
	Covariates []string `json:"covariates,omitempty"`

	// covariateLags adds each covariate shifted by these many periods (1 = last period's
	// promotion, for the dip after it).
	// +optional
	// +listType=set
	// +kubebuilder:validation:MaxItems=8
	// +kubebuilder:validation:items:Minimum=1
	// +kubebuilder:validation:items:Maximum=8784
	CovariateLags []int32 `json:"covariateLags,omitempty"`

	// selection narrows the generated features per series.
	// +optional
	Selection *FeatureSelectionSpec `json:"selection,omitempty"`
}

// EventSpec is one named holiday or event.
type EventSpec struct {
	// name identifies the event in outputs and in the report, e.g. "harvest-fair".
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=63
	// +kubebuilder:validation:Pattern=`^[A-Za-z][A-Za-z0-9_.-]*$`
	Name string `json:"name"`

	// dates are the event's days as YYYY-MM-DD, past ones (to learn the effect) and future ones
	// (to forecast it). The period containing a date is flagged.
	// +required
	// +listType=set
	// +kubebuilder:validation:MinItems=1
	// +kubebuilder:validation:MaxItems=512
	// +kubebuilder:validation:items:Pattern=`^[0-9]{4}-[0-9]{2}-[0-9]{2}$`
	// +kubebuilder:validation:items:Format=date
	// +kubebuilder:validation:items:MaxLength=10
	Dates []string `json:"dates"`

	// periodsBefore also flags this many periods before each date (stocking up). Default 0.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=52
	PeriodsBefore int32 `json:"periodsBefore,omitempty"`

	// periodsAfter also flags this many periods after each date (the dip after). Default 0.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=52
	PeriodsAfter int32 `json:"periodsAfter,omitempty"`
}

// FourierSpec asks for order sine/cosine pairs of one cycle:
// sin(2 pi k t / period), cos(2 pi k t / period) for k = 1..order, with t the period index
// (Hyndman & Athanasopoulos, FPP 3rd ed., section 7.4).
// +kubebuilder:validation:XValidation:rule="!self.period.matches('^[0-9]{1,5}(\\\\.[0-9]{1,4})?$') || double(self.order) * 2.0 <= double(self.period)",message="order must be at most period/2 (higher harmonics repeat lower ones)"
type FourierSpec struct {
	// period is the cycle length in periods of the series as a decimal string, at least 2,
	// e.g. "365.25" for a yearly cycle in daily data, "52.18" in weekly data.
	// +required
	// +kubebuilder:validation:MaxLength=10
	// +kubebuilder:validation:Pattern=`^[0-9]{1,5}(\.[0-9]{1,4})?$`
	// +kubebuilder:validation:XValidation:rule="double(self) >= 2.0",message="period must be at least 2"
	Period string `json:"period"`

	// order is the number of sine/cosine pairs, 1 to period/2.
	// +required
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=100
	Order int32 `json:"order"`
}

// FeatureSelectionSpec is a two-step narrowing of the generated features: a filter ranks them
// against the target and keeps the best filterKeep, then the embedded step (a lasso path whose
// penalty is chosen on the latest training rows) drops those with no weight, and at most
// maxFeatures remain.
// +kubebuilder:validation:XValidation:rule="!has(self.filterKeep) || !has(self.maxFeatures) || self.maxFeatures <= self.filterKeep",message="maxFeatures must not exceed filterKeep"
// +kubebuilder:validation:XValidation:rule="!has(self.filterKeep) || !has(self.filter) || self.filter != 'None'",message="filterKeep needs a filter other than None"
type FeatureSelectionSpec struct {
	// filter ranks the features by their relation to the target: Correlation (absolute Pearson
	// correlation), MutualInformation, or None. Default Correlation.
	// +optional
	Filter FeatureFilter `json:"filter,omitempty"`

	// filterKeep is how many of the best-ranked features the filter passes on. Unset: all.
	// +optional
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=1000
	FilterKeep *int32 `json:"filterKeep,omitempty"`

	// embedded narrows the features inside the fit: Lasso or None. Default Lasso.
	// +optional
	Embedded EmbeddedSelection `json:"embedded,omitempty"`

	// maxFeatures caps how many features a fitted member keeps in each of its per-step models
	// (the regression members fit one model per step ahead, so the features listed for a
	// series over all steps may be more). Unset: no cap.
	// +optional
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=1000
	MaxFeatures *int32 `json:"maxFeatures,omitempty"`
}

// RegressionSettings tunes the learner of a regression member (Ridge, Lasso, GradientBoosting).
type RegressionSettings struct {
	// penalty fixes the penalty weight of Ridge and Lasso as a decimal string above 0, e.g.
	// "0.5" (the weight of the squared or absolute coefficient sum against the mean squared
	// error). Unset: chosen per series on the latest training rows.
	// +optional
	// +kubebuilder:validation:MaxLength=16
	// +kubebuilder:validation:Pattern=`^[0-9]{1,6}(\.[0-9]{1,8})?$`
	// +kubebuilder:validation:XValidation:rule="double(self) > 0.0",message="penalty must be greater than 0"
	Penalty string `json:"penalty,omitempty"`

	// pooled fits one model on all series of a shard together (each series' target scaled by
	// its own level) instead of one per series, so short series borrow strength from the
	// others; the member is still scored and chosen per series. Without spec.features a pooled
	// member on hourly data learns from lags 1-3, 23-25, 47, 48, 72, 96, 120, 144, 167-169 and
	// 336 hours, Fourier terms of the daily and weekly cycles and their trailing means, every
	// column kept (other frequencies: the usual defaults). Default false.
	// +optional
	Pooled *bool `json:"pooled,omitempty"`

	// boosting tunes the trees of GradientBoosting (only for that family). Unset: the same
	// values as an empty boosting block, i.e. every field's default.
	// +optional
	Boosting *BoostingSettings `json:"boosting,omitempty"`
}

// BoostingSettings tunes the gradient-boosted trees of a GradientBoosting member (Friedman 2001;
// second-order leaf values w = -G/(H+1), Chen & Guestrin 2016). Each step model adds trees
// stage by stage, F_m = F_(m-1) + shrinkage * T_m, each tree fitted to the residuals of the
// stages before it. The number of trees is chosen per series: up to rounds trees are fitted on
// the training rows with the latest rows held out, fitting stops after 20 rounds in which the
// held-out error did not fall, and the model is refitted on all rows with the number of trees
// that had the lowest held-out error. A series too short for that holdout gets
// min(rounds, 100) trees.
type BoostingSettings struct {
	// rounds is the most trees (boosting rounds) of each step model. Default 500.
	// +optional
	// +kubebuilder:default=500
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=5000
	Rounds int32 `json:"rounds,omitempty"`

	// shrinkage is the weight of each new tree (the learning rate), a decimal string above 0
	// and at most 1, e.g. "0.05": smaller values need more rounds and usually generalise
	// better. Default "0.1".
	// +optional
	// +kubebuilder:default="0.1"
	// +kubebuilder:validation:MaxLength=8
	// +kubebuilder:validation:Pattern=`^[01](\.[0-9]{1,6})?$`
	// +kubebuilder:validation:XValidation:rule="double(self) > 0.0 && double(self) <= 1.0",message="shrinkage must be greater than 0 and at most 1"
	Shrinkage string `json:"shrinkage,omitempty"`

	// treeDepth is the depth of each tree, 1 (one split, two leaves) to 12 (at most 4096
	// leaves). Default 4.
	// +optional
	// +kubebuilder:default=4
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=12
	TreeDepth int32 `json:"treeDepth,omitempty"`

	// minLeafRows is the fewest training rows a leaf holds; a split that would leave fewer on
	// either side is not made. Default 5.
	// +optional
	// +kubebuilder:default=5
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=1000
	MinLeafRows int32 `json:"minLeafRows,omitempty"`

	// rowSamplePercent is the percent of the training rows drawn, without replacement and
	// afresh for every tree, to fit that tree (Friedman 2002, stochastic gradient boosting);
	// 100 fits every tree on every row. The draws are seeded, so a run is repeatable.
	// Default 100.
	// +optional
	// +kubebuilder:default=100
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=100
	RowSamplePercent int32 `json:"rowSamplePercent,omitempty"`
}
