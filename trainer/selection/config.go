// Package selection chooses, per series, the zoo member (or combination of members) with the
// best rolling-origin backtest, forecasts with it and attaches quantiles.
package selection

import (
	"fmt"
	"math"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// Defaults applied to zero-valued Config fields.
const (
	DefaultOrigins = 3
	DefaultStep    = 1
	DefaultMetric  = backtest.MASE
)

// Combination methods.
const (
	CombineMean   = "mean"
	CombineMedian = "median"
)

// Config is one selection design, shared by every series of a run.
type Config struct {
	// Horizon is the number of steps to forecast (>= 1).
	Horizon int
	// Levels are the quantile levels, strictly increasing inside (0,1); may be empty.
	Levels []float64
	// Zoo lists the candidate members in simplicity order: the earlier of two members with equal
	// backtest scores wins (Occam's razor; common practice).
	Zoo []models.Spec
	// Metric ranks candidates ("" means DefaultMetric). Bias ranks by its absolute value.
	Metric backtest.Metric
	// Origins is the number of rolling origins and Step the distance between them (0: defaults).
	Origins, Step int
	// CombineTop > 1 also scores the combination of the CombineTop best members; it is chosen
	// only when its own backtest score beats the best member's. CombineMethod is "mean" (the
	// default) or "median".
	CombineTop    int
	CombineMethod string
	// CombineMargin >= 0 prefers the combination: it is chosen unless the best single member's
	// score is lower than the combination's by more than this relative margin, i.e. when
	// combined <= best·(1 + CombineMargin). 0 means strictly better. Combinations are robust
	// against the selection noise of a few origins (Clemen 1989; Makridakis, Spiliotis &
	// Assimakopoulos 2020 on M4), which is why a margin can pay.
	CombineMargin float64
	// SeasonLength is the season length m; 0 takes s.Freq.SeasonLength().
	SeasonLength int
	// NonNegative clips the mean and the quantiles at 0.
	NonNegative bool
	// Clean is applied to every series before selection (zero value: see series.CleanRules).
	Clean series.CleanRules
	// Features declares the features of the regression members (Ridge, Lasso, GradientBoosting)
	// whose models.Spec.Features is nil; nil leaves them to features.Defaults for the series'
	// frequency. Other families ignore it.
	Features *features.Config
	// RouteIntermittent restricts intermittent and lumpy series (Syntetos, Boylan & Croston 2005
	// classes, see Classify) to the zoo's intermittent-demand members (Croston, SBA, TSB) when the
	// zoo has any.
	RouteIntermittent bool
	// BacktestUpdate fits members once at the earliest backtest origin and carries the fit
	// forward to the later origins without re-estimating, for families that support it
	// (backtest.Plan.Update); the final fit on the whole series is always a full fit.
	BacktestUpdate bool
	// ErrorOrigins > 0 measures the published forecast's errors again at up to ErrorOrigins
	// origins one horizon apart (non-overlapping test windows, the latest ending at the last
	// observation; fitted as the selection backtest is) and returns those as
	// Result.BacktestErrors instead of the selection backtest's. The selection's origins sit a
	// step (default 1) apart, so their errors share most of their target periods and show one
	// stretch of history; hierarchy reconciliation estimates an error covariance from them and
	// needs draws that differ (trainer/pipeline sets it for hierarchical runs). A series too
	// short for 2 such origins keeps the selection backtest's errors. Costs ErrorOrigins fits of
	// the published member(s) per series (fewer with BacktestUpdate).
	ErrorOrigins int

	// shard holds the members fitted across all series of the call (set by ForecastMany).
	shard *shardModels
}

// withDefaults fills the zero-valued fields.
func (c Config) withDefaults() Config {
	if c.Metric == "" {
		c.Metric = DefaultMetric
	}
	if c.Origins == 0 {
		c.Origins = DefaultOrigins
	}
	if c.Step == 0 {
		c.Step = DefaultStep
	}
	if c.CombineMethod == "" {
		c.CombineMethod = CombineMean
	}
	return c
}

// Settings returns c without its zoo and combination (Zoo, CombineTop, CombineMethod,
// CombineMargin): the settings the designs of one run share, and on which, besides the
// member and the series, a member's backtests and refit depend (Fits).
func (c Config) Settings() Config {
	c.Zoo, c.CombineTop, c.CombineMethod, c.CombineMargin, c.shard = nil, 0, "", 0, nil
	return c
}

// Validate reports the first invalid field, by name.
func (c Config) Validate() error {
	c = c.withDefaults()
	if c.Horizon < 1 {
		return fmt.Errorf("selection: horizon must be >= 1, got %d", c.Horizon)
	}
	for j, l := range c.Levels {
		if !(l > 0 && l < 1) {
			return fmt.Errorf("selection: levels[%d] = %v is outside (0,1)", j, l)
		}
		if j > 0 && !(l > c.Levels[j-1]) {
			return fmt.Errorf("selection: levels must be strictly increasing (levels[%d] = %v after %v)", j, l, c.Levels[j-1])
		}
	}
	if len(c.Zoo) == 0 {
		return fmt.Errorf("selection: zoo is empty")
	}
	seen := map[string]bool{}
	for i, sp := range c.Zoo {
		if _, err := models.New(sp); err != nil {
			return fmt.Errorf("selection: zoo[%d]: %w", i, err)
		}
		if acrossShard(sp) && !models.CanShare(sp.Family) {
			return fmt.Errorf("selection: zoo[%d] (%s): regression.acrossShard is only for %v", i, sp.DisplayName(), models.SharedFamilies)
		}
		if seen[sp.DisplayName()] {
			return fmt.Errorf("selection: zoo[%d]: duplicate member name %q", i, sp.DisplayName())
		}
		seen[sp.DisplayName()] = true
	}
	if !c.Metric.Valid() {
		return fmt.Errorf("selection: unknown metric %q (known: %v)", c.Metric, backtest.Metrics())
	}
	if c.ErrorOrigins < 0 {
		return fmt.Errorf("selection: errorOrigins must be >= 0, got %d", c.ErrorOrigins)
	}
	if c.Origins < 1 || c.Step < 1 {
		return fmt.Errorf("selection: origins and step must be >= 1, got %d and %d", c.Origins, c.Step)
	}
	if c.CombineMethod != CombineMean && c.CombineMethod != CombineMedian {
		return fmt.Errorf("selection: combineMethod must be %q or %q, got %q", CombineMean, CombineMedian, c.CombineMethod)
	}
	if c.CombineMargin < 0 || math.IsNaN(c.CombineMargin) {
		return fmt.Errorf("selection: combineMargin must be >= 0, got %v", c.CombineMargin)
	}
	if c.CombineTop < 0 {
		return fmt.Errorf("selection: combineTop must be >= 0, got %d", c.CombineTop)
	}
	if c.Features != nil {
		if err := c.Features.Validate(); err != nil {
			return fmt.Errorf("selection: %w", err)
		}
	}
	if c.SeasonLength < 0 {
		return fmt.Errorf("selection: seasonLength must be >= 0, got %d", c.SeasonLength)
	}
	if c.Clean.MaxGapFraction < 0 || c.Clean.MaxGapFraction > 1 || c.Clean.MinLength < 0 {
		return fmt.Errorf("selection: clean rules out of range (maxGapFraction %v, minLength %d)", c.Clean.MaxGapFraction, c.Clean.MinLength)
	}
	return nil
}

// Result is the forecast of one series and how it was made.
type Result struct {
	Key string
	// Chosen is the chosen member's zoo name (a key of Scores), or the combination's name.
	Chosen string
	// Family is the chosen member's family, or FamilyCombination.
	Family string
	// Model is the fitted model's own name with its configuration, e.g. "ETS(M,Ad,N)"; for a
	// combination its members' fitted names, "Combination(mean: ETS(M,Ad,N), Theta)".
	Model string
	// Params are the fitted parameters by name; a combination's are its members', each under
	// "<member>." ("ETS.alpha").
	Params map[string]float64
	// Mean is the point forecast, Horizon steps.
	Mean []float64
	// Levels echoes Config.Levels; Quantiles[j][k] is the level-j quantile at step k+1.
	Levels    []float64
	Quantiles [][]float64
	// QuantileSource says where the quantiles came from: "model", "empirical" or "members".
	QuantileSource string
	// StepErrors is the chosen member's backtest error per horizon step, in Metric; it is
	// shorter than Horizon when the backtest horizon had to be shortened, nil without backtest.
	StepErrors []float64
	// Expected is the chosen member's overall backtest score (NaN without backtest).
	Expected float64
	// Backtest is how the published quantiles fared on the chosen forecast's rolling-origin
	// backtest (backtest.QuantilesOnBacktest; Below and PinballSum by Levels); Points 0
	// without backtest or quantiles.
	Backtest backtest.QuantileRecord
	// Metric is the metric Expected, Scores and StepErrors are in: Config.Metric, or MAE when
	// that was undefined on the series for every member.
	Metric backtest.Metric
	// Scores holds every candidate's backtest score (NaN if it could not be fitted).
	Scores map[string]float64
	// Class is the demand class of Classify.
	Class string
	// Features lists, per member of the chosen forecast (the chosen member, or each member of
	// the chosen combination) that is built on generated features, the features it kept after
	// feature selection, by member name; nil when no such member is in the forecast.
	Features map[string][]string
	// Notes lists the cleaning and fallback decisions, in order.
	Notes []string
	// Residuals are the chosen forecast's in-sample one-step errors y − fitted, the last one at
	// the series' last period (NaN where the model has no fitted value; for a combination, y
	// minus the combined fitted values); nil when the model gives none. Hierarchy
	// reconciliation (trainer/reconcile, MinT) estimates the error covariance from them.
	Residuals []float64
	// BacktestErrors[i][k] is actual − forecast of the published forecast (the chosen member or
	// combination) at backtest origin i (latest first), step k+1, and BacktestHeld[i] the number
	// of observations after origin i (backtest.Assessment.Held): the selection backtest's, or
	// with Config.ErrorOrigins those of its own origins a horizon apart; nil without backtest
	// (constant series, fallbacks). Hierarchy reconciliation estimates its weights and its aggregates'
	// bands from them, aligned across nodes by origin and step.
	BacktestErrors [][]float64
	BacktestHeld   []int
	// Promise holds the selection backtest's origins behind Expected and StepErrors (actuals,
	// errors of the published forecast and metric scales, backtest.Records), kept only with
	// Config.ErrorOrigins (hierarchical runs), so that the reconciled forecast can be scored
	// exactly as Expected scores the published one; nil otherwise and without backtest.
	Promise []backtest.OriginRecord
	// BandScale is the whole series' NaiveScale at lag backtest.ScaleLag, power 1, the scale
	// Backtest's record takes the bands in (backtest.QuantilesOnBacktest's s_n), kept with
	// Promise so that reconciled bands can be scored the same way; 0 without Promise.
	BandScale float64

	// band keeps the backtest behind Backtest for CalibrateBands (errs nil without quantiles).
	band bandBacktest
}

// FamilyCombination is Result.Family for a combination of members.
const FamilyCombination = "Combination"
