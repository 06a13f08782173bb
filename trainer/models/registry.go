package models

import (
	"fmt"
	"sort"
	"sync"

	"almanac.dev/almanac/trainer/features"
)

// Family identifiers used in specs and outputs. Each family file registers its constructor.
const (
	FamilyMean                  = "Mean"
	FamilyNaive                 = "Naive"
	FamilySeasonalNaive         = "SeasonalNaive"
	FamilyDrift                 = "Drift"
	FamilySeasonalAdjustedNaive = "SeasonalAdjustedNaive"
	FamilyETS                   = "ETS"
	FamilyTheta                 = "Theta"
	FamilyCroston               = "Croston"
	FamilySBA                   = "SBA"
	FamilyTSB                   = "TSB"
)

// Spec declares one zoo member: a family and its optional settings.
type Spec struct {
	// Family is one of the registered family identifiers.
	Family string `json:"family"`
	// Name is the member's unique name in the zoo; empty means Family.
	Name string `json:"name,omitempty"`
	// SeasonLength overrides the season length implied by the series frequency; 0 keeps it.
	SeasonLength int `json:"seasonLength,omitempty"`
	// SeasonalPeriods overrides the seasonal periods of the multi-seasonal families (MSTL*,
	// FourierARIMA), each 2 to 8784 and possibly non-integer (365.25); nil takes the
	// frequency's (series.Frequency.SeasonalPeriods). Other families ignore it.
	SeasonalPeriods []float64 `json:"seasonalPeriods,omitempty"`
	// ETS restricts the exponential-smoothing search space (nil: the full admissible set).
	ETS *ETSOptions `json:"ets,omitempty"`
	// Smoothing fixes the smoothing weights of the intermittent-demand families (nil: estimated).
	Smoothing *SmoothingOptions `json:"smoothing,omitempty"`
	// Features declares the features of a regression member (Ridge, Lasso, GradientBoosting);
	// nil takes the run's features (selection.Config.Features), else features.Defaults.
	Features *features.Config `json:"features,omitempty"`
	// Regression sets a regression member's learner (nil: defaults).
	Regression *RegressionOptions `json:"regression,omitempty"`
}

// RegressionOptions sets the learner of a regression member.
type RegressionOptions struct {
	// Penalty fixes the penalty weight P of Ridge and Lasso, per training row on standardised
	// features: Lasso minimises (1/(2n))·||y − Xb||² + P·||b||₁ (learn.Lasso's alpha), Ridge
	// minimises (1/n)·||y − Xb||² + P·||b||² (learn.Ridge with alpha = n·P). 0 chooses it by a
	// backtest on the latest training rows. GradientBoosting ignores it.
	Penalty float64 `json:"penalty,omitempty"`
	// AcrossShard fits one model on every series of the shard together (targets scaled per
	// series) instead of one model per series; it is still scored and chosen per series.
	AcrossShard bool `json:"acrossShard,omitempty"`
	// Boosting sets the trees of GradientBoosting (nil: DefaultBoosting); other families
	// refuse it.
	Boosting *BoostingOptions `json:"boosting,omitempty"`
}

// ETSOptions restricts which ETS(error, trend, season) forms the automatic search considers.
// Each list holds component codes: error "A", "M"; trend "N", "A", "Ad"; season "N", "A", "M".
// An empty list means every code for that component.
type ETSOptions struct {
	Errors  []string `json:"errors,omitempty"`
	Trends  []string `json:"trends,omitempty"`
	Seasons []string `json:"seasons,omitempty"`
}

// SmoothingOptions fixes smoothing weights in (0,1]; a zero weight means "estimate it".
type SmoothingOptions struct {
	Alpha float64 `json:"alpha,omitempty"`
	Beta  float64 `json:"beta,omitempty"`
}

// DisplayName returns Name, or Family when Name is empty.
func (s Spec) DisplayName() string {
	if s.Name != "" {
		return s.Name
	}
	return s.Family
}

// Constructor builds a Model from its spec, or reports which setting is invalid.
type Constructor func(Spec) (Model, error)

var (
	registryMu sync.RWMutex
	registry   = map[string]Constructor{}
)

// Register makes a family available to New. It panics if the family is registered twice.
func Register(family string, c Constructor) {
	registryMu.Lock()
	defer registryMu.Unlock()
	if _, dup := registry[family]; dup {
		panic("models: family registered twice: " + family)
	}
	registry[family] = c
}

// New builds the model a spec declares.
func New(s Spec) (Model, error) {
	registryMu.RLock()
	c, ok := registry[s.Family]
	registryMu.RUnlock()
	if !ok {
		return nil, fmt.Errorf("models: unknown family %q (known: %v)", s.Family, Families())
	}
	if s.SeasonLength < 0 {
		return nil, fmt.Errorf("models: %s: seasonLength must be >= 0, got %d", s.DisplayName(), s.SeasonLength)
	}
	return c(s)
}

// Families lists the registered family identifiers in sorted order.
func Families() []string {
	registryMu.RLock()
	defer registryMu.RUnlock()
	out := make([]string, 0, len(registry))
	for f := range registry {
		out = append(out, f)
	}
	sort.Strings(out)
	return out
}
