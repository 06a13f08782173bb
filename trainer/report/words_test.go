package report

import (
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
)

// TestModelWords: a combination is described by the method and members its name carries, not
// by one sentence for every combination; other models by their family.
func TestModelWords(t *testing.T) {
	for _, c := range []struct{ model, family, want string }{
		{"Combination(mean: ETS, Theta, DOTM)", selection.FamilyCombination, "the mean of the ETS, Theta and DOTM forecasts"},
		{"Combination(median: ETS, tsb-slow)", selection.FamilyCombination, "the median of the ETS and tsb-slow forecasts"},
		{"Combination(mean ETS)", selection.FamilyCombination, FamilyWords(selection.FamilyCombination)},
		{"ETS(A,Ad,N)", models.FamilyETS, FamilyWords(models.FamilyETS)},
	} {
		if got := ModelWords(c.model, c.family); got != c.want || got == "" {
			t.Errorf("ModelWords(%q) = %q, want %q", c.model, got, c.want)
		}
	}
}

// TestChoiceWords: the caption under a series says how its model was chosen, by the models
// table's design column.
func TestChoiceWords(t *testing.T) {
	for _, c := range []struct {
		design   string
		combined bool
		want     string
	}{
		{"", false, "chosen for the lowest backtest MASE of the models tried"},
		{"", true, "the declared combination of its best models"},
		{design.NamePerSeries, false, "chosen for the lowest backtest MASE of the models tried"},
		{design.NameDeclared, true, "the combination the portfolio declares"},
		{design.NameDeclared, false, "chosen for the lowest backtest MASE of the declared models"},
		{"top3-median", true, "the median of its 3 models with the lowest backtest MASE, the way chosen for its group (daily/smooth/long)"},
		{"ets-theta-dotm", true, "the same models for every series of its group (daily/smooth/long): the way (ets-theta-dotm)"},
		{"ets-theta-dotm", false, "a single model in place of the combination chosen for its group (daily/smooth/long: ets-theta-dotm)"},
	} {
		if got := ChoiceWords(c.design, "daily/smooth/long", "MASE", c.combined); !strings.HasPrefix(got, c.want) {
			t.Errorf("ChoiceWords(%q, combined %v) = %q, want it to start %q", c.design, c.combined, got, c.want)
		}
	}
	seen := map[string]string{}
	for _, mode := range []string{runconfig.DesignAuto, runconfig.DesignPerSeries, runconfig.DesignFixed} {
		line, intro := ChoiceSummary(mode, "RMSSE")
		if !strings.Contains(line, "RMSSE") || intro == "" {
			t.Errorf("ChoiceSummary(%s) = %q, %q", mode, line, intro)
		}
		if other, dup := seen[line]; dup {
			t.Errorf("designs %s and %s are summed up alike: %q", other, mode, line)
		}
		seen[line] = mode
	}
	if a, _ := ChoiceSummary("", "MASE"); a != func() string { l, _ := ChoiceSummary(runconfig.DesignAuto, "MASE"); return l }() {
		t.Errorf("an unset design is not summed up as Auto, the API's default: %q", a)
	}
}
