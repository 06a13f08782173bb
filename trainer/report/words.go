package report

import (
	"fmt"
	"math"
	"strings"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/tables"
)

// periodNoun is the singular name of one period of f ("week").
func periodNoun(f series.Frequency) string {
	switch f {
	case series.Hourly:
		return "hour"
	case series.Daily:
		return "day"
	case series.Weekly:
		return "week"
	case series.Monthly:
		return "month"
	case series.Quarterly:
		return "quarter"
	case series.Yearly:
		return "year"
	}
	return "period"
}

// plural returns "n noun" or "n nouns".
func plural(n int, noun string) string {
	if n == 1 {
		return fmt.Sprintf("%d %s", n, noun)
	}
	return fmt.Sprintf("%d %ss", n, noun)
}

// historyWindow is the number of history periods drawn before the forecast: two seasons of
// weekly data, three of monthly and quarterly data, 13 weeks of daily data, a week of hourly
// data, 20 years of yearly data, and never less than four horizons.
func historyWindow(f series.Frequency, horizon int) int {
	w := 2 * f.SeasonLength()
	switch f {
	case series.Daily:
		w = 91
	case series.Hourly:
		w = 7 * 24
	case series.Monthly, series.Quarterly:
		w = 3 * f.SeasonLength()
	case series.Yearly:
		w = 20
	}
	return max(w, 4*horizon)
}

// yardstick names what the scaled metrics divide by, for season length m of frequency f: the
// history's in-sample mean absolute change from one season (or, for m = 1, one period)
// earlier, the seasonal-naive scale of Hyndman & Koehler (2006), section 4, or from one period
// to the next for histories shorter than two seasons (backtest.ScaleLag).
func yardstick(f series.Frequency, m int) string {
	noun := periodNoun(f)
	if m <= 1 {
		return "the history's typical change from one " + noun + " to the next"
	}
	season := map[series.Frequency]string{series.Hourly: "a day", series.Daily: "a week", series.Weekly: "a year",
		series.Monthly: "a year", series.Quarterly: "a year"}[f]
	if f.SeasonLength() != m || season == "" {
		season = "one season (" + plural(m, noun) + ")"
	}
	return fmt.Sprintf("the history's typical change from the same %s %s earlier (from one %s to the next for histories shorter than two seasons)", noun, season, noun)
}

// MetricSentence explains a backtest metric in one plain sentence for a planner. unit is the
// value column's name ("units"), f the frequency, m the season length. The
// definitions follow Hyndman & Koehler (2006), "Another look at measures of forecast
// accuracy", IJF 22 (MASE: section 4; MAE, RMSE, MAPE: section 3), the M4 Competitor's Guide
// (sMAPE), the M5 Competitor's Guide (RMSSE) and Kolassa & Schütz (2007) (WAPE), as
// trainer/backtest implements them; Bias is forecast minus actual (common practice).
func MetricSentence(metric backtest.Metric, unit string, f series.Frequency, m int) string {
	noun := periodNoun(f)
	switch metric {
	case backtest.MASE:
		return fmt.Sprintf("MASE compares the forecast's average miss in the backtest with %s (the error of simply repeating last season): "+
			"0.8 means misses about 20%% smaller than that, 1.0 as large, and above 1 larger, which happens on erratic series even with the best model.", yardstick(f, m))
	case backtest.RMSSE:
		return fmt.Sprintf("RMSSE compares the forecast's typical miss in the backtest (large misses weigh more) with %s: "+
			"below 1 the misses are smaller than that, above 1 larger.", yardstick(f, m))
	case backtest.MAE:
		return fmt.Sprintf("MAE is the average size of a miss in the backtest, in %s per %s.", unit, noun)
	case backtest.RMSE:
		return fmt.Sprintf("RMSE is the typical size of a miss in the backtest, in %s per %s, with large misses weighing more.", unit, noun)
	case backtest.WAPE:
		return "WAPE is the sum of the misses in the backtest as a percentage of the sum of actual demand."
	case backtest.MAPE:
		return "MAPE is the average miss in the backtest as a percentage of each period's actual demand."
	case backtest.SMAPE:
		return "sMAPE is the average miss in the backtest as a percentage of the average of forecast and actual (0 to 200%)."
	case backtest.Bias:
		return fmt.Sprintf("Bias is the average of forecast minus actual in the backtest, in %s per %s: positive means the forecast ran high.", unit, noun)
	}
	return string(metric) + " is the backtest error measure the run selected models by; lower is better."
}

