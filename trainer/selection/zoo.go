package selection

import (
	"fmt"
	"slices"
	"strings"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// SimplicityOrder ranks the known families from simplest to most complex; Zoo uses it so that
// backtest ties go to the simpler family. Registered families not listed here come last, in
// sorted order.
var SimplicityOrder = []string{
	models.FamilyMean, models.FamilyNaive, models.FamilySeasonalNaive, models.FamilyDrift,
	models.FamilySeasonalAdjustedNaive, models.FamilyCroston, models.FamilySBA, models.FamilyTSB,
	models.FamilyTheta, models.FamilyOTM, models.FamilyDOTM, models.FamilyETS, models.FamilyCES, models.FamilyRidge, models.FamilyLasso, models.FamilyGradientBoosting,
}

// ByNameOnly lists the families Zoo includes only when they are named: the regression families,
// which need a feature declaration to be useful and cost far more than the others, and the
// four-member combinations, which fit ETS and ARIMA over again beside the zoo's own members, so
// that the default zoo does not grow by their cost. FourierARIMA was here until the tenth
// session (alone it scores worse than seasonal naive on the M4 hourly development half); it
// joined the default zoo when per-series selection with it gained on that half at two origins
// (OWA 0.509 -> 0.504 and 0.500 -> 0.487, paired 90% bootstrap intervals -0.012 to 0.002 and
// -0.021 to -0.005), M3 and generated weekly data unchanged (the automatic design's CPU budget
// leaves it out or the design chosen does not use it), for 1.5x the CPU on hourly data and about
// 1.1x elsewhere (PROJECT-NOTES.md, tenth session).
var ByNameOnly = []string{models.FamilyRidge, models.FamilyLasso, models.FamilyGradientBoosting,
	models.FamilyETSARIMADOTMCESMedian, models.FamilyETSARIMADOTMCESMean}

// Zoo returns default-setting specs for the given families in simplicity order, or for every
// registered family except ByNameOnly when none is given. An unregistered family is an error naming it.
func Zoo(families ...string) ([]models.Spec, error) {
	reg := models.Families()
	if len(families) == 0 {
		for _, f := range reg {
			if !slices.Contains(ByNameOnly, f) {
				families = append(families, f)
			}
		}
	}
	for _, f := range families {
		if !slices.Contains(reg, f) {
			return nil, fmt.Errorf("selection: unknown family %q (registered: %s)", f, strings.Join(reg, ", "))
		}
	}
	rankOf := func(f string) int {
		if i := slices.Index(SimplicityOrder, f); i >= 0 {
			return i
		}
		return len(SimplicityOrder)
	}
	fs := slices.Clone(families)
	slices.SortStableFunc(fs, func(a, b string) int {
		if ra, rb := rankOf(a), rankOf(b); ra != rb {
			return ra - rb
		}
		return strings.Compare(a, b)
	})
	fs = slices.Compact(fs)
	out := make([]models.Spec, len(fs))
	for i, f := range fs {
		out[i] = models.Spec{Family: f}
	}
	return out, nil
}

// PooledRidgeName is the name of DefaultZoo's pooled Ridge member.
const PooledRidgeName = "PooledRidge"

// DefaultZoo returns the zoo the benchmark runs when no families are named, for series of
// frequency f: Zoo(), and for hourly data one member after those, a Ridge pooled across the
// series of a call (models.RegressionOptions.AcrossShard; a portfolio's shard) with
// features.PooledDefaults, named PooledRidgeName. It joined for hourly data in the sixteenth
// session by the rule for changing the default, fixed before the deciding runs: on the M4
// hourly development half OWA 0.504 -> 0.491 at the last origin and 0.487 -> 0.470 one horizon
// back, paired 90% bootstrap intervals -0.021 to -0.004 and -0.028 to -0.009, for 2.3 to 2.6x
// the CPU (PROJECT-NOTES.md). Regression members never leave the automatic design for cost
// (design.Options.CostLimit), so its cost is not weighed against the budget.
func DefaultZoo(f series.Frequency) []models.Spec {
	zoo, err := Zoo()
	if err != nil {
		panic(err) // every registered family is known
	}
	if f == series.Hourly {
		zoo = append(zoo, PooledRidge())
	}
	return zoo
}

// PooledRidge is DefaultZoo's pooled Ridge member: family Ridge, name PooledRidgeName, fitted
// across the call's series, features left to the run (features.PooledDefaults when the run
// declares none).
func PooledRidge() models.Spec {
	return models.Spec{Family: models.FamilyRidge, Name: PooledRidgeName, Regression: &models.RegressionOptions{AcrossShard: true}}
}

// MemberIndex returns the position in zoo of the member named name (models.Spec.DisplayName,
// unique in a valid zoo), or -1 when there is none.
func MemberIndex(zoo []models.Spec, name string) int {
	return slices.IndexFunc(zoo, func(sp models.Spec) bool { return sp.DisplayName() == name })
}
