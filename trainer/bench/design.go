package bench

import (
	"context"
	"fmt"
	"io"
	"math"
	"slices"
	"sort"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// Options is one benchmark run's design: the declaration a portfolio would make (zoo,
// combination, backtest) and how the design is decided (design.Options).
type Options struct {
	Families      []string // empty: every registered family except selection.ByNameOnly
	Origins, Step int
	CombineTop    int
	CombineMethod string
	CombineMargin float64
	Metric        backtest.Metric
	Workers       int
	// BacktestUpdate carries fits forward between backtest origins (selection.Config).
	BacktestUpdate bool
	// Mode, Rule, CostLimit, MaxSeries, MinSeries: design.Options ("" and 0: its defaults,
	// i.e. Auto, the one-SE rule, 5x, 100, 20: what a portfolio gets).
	Mode                 design.Mode
	Rule                 design.Rule
	CostLimit            float64
	MaxSeries, MinSeries int
	InnerOrigins         int
	// SampleSeries (Auto) is the most series of a group the design is decided on, drawn by
	// key hash as a portfolio's plan step draws them (design.Sample; 0:
	// design.DefaultSampleSeries).
	SampleSeries int
	// Combinations are design.Options.Combinations (nil: design.Combinations).
	Combinations []design.Combination
	// Log, when set, receives each group's design.Outcome.
	Log io.Writer
	// Levels are the quantile levels to publish (selection.Config.Levels; nil: none).
	Levels []float64
	// Hold (Auto) is an earlier run's cost verdict per group (GroupKey), held as a
	// portfolio's run holds its previous run's (design.Options.Before): a member within
	// design.CostMargin of the budget keeps the verdict it had there. A group it lacks is
	// judged by the plain rule, as a first run is.
	Hold map[string]*design.Before
	// CPU is the clock member costs are measured with (design.Options.CPU; nil: the process's
	// CPU time).
	CPU func() time.Duration
}

// GroupKey names a benchmark group (one category and horizon: one portfolio) in a report's
// cost verdicts and in Options.Hold, e.g. "YEARLY h=6".
func GroupKey(category string, horizon int) string {
	return fmt.Sprintf("%s h=%d", category, horizon)
}

// Run forecasts every entry as a portfolio's run does, and scores it. Entries are grouped by
// category and horizon, and each group is one portfolio of one frequency and horizon: under
// Auto its design is chosen once by design.Decide on a sample of the group (design.Sample,
// the plan step's draw) and applied by design.Forecast (the train step), so the inner holdout
// and the choices see only that group's training data. A group no larger than the sample is
// decided on whole, which gives exactly what one Forecast call choosing by itself gives. It returns the report and the per-entry
// results. CPU time (user + system, getrusage) covers the whole call, inner holdout
// included, and is reported per series in All.CPUMilliseconds. A series whose forecast
// fails is scored with the naive forecast (last value) and counted in Failed.
func Run(ctx context.Context, entries []Entry, o Options) (*Report, []selection.Result, error) {
	zoo, err := selection.Zoo(o.Families...)
	if err != nil {
		return nil, nil, err
	}
	// Without named families each group runs its frequency's default zoo (selection.DefaultZoo:
	// hourly data gains a pooled Ridge); the summary line names every member some group ran.
	zooOf := func(f series.Frequency) []models.Spec {
		if len(o.Families) > 0 {
			return zoo
		}
		return selection.DefaultZoo(f)
	}
	described := slices.Clone(zoo)
	base := selection.Config{Metric: o.Metric, Origins: o.Origins, Step: o.Step,
		CombineTop: o.CombineTop, CombineMethod: o.CombineMethod, CombineMargin: o.CombineMargin,
		BacktestUpdate: o.BacktestUpdate, Levels: o.Levels}
	type group struct {
		cat string
		h   int
	}
	byGroup := map[group][]int{}
	var groups []group
	for i, e := range entries {
		g := group{e.Category, e.Horizon}
		if _, ok := byGroup[g]; !ok {
			groups = append(groups, g)
		}
		byGroup[g] = append(byGroup[g], i)
	}
	sort.Slice(groups, func(a, b int) bool {
		if groups[a].cat != groups[b].cat {
			return groups[a].cat < groups[b].cat
		}
		return groups[a].h < groups[b].h
	})
	results := make([]selection.Result, len(entries))
	errs := make([]error, len(entries))
	counts := map[string]int{}
	verdicts := map[string]*design.Before{}
	cpu0 := cpuTime()
	for _, g := range groups {
		cfg := base
		cfg.Horizon = g.h
		idx := byGroup[g]
		in := make([]series.Series, len(idx))
		for j, i := range idx {
			in[j] = entries[i].Series()
		}
		cfg.Zoo = zooOf(in[0].Freq)
		for _, sp := range cfg.Zoo {
			if selection.MemberIndex(described, sp.DisplayName()) < 0 {
				described = append(described, sp)
			}
		}
		do := design.Options{Mode: o.Mode, Base: cfg, Rule: o.Rule, CostLimit: o.CostLimit,
			MaxSeries: o.MaxSeries, MinSeries: o.MinSeries, Workers: o.Workers, Combinations: o.Combinations, InnerOrigins: o.InnerOrigins,
			Before: o.Hold[GroupKey(g.cat, g.h)], CPU: o.CPU}
		var dec *design.Outcome
		if do.Mode == "" || do.Mode == design.Auto {
			k := o.SampleSeries
			if k <= 0 {
				k = design.DefaultSampleSeries
			}
			sample := design.Sample(in, k)
			sub := make([]series.Series, len(sample))
			for j, i := range sample {
				sub[j] = in[i]
			}
			var err error
			if dec, err = design.Decide(ctx, sub, do); err != nil {
				return nil, nil, err
			}
			do.Decided = dec
			if b := design.NewRecord(dec, do.Rule, k).Before(); b != nil {
				verdicts[GroupKey(g.cat, g.h)] = b
			}
		}
		out, err := design.Forecast(ctx, in, do, func(j int, r design.Result, err error) {
			results[idx[j]], errs[idx[j]] = r.Result, err
			counts[r.Design]++
		})
		if err != nil {
			return nil, nil, err
		}
		// The bands are calibrated on the pooled backtest of the category's series, as a
		// portfolio's train step pools a unit's (selection.CalibrateBands).
		var pool []*selection.Result
		for _, i := range idx {
			if errs[i] == nil {
				pool = append(pool, &results[i])
			}
		}
		bandFactors := selection.CalibrateBands(pool, false)
		if o.Log != nil {
			if bandFactors != nil {
				fmt.Fprintf(o.Log, "%s (h=%d): band factors by level %s (selection.CalibrateBands over %d series)\n", g.cat, g.h, factorsText(o.Levels, bandFactors), len(pool))
			}
			fmt.Fprintf(o.Log, "%s (h=%d): ", g.cat, g.h)
			if dec != nil && out.Fallback == nil {
				dec.Write(o.Log) // the decision, with its inner holdout and scores
			} else {
				out.Write(o.Log)
			}
		}
	}
	cpu := cpuTime() - cpu0
	rep := newReport(fmt.Sprintf("almanac design=%s %s designs=%v", modeName(o.Mode), describe(o, described), counts))
	if len(verdicts) > 0 {
		rep.Verdicts = verdicts
	}
	for i, e := range entries {
		f := results[i].Mean
		t := rep.tally(e.Category)
		if errs[i] != nil || len(f) != e.Horizon {
			f = make([]float64, e.Horizon)
			for k := range f {
				f[k] = e.Train[len(e.Train)-1]
			}
			t.Failed++
			rep.All.Failed++
		} else if x := results[i].Expected; !math.IsNaN(x) {
			t.Expected += x
			t.ExpectedN++
			rep.All.Expected += x
			rep.All.ExpectedN++
		}
		rep.add(e, f)
	}
	if len(entries) > 0 {
		rep.All.CPUMilliseconds = float64(cpu.Microseconds()) / 1000 / float64(len(entries))
	}
	return rep, results, nil
}

func modeName(m design.Mode) string {
	if m == "" {
		return string(design.Auto)
	}
	return string(m)
}

// factorsText prints band factors beside their levels: "0.025:1.53 0.975:1.98".
func factorsText(levels, c []float64) string {
	var b strings.Builder
	for j, f := range c {
		if j > 0 {
			b.WriteByte(' ')
		}
		fmt.Fprintf(&b, "%g:%.3f", levels[j], f)
	}
	return b.String()
}