// ScoreWords says what one series' backtest score means ("about 26% smaller misses than the
// benchmark"). A NaN score means no backtest was possible.
func ScoreWords(metric backtest.Metric, v float64, unit string, f series.Frequency, m int) string {
	noun := periodNoun(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "no backtest score: the history was too short (or constant) to test the models on, so a simple fallback model was used"
	}
	switch metric {
	case backtest.MASE, backtest.RMSSE:
		d := math.Round(math.Abs(1-v) * 100)
		switch {
		case d < 3:
			return "misses about as large as " + yardstick(f, m)
		case v < 1:
			return fmt.Sprintf("misses about %.0f%% smaller than %s", d, yardstick(f, m))
		default:
			return fmt.Sprintf("misses about %.0f%% larger than %s", d, yardstick(f, m))
		}
	case backtest.MAE, backtest.RMSE:
		return fmt.Sprintf("a typical miss of %s %s per %s", num(v), unit, noun)
	case backtest.WAPE, backtest.MAPE, backtest.SMAPE:
		return fmt.Sprintf("an average miss of %.0f%%", v)
	case backtest.Bias:
		if v < 0 {
			return fmt.Sprintf("the forecast ran %s %s per %s low on average", num(-v), unit, noun)
		}
		return fmt.Sprintf("the forecast ran %s %s per %s high on average", num(v), unit, noun)
	}
	return "lower is better"
}

// BandSentence explains the forecast band of a series with quantile levels, for a reader who
// does not know quantiles; "" when the forecast has no band.
func BandSentence(levels []float64, noun string) string {
	b := bandOf(levels)
	if b.Lo < 0 {
		return "This forecast has no quantiles, so no band is drawn."
	}
	lo, hi := levels[b.Lo], levels[b.Hi]
	s := fmt.Sprintf("The light band is the %s: %s%% of outcomes are expected inside it. Demand should fall below its lower edge (the %s%% quantile, %s) in about %s %ss out of 100 and above its upper edge (the %s%% quantile, %s) in about %s out of 100.",
		bandLabel(levels, b.Lo, b.Hi), trimFloat(coverage(levels, b.Lo, b.Hi)),
		trimFloat(lo*100), tables.QuantileColumn(lo), trimFloat(lo*100), noun,
		trimFloat(hi*100), tables.QuantileColumn(hi), trimFloat((1-hi)*100))
	if b.InnerLo >= 0 {
		s += fmt.Sprintf(" The darker inner band is the %s.", bandLabel(levels, b.InnerLo, b.InnerHi))
	}
	return s
}

// BandShort names the bands of one series' plot in a line: "Light band: 80% band (q10–q90),
// 80% of outcomes expected inside it. Darker band: 50% band (q25–q75)."
func BandShort(levels []float64) string {
	b := bandOf(levels)
	if b.Lo < 0 {
		return "No band: this forecast has no quantiles."
	}
	s := fmt.Sprintf("Light band: %s, %s%% of outcomes expected inside it.", bandLabel(levels, b.Lo, b.Hi), trimFloat(coverage(levels, b.Lo, b.Hi)))
	if b.InnerLo >= 0 {
		s += fmt.Sprintf(" Darker band: %s, %s%% of outcomes expected inside it.", bandLabel(levels, b.InnerLo, b.InnerHi), trimFloat(coverage(levels, b.InnerLo, b.InnerHi)))
	}
	return s
}

// num formats a quantity for a planner: no decimals above 100, one below.
func num(v float64) string {
	if math.Abs(v) >= 100 {
		return fmt.Sprintf("%.0f", v)
	}
	return strings.TrimSuffix(strings.TrimRight(fmt.Sprintf("%.2f", v), "0"), ".")
}

