package design

// The cost side of the automatic design: each zoo member is timed alone on a pilot of inner
// series, the budget is CostLimit times the first candidate's cost, members over it leave the
// zoo, and a previous run's verdict holds within CostMargin of it.

import (
	"context"
	"math"
	"runtime"
	"slices"
	"time"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// Before is a previous run's verdict on its zoo members' cost, by DisplayName: Kept were
// measured and stayed, Dropped left the zoo for cost (Record.Before reads it from that run's
// plan record; a bench --json run prints each group's as costVerdict).
type Before struct {
	Kept    []string `json:"kept"`
	Dropped []string `json:"dropped"`
}

// CostMargin is how far the cost verdict holds on to the previous run's: a member the
// previous run kept stays while the costs fit (1 + CostMargin) times the budget, and one it
// dropped comes back only when they fit (1 - CostMargin) times it. A cost measured on a
// pilot moves from run to run, so a member near the budget would otherwise be kept by one
// run and dropped by the next, and the portfolio's design with it. Measured on the hourly
// pilot of the M4 dev half, interleaved (pilotCosts): the summed cost of the members kept
// read 0.885 to 1.04 times the budget over fourteen runs (quiet, beside a compiler loop,
// beside a CI run, and two bench runs in fresh processes), at most 9% from their mean; the
// margin is about twice that (PROJECT-NOTES, fourteenth session).
const CostMargin = 0.20

// margin is the factor of the budget that member name's verdict is judged against: 1 +
// CostMargin if o.Before kept it, 1 - CostMargin if it dropped it, else 1.
func (o Options) margin(name string) float64 {
	switch {
	case o.Before == nil:
		return 1
	case slices.Contains(o.Before.Kept, name):
		return 1 + CostMargin
	case slices.Contains(o.Before.Dropped, name):
		return 1 - CostMargin
	}
	return 1
}

// withinBudget measures every zoo member's CPU time per series on the pilot, each member alone
// (its backtest and its fit, as selection runs it; pilotCosts), sets out.MemberCostMillis,
// out.BudgetMillis (CostLimit times the summed cost of first's members), out.DroppedMembers
// and out.HeldMembers, and returns o.Base with the dropped members taken out of the zoo. A
// member is dropped when its run stopped at the budget or its cost exceeds it, then, most
// expensive first (of equal costs the later in zoo order, the more complex), until the
// remaining members' costs sum to at most the budget (overBudget); first's members and the
// members that read features (models.ReadsFeatures) are never dropped and the latter do not
// count against the budget, so a candidate with them may cost more than the budget. A
// candidate's cost is the sum of its members' (sumCost). With o.Before, "the budget" is the
// budget times o.margin: within CostMargin of it a member keeps the previous run's verdict.
func withinBudget(ctx context.Context, inner []innerSeries, pilot []int, first Candidate, o Options, out *Outcome) (selection.Config, error) {
	base := o.Base
	protected := map[string]bool{}
	for _, sp := range first.Config.Zoo {
		protected[sp.DisplayName()] = true
	}
	for _, sp := range base.Zoo {
		// Members that forecast from features are never dropped for cost: they are in the zoo
		// only when the portfolio lists them, and they are the only members that read planned
		// covariates and events, so no cheaper member can stand in for them.
		if models.ReadsFeatures(sp.Family) {
			protected[sp.DisplayName()] = true
		}
	}
	cost, budget, stopped, err := pilotCosts(ctx, inner, pilot, first, protected, o)
	if err != nil {
		return base, err
	}
	out.MemberCostMillis, out.BudgetMillis = cost, budget
	out.DroppedMembers = overBudget(base.Zoo, cost, budget, stopped, protected, o.margin)
	every := func(f float64) func(string) float64 { return func(string) float64 { return f } }
	plain := overBudget(base.Zoo, cost, budget, stopped, protected, every(1))
	tight := overBudget(base.Zoo, cost, budget, stopped, protected, every(1-CostMargin))
	loose := overBudget(base.Zoo, cost, budget, stopped, protected, every(1+CostMargin))
	for _, sp := range base.Zoo {
		n := sp.DisplayName()
		if slices.Contains(plain, n) != slices.Contains(out.DroppedMembers, n) {
			out.HeldMembers = append(out.HeldMembers, n)
		}
		if slices.Contains(tight, n) != slices.Contains(loose, n) {
			out.NearBudget = append(out.NearBudget, n)
		}
	}
	return withoutMembers(base, out.DroppedMembers), nil
}

// overBudget returns the members of zoo that leave it for cost, in the order they go: first
// each whose run stopped at the budget or whose cost exceeds margin(its name) times the budget,
// then, most expensive first (of equal costs the later in zoo order, the more complex), until
// the remaining members' costs sum to at most the budget times the least margin of those of
// them that may go. Protected members never go, and the members that read features
// (models.ReadsFeatures) do not count in the sum. With margin 1 throughout this is the plain
// rule; with Options.margin a member near the budget keeps the previous run's verdict.
func overBudget(zoo []models.Spec, cost map[string]float64, budget float64, stopped, protected map[string]bool, margin func(string) float64) []string {
	var dropped []string
	keep := slices.Clone(zoo)
	drop := func(name string) {
		dropped = append(dropped, name)
		keep = slices.DeleteFunc(keep, func(sp models.Spec) bool { return sp.DisplayName() == name })
	}
	for _, sp := range zoo {
		if n := sp.DisplayName(); !protected[n] && (stopped[n] || cost[n] > margin(n)*budget) {
			drop(n)
		}
	}
	for {
		sum, limit, worst := 0.0, math.Inf(1), ""
		for _, sp := range keep {
			n := sp.DisplayName()
			if !models.ReadsFeatures(sp.Family) {
				sum += cost[n]
			}
			if !protected[n] {
				limit = min(limit, margin(n))
				if worst == "" || cost[n] >= cost[worst] {
					worst = n
				}
			}
		}
		if worst == "" || sum <= limit*budget {
			return dropped
		}
		drop(worst)
	}
}

// pilotCosts runs every member of o.Base.Zoo alone on the pilot inner series and returns each
// member's CPU milliseconds per pilot series (by DisplayName), the budget (CostLimit times the
// summed cost of first's members, at least minBudgetMillis) and the members whose run stopped
// at the budget.
//
// The runs are interleaved: the pilot goes in rounds of w series (w the workers, so that a
// round keeps them busy, but at most a pilotRounds-th of the pilot), and in every round each member still running takes that round's
// series alone, the protected members (first's and those withinBudget never drops) before the
// others, each group starting one member further on in every round. Load that comes and goes on
// the node, and the garbage collector's work, which the process clock charges to whatever
// runs while it lasts, then fall on every member alike, and the ratios of the costs, which are
// all the budget reads, hold still. Measured one member after the other, on the whole pilot
// each, the same hourly pilot gave ETS 70 to 115 ms per series from run to run, and the budget
// moved with it (PROJECT-NOTES, fourteenth session).
//
// A member that is not protected stops once it has used, over the rounds so far, the budget
// (as the rounds so far estimate it; times o.margin for a member the previous run kept) for
// every pilot series: its cost is then a lower bound, above the budget.
func pilotCosts(ctx context.Context, inner []innerSeries, pilot []int, first Candidate, protected map[string]bool, o Options) (cost map[string]float64, budget float64, stopped map[string]bool, err error) {
	zoo := o.Base.Zoo
	used := make([]float64, len(zoo)) // CPU milliseconds over the rounds so far
	at := map[string]int{}
	var prot, rest []int
	for i, sp := range zoo {
		at[sp.DisplayName()] = i
		if protected[sp.DisplayName()] {
			prot = append(prot, i)
		} else {
			rest = append(rest, i)
		}
	}
	budgetAfter := func(done int) float64 {
		s := 0.0
		for _, sp := range first.Config.Zoo {
			s += used[at[sp.DisplayName()]]
		}
		return max(o.CostLimit*s/float64(done), minBudgetMillis)
	}
	alone := func(i int) selection.Config {
		c := o.Base
		c.Zoo, c.CombineTop, c.CombineMethod, c.CombineMargin = zoo[i:i+1], 0, "", 0
		return c
	}
	n := len(pilot)
	w := o.Workers
	if w <= 0 {
		w = runtime.GOMAXPROCS(0)
	}
	w = max(min(w, n/pilotRounds), 1)
	stopped = map[string]bool{}
	budget = minBudgetMillis
	for r, start := 0, 0; start < n; r, start = r+1, start+w {
		round := pilot[start:min(start+w, n)]
		for _, i := range rotated(prot, r) {
			ms, _, err := pilotCost(ctx, inner, round, alone(i), o, math.Inf(1))
			if err != nil {
				return nil, 0, nil, err
			}
			used[i] += ms
		}
		budget = budgetAfter(start + len(round))
		for _, i := range rotated(rest, r) {
			name := zoo[i].DisplayName()
			if stopped[name] {
				continue
			}
			limit := max(o.margin(name), 1) * budget * float64(n)
			ms, cut, err := pilotCost(ctx, inner, round, alone(i), o, limit-used[i])
			if err != nil {
				return nil, 0, nil, err
			}
			used[i] += ms
			stopped[name] = cut || used[i] > limit
		}
	}
	cost = map[string]float64{}
	for i, sp := range zoo {
		cost[sp.DisplayName()] = used[i] / float64(n)
		if n == 0 {
			cost[sp.DisplayName()] = math.NaN()
		}
	}
	return cost, budget, stopped, nil
}

// pilotRounds is the fewest rounds pilotCosts takes the pilot in when it has that many series:
// with as many workers as pilot series, one round would measure the members one after the
// other again. The price is wall time, not CPU time: eight rounds of the 16-series hourly pilot
// keep two of sixteen workers busy, so on such a node the pilot takes up to eight times as long
// as one round would (about 25 CPU seconds there in all).
const pilotRounds = 8

// rotated returns xs starting at element r modulo its length, the elements before it last.
func rotated(xs []int, r int) []int {
	if len(xs) == 0 {
		return nil
	}
	k := r % len(xs)
	return append(slices.Clone(xs[k:]), xs[:k]...)
}

// minBudgetMillis is the least budget withinBudget sets, in CPU milliseconds per series. Below
// it the pilot's CPU clock cannot rank members (a naive or drift fit takes microseconds, and a
// loaded machine moves such timings by more than the CostLimit ratio), and nothing worth saving
// is at stake; so members that cheap are never dropped. Every measured budget of the
// benchmarks is above it (M3 Yearly 2.6 ms, the smallest).
const minBudgetMillis = 1.0

// pilotCost runs c on the given pilot inner series and returns the CPU milliseconds it used
// in all; the run stops early (cut) once it has used more than limit milliseconds, and the
// result is then a lower bound above limit. The fits are kept in the pilot series'
// innerSeries.fits, for scoreInner.
func pilotCost(ctx context.Context, inner []innerSeries, pilot []int, c selection.Config, o Options, limit float64) (ms float64, cut bool, err error) {
	if len(pilot) == 0 {
		return 0, false, nil
	}
	if limit <= 0 {
		return 0, true, nil
	}
	c.Levels = nil
	c.ErrorOrigins = 0
	c.Horizon = len(inner[pilot[0]].test)
	sub := make([]series.Series, len(pilot))
	fits := make([]*selection.Fits, len(pilot))
	for j, i := range pilot {
		sub[j], fits[j] = inner[i].train, inner[i].fits
	}
	rctx, cancel := context.WithCancel(ctx)
	defer cancel()
	t0 := o.CPU()
	spent := func() float64 { return float64((o.CPU() - t0).Microseconds()) / 1000 }
	done := make(chan struct{})
	if !math.IsInf(limit, 1) {
		go func() {
			tick := time.NewTicker(5 * time.Millisecond)
			defer tick.Stop()
			for {
				select {
				case <-done:
					return
				case <-tick.C:
					if spent() > limit {
						cancel()
						return
					}
				}
			}
		}()
	}
	err = selection.ForecastManyVariants(rctx, sub, c, []selection.Variant{{}}, fits, o.Workers, func(int, []selection.Result, []error) {})
	close(done)
	if err != nil && ctx.Err() != nil {
		return 0, false, ctx.Err()
	}
	if err != nil && rctx.Err() == nil {
		return 0, false, err
	}
	return spent(), rctx.Err() != nil, nil
}

// sumCost is the summed cost of c's zoo members (NaN for an unmeasured one).
func sumCost(c selection.Config, member map[string]float64) float64 {
	s := 0.0
	for _, sp := range c.Zoo {
		v, ok := member[sp.DisplayName()]
		if !ok {
			return math.NaN()
		}
		s += v
	}
	return s
}