// familyWords describes each model family in a planner's words. Common practice; the
// references are from memory, not checked here: Hyndman & Athanasopoulos, Forecasting:
// Principles and Practice, 3rd ed. (simple methods, exponential smoothing, ARIMA); Assimakopoulos
// & Nikolopoulos 2000 (Theta); Fiorucci et al. 2016 (OTM, DOTM); Svetunkov, Kourentzes & Ord
// 2022 (CES); Petropoulos & Svetunkov 2020 (the median of four); Croston 1972, Syntetos & Boylan 2005 (SBA) and Teunter, Syntetos &
// Babai 2011 (TSB) for intermittent demand. trainer/models documents what each family computes.
var familyWords = map[string]string{
	models.FamilyMean:                  "the average of the whole history",
	models.FamilyNaive:                 "repeats the last actual",
	models.FamilySeasonalNaive:         "repeats the actual of one season earlier",
	models.FamilyDrift:                 "extends the straight line from the first to the last actual",
	models.FamilySeasonalAdjustedNaive: "repeats the last actual with the seasonal pattern put back",
	models.FamilyETS:                   "exponential smoothing: level, trend and season, weighted towards recent periods",
	models.FamilyTheta:                 "the Theta method: a smoothed level plus half the slope of the straight line through the history",
	models.FamilyCroston:               "for intermittent demand: forecasts demand size and the interval between demands separately",
	models.FamilySBA:                   "Croston's method with the Syntetos–Boylan bias correction, for intermittent demand",
	models.FamilyTSB:                   "for intermittent demand: tracks the chance of a demand, so the forecast can fade for dying items",
	"ARIMA":                            "ARIMA: a model of how each period depends on the ones before",
	models.FamilyETSARIMATheta:         "the equal-weight mean of the ETS, ARIMA and Theta forecasts",
	models.FamilyOTM:                   "the Theta method with its trend weight fitted to the series",
	models.FamilyDOTM:                  "the Theta method with its trend weight fitted to the series and the trend line redrawn every period",
	models.FamilyCES:                   "complex exponential smoothing: one smoothing rule that follows a level or a trend as the data show",
	models.FamilyETSARIMADOTMCESMedian: "the middle of the ETS, ARIMA, DOTM and CES forecasts (the median of the four)",
	models.FamilyETSARIMADOTMCESMean:   "the equal-weight mean of the ETS, ARIMA, DOTM and CES forecasts",
	selection.FamilyCombination:        "the mean or median of several models' forecasts",
	models.FamilyRidge:                 "a regression on the portfolio's features (promotions, prices, events, recent demand), with all coefficients shrunk a little",
	models.FamilyLasso:                 "a regression on the portfolio's features that keeps only those that help, with the rest set to zero",
	models.FamilyGradientBoosting:      "many small decision trees on the portfolio's features, each correcting the ones before",
	models.FamilyMSTLETS:               "takes out every repeating cycle (hour of day, day of week, time of year), forecasts the rest by exponential smoothing and puts the cycles back",
	models.FamilyMSTLTheta:             "takes out every repeating cycle (hour of day, day of week, time of year), forecasts the rest by the Theta method and puts the cycles back",
	models.FamilyFourierARIMA:          "describes every repeating cycle (hour of day, day of week, time of year) by smooth waves and the rest by ARIMA",
	models.FamilyMSTLARIMA:             "takes out every repeating cycle (hour of day, day of week, time of year), forecasts the rest by ARIMA and puts the cycles back",
}

// FamilyWords describes a model family for a planner ("" when unknown).
func FamilyWords(family string) string { return familyWords[family] }

// ModelWords describes a chosen model for a planner: a combination by its method and members
// as its name gives them (selection.CombinationMembers: "Combination(mean: ETS, Theta)" is
// "the mean of the ETS and Theta forecasts"), any other model by its family (FamilyWords).
func ModelWords(model, family string) string {
	if family == selection.FamilyCombination {
		if method, members, ok := selection.CombinationMembers(model); ok {
			return fmt.Sprintf("the %s of the %s forecasts", method, andList(members))
		}
	}
	return FamilyWords(family)
}

// andList joins items as English does: "a", "a and b", "a, b and c".
func andList(items []string) string {
	if len(items) < 2 {
		return strings.Join(items, "")
	}
	return strings.Join(items[:len(items)-1], ", ") + " and " + items[len(items)-1]
}

// ChoiceSummary says how the run chose its models, for the overview (line) and the top of the
// chosen-models section (intro), by spec.selection.design (runconfig.Design*; "" is Auto,
// the API's default).
func ChoiceSummary(mode, metric string) (line, intro string) {
	const backtest = "the backtest (the model is fitted on older data and tested on the periods that followed, several times)"
	switch mode {
	case runconfig.DesignPerSeries:
		return "per series, by the lowest backtest " + metric,
			"Every series gets the model that did best on its own history in " + backtest + ". Simple models win ties."
	case runconfig.DesignFixed:
		return "as the portfolio declares its models and combination, per series by the lowest backtest " + metric,
			"Every series gets what the portfolio declares: the model that did best on its own history in " + backtest + ", or the declared combination of its best models where that did better. Simple models win ties."
	}
	return "per group of similar series, the way of forecasting chosen for the group (below); within it, per series by the lowest backtest " + metric,
		"Each group of similar series is forecast the way chosen for it (see \"How each group of series was forecast\"): the mean of a few fixed models for every series of the group, or each series' own best model or the mean or median of its best few by " + backtest + ". Simple models win ties."
}

// ChoiceWords says, under a series' plot, how its model was chosen. designName and segment are
// the models table's design and segment columns (designName "" for runs with a declared
// design and for tables older than the column); combined says whether the model is a
// combination (a design of several members can still leave a series one model: a member that
// failed, a fallback, notes say which).
func ChoiceWords(designName, segment, metric string, combined bool) string {
	switch {
	case designName == "" || designName == design.NamePerSeries:
		if combined {
			return "the declared combination of its best models, which backtested well enough against the best single model (" + metric + ")"
		}
		return "chosen for the lowest backtest " + metric + " of the models tried"
	case designName == design.NameDeclared:
		if combined {
			return "the combination the portfolio declares, which backtested well enough against the best single model (" + metric + ")"
		}
		return "chosen for the lowest backtest " + metric + " of the declared models (the declared combination did not backtest well enough)"
	case !combined:
		return fmt.Sprintf("a single model in place of the combination chosen for its group (%s: %s); the notes say why", segment, designName)
	}
	if k, method, ok := design.TopK(designName); ok {
		return fmt.Sprintf("the %s of its %d models with the lowest backtest %s, the way chosen for its group (%s)", method, k, metric, segment)
	}
	return fmt.Sprintf("the same models for every series of its group (%s): the way (%s) chosen for the group on the latest periods of its series' histories", segment, designName)
}

// CostWords says which models the plan's automatic design left out for cost and why, below the
// design table ("" when the plan timed no member: a declared design, or nothing to choose
// between). rec is plan.json's design record; costs are CPU milliseconds per series on the
// plan's pilot (design.Record.MemberCostMillis), the budget BudgetMillis.
func CostWords(rec *design.Record) string {
	if rec == nil || len(rec.MemberCostMillis) == 0 {
		return ""
	}
	var b strings.Builder
	budget := fmt.Sprintf("%.3g ms of CPU per series", rec.BudgetMillis)
	if len(rec.DroppedMembers) == 0 {
		fmt.Fprintf(&b, "No model was left out for cost: each took less than the budget of %s (spec.selection.designCostPercent of the simplest way's cost) when the plan timed it on a few series.", budget)
	} else {
		dropped := make([]string, len(rec.DroppedMembers))
		for i, m := range rec.DroppedMembers {
			dropped[i] = fmt.Sprintf("%s (%.3g ms)", m, rec.MemberCostMillis[m])
		}
		fmt.Fprintf(&b, "Left out of every way for cost: %s. The plan timed each model on a few series; these took more than the budget of %s (spec.selection.designCostPercent of the simplest way's cost).", andList(dropped), budget)
	}
	if len(rec.HeldMembers) > 0 {
		fmt.Fprintf(&b, " The cost of %s lay within %.0f%% of the budget, so the previous run's verdict stands (left out or kept as in that run): timing noise does not move a model in and out from run to run.",
			andList(rec.HeldMembers), 100*design.CostMargin)
	}
	return b.String()
}
