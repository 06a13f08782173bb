package design

import (
	"context"
	"fmt"
	"io"
	"math"
	"reflect"
	"slices"
	"sort"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// Defaults for the zero-valued Options fields.
const (
	// DefaultCostLimit: a candidate may cost up to 5 times the simplest candidate's CPU per
	// series (chosen for cost before any test score was seen: it keeps the per-series
	// designs over the cheap members and drops designs with ARIMA, about 17x ETS+Theta on M3).
	DefaultCostLimit = 5.0
	// DefaultMaxSeries caps the inner-holdout series per segment (a spread sample of the
	// eligible ones: every k-th in input order).
	DefaultMaxSeries = 100
	// DefaultMinSeries is the fewest inner series a segment chooses on by itself; below it
	// the choice comes from the next coarser segment (band pooled, then class), and when not
	// even the frequency has that many, the simplest candidate is used.
	DefaultMinSeries = 20
	// DefaultPilot is the number of inner series per segment every zoo member runs on alone,
	// to measure its cost before the inner holdout.
	DefaultPilot = 8
	// DefaultInnerOrigins is one inner-holdout origin per series: each series' last h points.
	DefaultInnerOrigins = 1
)

// Options shapes Forecast.
type Options struct {
	// Mode is Auto ("" too), PerSeries or Fixed.
	Mode Mode
	// Base is the declared configuration: zoo, combination, horizon, levels, backtest,
	// cleaning. Every candidate keeps its settings other than zoo and combination.
	Base selection.Config
	// Combinations are the fixed candidates (nil: the package's Combinations).
	Combinations []Combination
	// Rule picks per segment ("": OneSE).
	Rule Rule
	// CostLimit is the CPU budget per series as a multiple of the first (simplest)
	// candidate's cost (0: DefaultCostLimit): zoo members are dropped until every candidate
	// fits it (withinBudget; the first candidate's members are never dropped). The ratio, not milliseconds, is the budget, so that one setting fits
	// every machine, series length and horizon.
	CostLimit float64
	// MaxSeries, MinSeries and Pilot: see DefaultMaxSeries, DefaultMinSeries, DefaultPilot.
	MaxSeries, MinSeries, Pilot int
	// InnerOrigins is the number of inner-holdout origins per series (0: DefaultInnerOrigins):
	// origin k (0-based) holds out the h observations before the last k·h, where the series
	// is long enough (n - k·h >= 2h + m + 2, minHoldout); a series' inner MASE is the mean over its
	// origins (a rolling origin inside the training data, Tashman 2000, section 3).
	InnerOrigins int
	// Workers for selection.ForecastMany (<= 0: GOMAXPROCS).
	Workers int
	// CPU is the clock costs are measured with (nil: ProcessCPU).
	CPU func() time.Duration
	// Decided (Auto) is the run's choice made once by Decide, on a sample of the whole
	// portfolio (the plan step): a segment it holds takes its design with no inner holdout
	// here; the others are chosen on this call's series. Its candidates must be this run's
	// (the same Base and Combinations), or Forecast fails.
	Decided *Outcome
	// Before (Auto) is the cost verdict of the run this one follows (nil: none, as in a
	// benchmark or a portfolio's first run): a member whose cost lies within CostMargin of the
	// budget keeps the verdict it had there (withinBudget).
	Before *Before
}

func (o Options) withDefaults() Options {
	if o.Mode == "" {
		o.Mode = Auto
	}
	if o.Rule == "" {
		o.Rule = OneSE
	}
	if o.Combinations == nil {
		o.Combinations = Combinations
	}
	if o.CostLimit == 0 {
		o.CostLimit = DefaultCostLimit
	}
	if o.MaxSeries == 0 {
		o.MaxSeries = DefaultMaxSeries
	}
	if o.MinSeries == 0 {
		o.MinSeries = DefaultMinSeries
	}
	if o.Pilot == 0 {
		o.Pilot = DefaultPilot
	}
	if o.InnerOrigins == 0 {
		o.InnerOrigins = DefaultInnerOrigins
	}
	if o.CPU == nil {
		o.CPU = ProcessCPU
	}
	return o
}

// Validate reports the first invalid option, by name.
func (o Options) Validate() error {
	o = o.withDefaults()
	switch {
	case !o.Mode.Valid():
		return fmt.Errorf("design: mode %q is not one of %v", o.Mode, Modes())
	case !o.Rule.Valid():
		return fmt.Errorf("design: rule %q is not %q or %q", o.Rule, OneSE, Lowest)
	case !(o.CostLimit >= 1) || math.IsInf(o.CostLimit, 1):
		return fmt.Errorf("design: costLimit must be a finite ratio >= 1, got %v", o.CostLimit)
	case o.MaxSeries < 1 || o.MinSeries < 1 || o.Pilot < 1 || o.InnerOrigins < 1:
		return fmt.Errorf("design: maxSeries, minSeries, pilot and innerOrigins must be >= 1, got %d, %d, %d, %d", o.MaxSeries, o.MinSeries, o.Pilot, o.InnerOrigins)
	}
	return o.Base.Validate()
}

// Result is one series' forecast with the design that made it.
type Result struct {
	selection.Result
	// Design is the candidate's name (Candidate.Name).
	Design string
	// From says where the design was chosen (FromPlan, FromShard; "" outside Auto).
	From string
	// Segment is the series' segment (zero when the series could not be cleaned).
	Segment Segment
}

// Outcome says what Forecast chose and why.
type Outcome struct {
	Mode Mode
	// Candidates are the designs weighed, simplest first (one for PerSeries and Fixed).
	Candidates []string
	// MemberCostMillis is each zoo member's CPU milliseconds per series on the pilot, alone
	// (a lower bound for a member stopped at the budget); BudgetMillis is CostLimit times the
	// first candidate's cost; DroppedMembers left the zoo for cost (withinBudget).
	MemberCostMillis map[string]float64
	BudgetMillis     float64
	DroppedMembers   []string
	// HeldMembers are the members whose verdict the previous run's decided (Options.Before):
	// without it they would have been kept where they were dropped, or the other way round.
	// (A member whose run stopped at the budget counts as over it either way.)
	HeldMembers []string
	// NearBudget are the members whose verdict depends on the previous run's (they go with
	// the budget 1 - CostMargin times as large and stay with it 1 + CostMargin times as large),
	// whether or not there was a previous run: the members a timing's noise could move.
	NearBudget []string
	// CostMillis is each candidate's cost: the sum of its members' MemberCostMillis.
	CostMillis []float64
	// Members are each candidate's zoo members (DisplayName), in zoo order.
	Members [][]string
	// InnerSeries is the number of inner-holdout series (each at up to InnerOrigins origins), InnerCPU the CPU time of the pilot
	// and the inner holdout together (0 when there was nothing to choose between).
	InnerSeries int
	InnerCPU    time.Duration
	// Choices holds one entry per segment of the input, by segment name; with
	// Options.Decided, first the segments it held (From FromPlan), then those chosen here.
	Choices []Choice
	// SampleSeries is the number of series Decide chose on (0 when Forecast chose).
	SampleSeries int
	// Fallback is this call's own choice for the segments Options.Decided did not hold (nil
	// when it held all, or none was given); the Means of a FromShard Choice index its
	// Candidates.
	Fallback *Outcome
}

// Choice is the design of one segment.
type Choice struct {
	Segment Segment
	Design  string
	// From says where it was chosen: FromPlan (Decide, applied through Options.Decided) or
	// FromShard (this Forecast call).
	From string
	// Series is the number of input series in the segment.
	Series int
	// Basis is the segment whose inner series decided (the segment itself, or a coarser one
	// when it had fewer than MinSeries); Inner is their number, 0 when no segment had
	// MinSeries and the simplest candidate was taken.
	Basis Segment
	Inner int
	// Means and StdErrs are each candidate's mean inner MASE on the basis and its standard
	// error (NaN: not scored, e.g. dropped for cost).
	Means, StdErrs []float64
	// scores are the basis series' inner MASE by candidate ([candidate][series]).
	scores [][]float64
}

// Where a segment's design was chosen (Choice.From, Result.From).
const (
	// FromPlan: chosen once for the run on a sample of its series (Decide, the plan step)
	// and applied by every shard through Options.Decided.
	FromPlan = "plan"
	// FromShard: chosen by this Forecast call on its own series, because no Decided choice
	// was given or it did not hold the segment (a segment the plan's sample did not see).
	FromShard = "shard"
)

// Forecast forecasts every series of in and calls emit once per series (from the calling
// goroutine, in no promised order) with its result, design and segment.
//
// Fixed runs o.Base on every series; PerSeries runs it without its combination. Auto:
//
//  1. Every series is cleaned (o.Base.Clean) and put in its Segment.
//  2. Each segment takes its design from o.Decided when that holds the segment (From
//     FromPlan: no inner holdout here). The other segments (all of them without o.Decided)
//     are chosen here on their own series, steps 3 to 5 (From FromShard).
//  3. Inner holdout (Tashman 2000, section 2: hold out the end of the in-sample data): a
//     series with n >= 2h + m + 2 cleaned observations is eligible (minHoldout); of each segment's
//     eligible series at most MaxSeries are used (every k-th in input order). Each loses its
//     last h observations, which the candidates forecast from the rest; forecasts are scored
//     by MASE with the shortened history's seasonal-naive scale (Hyndman & Koehler 2006). A
//     candidate that fails on a series is scored with the naive forecast (last value).
//  4. Cost: every zoo member runs alone on a pilot (the first Pilot inner series of each
//     segment), the members' runs interleaved so that the machine's load falls on all alike
//     (pilotCosts); the budget is CostLimit times the summed cost of the first candidate's
//     members, and members are taken out of the zoo until the rest fit it (withinBudget).
//     The candidates are then built from that zoo, so every candidate costs at most the
//     budget (a candidate's cost is the sum of its members'). The candidates are then
//     scored together: each member is backtested and refitted once per inner series for
//     every candidate that weighs it, reusing the pilot's fits on the pilot series
//     (scoreInner); the scores are those of each candidate run on its own.
//  5. Per segment, o.Rule picks among the candidates kept, on the segment's inner series or,
//     below MinSeries, on those of the next coarser segment (band pooled, then class);
//     without MinSeries anywhere, the first (simplest) candidate is used.
//  6. Each series is forecast on its full history with its segment's design.
//
// Steps 3 to 5 are Decide; a run calls Decide once in its plan step on a sample of the whole
// portfolio (Sample) and every shard passes the result as o.Decided, so that one segment gets
// one design across shards. The test data of a benchmark is never passed in, so it cannot
// influence the choice.
func Forecast(ctx context.Context, in []series.Series, o Options, emit func(i int, r Result, err error)) (*Outcome, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	o = o.withDefaults()
	if o.Mode != Auto {
		out := &Outcome{Mode: o.Mode}
		c := ForMode(o.Mode, o.Base)
		out.Candidates = []string{c.Name}
		idx := make([]int, len(in))
		segs := make([]Segment, len(in))
		for i := range in {
			idx[i] = i
			segs[i] = segmentOf(in[i], o.Base)
		}
		return out, run(ctx, in, idx, c, "", segs, o.Workers, emit)
	}
	p := prepare(in, o)
	var out *Outcome
	// designOf maps a segment to its candidate and the choice's origin.
	type assigned struct {
		cand *Candidate
		from string
	}
	designOf := map[Segment]assigned{}
	undecided := p.order
	var first *Candidate // uncleanable series go with it (it rejects them)
	if o.Decided != nil {
		cands, err := decidedCandidates(o)
		if err != nil {
			return nil, err
		}
		first = &cands[0]
		byName := map[string]int{}
		for ci, c := range cands {
			byName[c.Name] = ci
		}
		planned := map[string]Choice{}
		for _, ch := range o.Decided.Choices {
			planned[ch.Segment.String()] = ch
		}
		d := o.Decided
		out = &Outcome{Mode: Auto, Candidates: d.Candidates, Members: d.Members, MemberCostMillis: d.MemberCostMillis, BudgetMillis: d.BudgetMillis,
			DroppedMembers: d.DroppedMembers, CostMillis: d.CostMillis, SampleSeries: d.SampleSeries}
		undecided = nil
		for _, sg := range p.order {
			ch, ok := planned[sg.String()]
			if !ok {
				undecided = append(undecided, sg)
				continue
			}
			ci, ok := byName[ch.Design]
			if !ok {
				return nil, fmt.Errorf("design: the decided design %q of segment %s is not a candidate of this run (%v)", ch.Design, sg, d.Candidates)
			}
			ch.Segment, ch.Series, ch.From = sg, len(p.bySeg[sg]), FromPlan
			out.Choices = append(out.Choices, ch)
			designOf[sg] = assigned{&cands[ci], FromPlan}
		}
	}
	if len(undecided) > 0 || out == nil {
		own, cands, chosen, err := decide(ctx, p, undecided, o)
		if err != nil {
			return nil, err
		}
		for i := range own.Choices {
			own.Choices[i].From = FromShard
		}
		for _, sg := range undecided {
			designOf[sg] = assigned{&cands[chosen[sg]], FromShard}
		}
		if out == nil {
			out, first = own, &cands[0]
		} else {
			out.Fallback = own
			out.Choices = append(out.Choices, own.Choices...)
		}
	}

	// The final run, one design at a time; series that could not be cleaned go with the
	// first candidate, which rejects them with the cleaning error.
	type group struct {
		a   assigned
		idx []int
	}
	var groups []*group
	byCand := map[*Candidate]*group{}
	for i := range in {
		a := assigned{first, FromShard}
		if p.cleaned[i] != nil {
			a = designOf[p.segs[i]]
		}
		g := byCand[a.cand]
		if g == nil {
			g = &group{a: a}
			byCand[a.cand] = g
			groups = append(groups, g)
		}
		g.idx = append(g.idx, i)
	}
	for _, g := range groups {
		if err := run(ctx, in, g.idx, *g.a.cand, g.a.from, p.segs, o.Workers, emit); err != nil {
			return nil, err
		}
	}
	return out, nil
}

// Decide chooses the design of every segment of in (Forecast's steps 1 and 3 to 5) without
// forecasting: the plan step calls it once per run on a sample of the portfolio (Sample) and
// writes the outcome into plan.json; every shard passes it to Forecast as Options.Decided.
// Only Auto chooses; for the other modes the outcome names their single design.
func Decide(ctx context.Context, in []series.Series, o Options) (*Outcome, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	o = o.withDefaults()
	if o.Mode != Auto {
		return &Outcome{Mode: o.Mode, Candidates: []string{ForMode(o.Mode, o.Base).Name}}, nil
	}
	p := prepare(in, o)
	out, _, _, err := decide(ctx, p, p.order, o)
	if err != nil {
		return nil, err
	}
	for i := range out.Choices {
		out.Choices[i].From = FromPlan
	}
	out.SampleSeries = len(in)
	return out, nil
}

// prepared is the input of an Auto call cleaned and grouped by segment.
type prepared struct {
	segs    []Segment
	cleaned []*series.Series // nil: could not be cleaned
	bySeg   map[Segment][]int
	order   []Segment // the segments present, by name
}

func prepare(in []series.Series, o Options) *prepared {
	p := &prepared{segs: make([]Segment, len(in)), cleaned: make([]*series.Series, len(in)), bySeg: map[Segment][]int{}}
	for i, s := range in {
		cp, sg := cleanSegment(s, o.Base)
		if cp == nil {
			continue // the final run rejects it with the same reason
		}
		p.cleaned[i], p.segs[i] = cp, sg
		p.bySeg[sg] = append(p.bySeg[sg], i)
	}
	for sg := range p.bySeg {
		p.order = append(p.order, sg)
	}
	sort.Slice(p.order, func(a, b int) bool { return p.order[a].String() < p.order[b].String() })
	return p
}

// decidedCandidates rebuilds the candidates o.Decided chose among: the declared zoo without
// the members it dropped for cost. They must be the ones it names (the same run
// configuration and combinations), or the decision cannot be applied.
func decidedCandidates(o Options) ([]Candidate, error) {
	cands := Candidates(withoutMembers(o.Base, o.Decided.DroppedMembers), o.Combinations)
	got := make([]string, len(cands))
	same := len(cands) == len(o.Decided.Candidates)
	for i, c := range cands {
		got[i] = c.Name
		same = same && c.Name == o.Decided.Candidates[i] &&
			(o.Decided.Members == nil || slices.Equal(members(c), o.Decided.Members[i]))
	}
	if !same {
		return nil, fmt.Errorf("design: the decided candidates %v (members %v) differ from this run's %v (another zoo or trainer version)",
			o.Decided.Candidates, o.Decided.Members, got)
	}
	return cands, nil
}

// members are c's zoo members by DisplayName.
func members(c Candidate) []string {
	out := make([]string, len(c.Config.Zoo))
	for i, sp := range c.Config.Zoo {
		out[i] = sp.DisplayName()
	}
	return out
}

// withoutMembers is c without the named zoo members (DisplayName), its combination size
// capped at the members left.
func withoutMembers(c selection.Config, names []string) selection.Config {
	c.Zoo = slices.DeleteFunc(slices.Clone(c.Zoo), func(sp models.Spec) bool { return slices.Contains(names, sp.DisplayName()) })
	if c.CombineTop > len(c.Zoo) {
		c.CombineTop = len(c.Zoo)
	}
	return c
}

// decide is Forecast's steps 3 to 5 for the segments in order (of p): it returns the outcome
// (one Choice per segment), the candidates weighed and each segment's chosen index.
func decide(ctx context.Context, p *prepared, order []Segment, o Options) (*Outcome, []Candidate, map[Segment]int, error) {
	out := &Outcome{Mode: Auto}
	cands := Candidates(o.Base, o.Combinations)
	for _, c := range cands {
		out.Candidates = append(out.Candidates, c.Name)
		out.Members = append(out.Members, members(c))
	}
	var inner []innerSeries
	var pilot []int
	if len(cands) > 1 { // else nothing to choose between
		inner, pilot, out.InnerSeries = innerSample(p, order, o)
	}
	var scores [][]float64 // [candidate][inner series] MASE, NaN: not scored
	if len(inner) > 0 {
		cpu0 := o.CPU()
		base, err := withinBudget(ctx, inner, pilot, cands[0], o, out)
		if err != nil {
			return nil, nil, nil, err
		}
		cands = Candidates(base, o.Combinations)
		out.Candidates, out.Members = out.Candidates[:0], out.Members[:0]
		for _, c := range cands {
			out.Candidates = append(out.Candidates, c.Name)
			out.Members = append(out.Members, members(c))
			out.CostMillis = append(out.CostMillis, sumCost(c.Config, out.MemberCostMillis))
		}
		if len(cands) > 1 {
			scores = make([][]float64, len(cands))
			if err := scoreInner(ctx, inner, cands, o.Workers, scores); err != nil {
				return nil, nil, nil, err
			}
		}
		out.InnerCPU = o.CPU() - cpu0
	}

	units, unitScores := collapse(inner, scores, out.InnerSeries)
	chosen := map[Segment]int{}
	for _, sg := range order {
		ch := choose(sg, units, unitScores, o)
		ch.Series = len(p.bySeg[sg])
		if ch.Inner > 0 {
			if o.Rule == RelativeSE {
				chosen[sg] = PickRelative(ch.scores)
			} else {
				chosen[sg] = o.Rule.Pick(ch.Means, ch.StdErrs)
			}
		}
		if chosen[sg] < 0 {
			chosen[sg] = 0
		}
		ch.Design = cands[chosen[sg]].Name
		out.Choices = append(out.Choices, ch)
	}
	return out, cands, chosen, nil
}

// innerSample is Forecast's step 3 for the segments in order: the inner-holdout series
// (several per series with InnerOrigins > 1), the indices of the pilot among them (the first
// Pilot series of each segment, latest origin) and the number of series they come from.
func innerSample(p *prepared, order []Segment, o Options) (inner []innerSeries, pilot []int, units int) {
	h := o.Base.Horizon
	for _, sg := range order {
		var elig []int
		for _, i := range p.bySeg[sg] {
			if len(p.cleaned[i].Values) >= minHoldout(h, seasonLength(o.Base, sg.Frequency)) {
				elig = append(elig, i)
			}
		}
		k := (len(elig) + o.MaxSeries - 1) / o.MaxSeries
		m := seasonLength(o.Base, sg.Frequency)
		for j, n := 0, 0; j < len(elig); j, n = j+max(k, 1), n+1 {
			s := *p.cleaned[elig[j]]
			for org := 0; org < o.InnerOrigins && len(s.Values)-org*h >= minHoldout(h, m); org++ {
				cut := s
				cut.Values = s.Values[:len(s.Values)-org*h]
				is := holdOut(cut, h, m)
				is.seg, is.unit = sg, units
				if n < o.Pilot && org == 0 {
					pilot = append(pilot, len(inner))
					is.fits = new(selection.Fits)
				}
				inner = append(inner, is)
			}
			units++
		}
	}
	return inner, pilot, units
}

// seasonLength is the season length of the bands and of the inner MASE scale: the declared
// one, else the frequency's (members may override theirs; the scale does not follow them).
func seasonLength(c selection.Config, f series.Frequency) int {
	if c.SeasonLength > 0 {
		return c.SeasonLength
	}
	return f.SeasonLength()
}

// segmentOf is the segment of a raw series under c (zero when it cannot be cleaned).
func segmentOf(s series.Series, c selection.Config) Segment {
	_, sg := cleanSegment(s, c)
	return sg
}

// cleanSegment returns a cleaned copy of a raw series under c and its segment (nil and zero
// when it cannot be cleaned).
func cleanSegment(s series.Series, c selection.Config) (*series.Series, Segment) {
	cp := s
	cp.Values = append([]float64(nil), s.Values...)
	cp.Notes = nil
	if err := series.Clean(&cp, c.Clean); err != nil {
		return nil, Segment{}
	}
	return &cp, SegmentOf(cp, c.Horizon, seasonLength(c, cp.Freq))
}

// run forecasts the series in[idx] with candidate c and emits their results; from is where
// the design was chosen ("" outside Auto).
func run(ctx context.Context, in []series.Series, idx []int, c Candidate, from string, segs []Segment, workers int, emit func(int, Result, error)) error {
	sub := make([]series.Series, len(idx))
	for j, i := range idx {
		sub[j] = in[i]
	}
	return selection.ForecastMany(ctx, sub, c.Config, workers, func(j int, r selection.Result, err error) {
		emit(idx[j], Result{Result: r, Design: c.Name, From: from, Segment: segs[idx[j]]}, err)
	})
}

// innerSeries is one series of the inner holdout at one origin.
type innerSeries struct {
	train  series.Series
	test   []float64
	seg    Segment
	unit   int  // the sampled series it was cut from
	scaled bool // the MASE scale of train is defined (non-zero)
	m      int  // the lag of that scale (backtest.ScaleLag of train's length)
	// fits keeps a pilot series' member fits from the pilot (pilotCost) for the inner
	// scoring (scoreInner), which would otherwise fit every kept member on it again; nil
	// for the other inner series, whose members are fitted once, in the scoring.
	fits *selection.Fits
}

// collapse averages each sampled series' inner MASE over its origins (those with a defined
// scale): it returns one entry per sampled series (n of them) with its segment, and the
// averaged scores by candidate.
func collapse(inner []innerSeries, scores [][]float64, n int) ([]innerSeries, [][]float64) {
	units := make([]innerSeries, n)
	count := make([]int, n)
	for _, is := range inner {
		units[is.unit].seg = is.seg
		if is.scaled {
			units[is.unit].scaled = true
			count[is.unit]++
		}
	}
	out := make([][]float64, len(scores))
	for ci, sc := range scores {
		out[ci] = make([]float64, n)
		for j, is := range inner {
			if is.scaled {
				out[ci][is.unit] += sc[j] / float64(count[is.unit])
			}
		}
		for u := range out[ci] {
			if !units[u].scaled {
				out[ci][u] = math.NaN()
			}
		}
	}
	return units, out
}

// holdOut cuts the last h observations of a cleaned series off as the inner test.
func holdOut(s series.Series, h, m int) innerSeries {
	n := len(s.Values)
	tr := s
	tr.Values = s.Values[: n-h : n-h]
	if len(s.Covariates) > 0 {
		tr.Covariates = map[string][]float64{}
		for k, v := range s.Covariates {
			tr.Covariates[k] = v[:min(len(v), n)]
		}
	}
	is := innerSeries{train: tr, test: s.Values[n-h:], m: backtest.ScaleLag(n-h, m)}
	is.scaled = !math.IsNaN(backtest.Score(backtest.MASE, is.test, is.test, tr.Values, is.m))
	return is
}

// scoreInner runs the candidates (without quantiles) on every inner series and sets scores[c]
// to their MASE (a failed forecast is scored as the naive forecast's, the last value
// repeated). Every candidate is a selection.Variant over one shared zoo, the union of the
// candidates' members (sharedGroups), so each member is backtested and refitted once per
// inner series (selection.ForecastManyVariants) however many candidates weigh it: the fixed
// combinations (ets-theta is ETS and Theta again) cost no fits beside the full zoo that
// top-k and per-series select from, except on series too short for the full zoo's backtest
// plan. On the pilot series the members' fits from the pilot are reused (innerSeries.fits):
// their refits always, their backtests where the member's own plan is the full zoo's. A
// candidate's score is exactly what a run of its own configuration gives
// (TestScoreInnerSharedEqualsOwnRuns).
func scoreInner(ctx context.Context, inner []innerSeries, cands []Candidate, workers int, scores [][]float64) error {
	sub := make([]series.Series, len(inner))
	fits := make([]*selection.Fits, len(inner))
	for j, is := range inner {
		sub[j], fits[j] = is.train, is.fits
	}
	for ci := range cands {
		scores[ci] = make([]float64, len(inner))
		for j := range scores[ci] {
			scores[ci][j] = math.NaN()
		}
	}
	for _, g := range sharedGroups(cands) {
		cfg := g.cfg
		cfg.Levels = nil
		cfg.ErrorOrigins = 0 // the inner holdout scores means only
		cfg.Horizon = len(inner[0].test)
		variants := make([]selection.Variant, len(g.cands))
		for v, ci := range g.cands {
			c := cands[ci].Config
			variants[v] = selection.Variant{Members: members(cands[ci]), CombineTop: c.CombineTop, CombineMethod: c.CombineMethod, CombineMargin: c.CombineMargin}
		}
		err := selection.ForecastManyVariants(ctx, sub, cfg, variants, fits, workers, func(j int, rs []selection.Result, errs []error) {
			is := inner[j]
			if !is.scaled {
				return
			}
			for v, ci := range g.cands {
				f := rs[v].Mean
				if errs[v] != nil || len(f) != len(is.test) || !finite(f) {
					last := is.train.Values[len(is.train.Values)-1]
					f = make([]float64, len(is.test))
					for k := range f {
						f[k] = last
					}
				}
				scores[ci][j] = backtest.Score(backtest.MASE, is.test, f, is.train.Values, is.m)
			}
		})
		if err != nil {
			return err
		}
	}
	return nil
}

// sharedGroup is candidates that one selection run can serve: cfg holds their common
// settings and the union of their zoos (first appearance order).
type sharedGroup struct {
	cfg   selection.Config
	cands []int
}

// sharedGroups puts the candidates into groups that share one run: the same settings other
// than zoo and combination, and no member name standing for two different specs. Candidates
// keeps every setting but those, and takes every member from the declared zoo, so its
// candidates form one group.
func sharedGroups(cands []Candidate) []sharedGroup {
	var out []sharedGroup
	for ci, c := range cands {
		joined := false
		for g := range out {
			if !reflect.DeepEqual(out[g].cfg.Settings(), c.Config.Settings()) {
				continue
			}
			fits := true
			var add []models.Spec
			for _, sp := range c.Config.Zoo {
				i := selection.MemberIndex(out[g].cfg.Zoo, sp.DisplayName())
				switch {
				case i < 0:
					add = append(add, sp)
				case !reflect.DeepEqual(out[g].cfg.Zoo[i], sp):
					fits = false
				}
			}
			if fits {
				out[g].cfg.Zoo = append(out[g].cfg.Zoo, add...)
				out[g].cands = append(out[g].cands, ci)
				joined = true
				break
			}
		}
		if !joined {
			cfg := c.Config
			cfg.Zoo = slices.Clone(c.Config.Zoo)
			out = append(out, sharedGroup{cfg: cfg, cands: []int{ci}})
		}
	}
	return out
}

// choose finds the basis of segment sg (itself or coarser, the first with MinSeries scored
// inner series) and the candidates' mean inner MASE there.
func choose(sg Segment, inner []innerSeries, scores [][]float64, o Options) Choice {
	ch := Choice{Segment: sg, Basis: sg}
	for basis, ok := sg, true; ok; basis, ok = basis.coarser() {
		var members []int
		for j, is := range inner {
			if is.scaled && within(is.seg, basis) {
				members = append(members, j)
			}
		}
		if len(members) < o.MinSeries || len(scores) == 0 || scores[0] == nil {
			continue
		}
		ch.Basis, ch.Inner = basis, len(members)
		for ci := range scores {
			var xs []float64
			for _, j := range members {
				if v := scores[ci][j]; !math.IsNaN(v) {
					xs = append(xs, v)
				}
			}
			mean, se := meanSE(xs)
			if len(xs) < len(members) { // dropped for cost: no score at all
				mean, se = math.NaN(), math.NaN()
				xs = []float64{math.NaN()}
			}
			ch.scores = append(ch.scores, xs)
			ch.Means, ch.StdErrs = append(ch.Means, mean), append(ch.StdErrs, se)
		}
		return ch
	}
	return ch
}

// within reports whether segment s falls in segment b (b's "*" fields match anything).
func within(s, b Segment) bool {
	return s.Frequency == b.Frequency && (b.Class == Any || s.Class == b.Class) && (b.Band == Any || s.Band == b.Band)
}

// Write prints the outcome: candidates with cost, then per segment the choice, where it was
// chosen and its basis; then, when a Decided outcome did not hold every segment, this call's
// own choice for the rest.
func (out *Outcome) Write(w io.Writer) {
	if out.Mode != Auto || len(out.Candidates) < 2 && out.Fallback == nil {
		fmt.Fprintf(w, "design %s: %s for every series\n", out.Mode, strings.Join(out.Candidates, ", "))
		if out.Mode == Auto {
			// One candidate left: the budget may have dropped the others' members.
			out.writeMemberCosts(w)
		}
		return
	}
	out.writeHead(w)
	for _, ch := range out.Choices {
		cands := out.Candidates
		if ch.From == FromShard && out.Fallback != nil {
			cands = out.Fallback.Candidates
		}
		fmt.Fprintf(w, "  %-28s %5d series: %-16s (%s; basis %s, %d inner series", ch.Segment, ch.Series, ch.Design, orShard(ch.From), ch.Basis, ch.Inner)
		for i, m := range ch.Means {
			if !math.IsNaN(m) && i < len(cands) {
				fmt.Fprintf(w, "; %s %.4f (%.4f)", cands[i], m, ch.StdErrs[i])
			}
		}
		fmt.Fprintln(w, ")")
	}
	if out.Fallback != nil {
		fmt.Fprint(w, "  segments the decided design did not hold, chosen here: ")
		out.Fallback.writeHead(w)
	}
}

func orShard(from string) string {
	if from == "" {
		return FromShard
	}
	return from
}

// writeMemberCosts prints MemberCosts' line, if any member was measured, and the members
// near the budget (NearBudget).
func (out *Outcome) writeMemberCosts(w io.Writer) {
	if line := out.MemberCosts(); line != "" {
		fmt.Fprintf(w, "  member cost, ms/series, most first: %s\n", line)
	}
	if len(out.NearBudget) > 0 {
		fmt.Fprintf(w, "  within %.0f%% of the budget (a run keeps the previous run's verdict on them): %s\n", 100*CostMargin, strings.Join(out.NearBudget, ", "))
	}
}

// MemberCosts lists MemberCostMillis, most costly first (ties by name), so a reader sees how
// near the budget each member came: a member measured at CPU time close to the budget may be
// kept by one run and dropped by the next (PROJECT-NOTES, thirteenth session). A dropped
// member's cost above the budget is a lower bound (its run may have stopped there) and reads
// "at least"; a dropped member is marked so, and a member whose verdict the previous run's
// decided (HeldMembers) says so.
func (out *Outcome) MemberCosts() string {
	names := make([]string, 0, len(out.MemberCostMillis))
	for n, c := range out.MemberCostMillis {
		if !math.IsNaN(c) {
			names = append(names, n)
		}
	}
	sort.Slice(names, func(i, j int) bool {
		a, b := out.MemberCostMillis[names[i]], out.MemberCostMillis[names[j]]
		if a != b {
			return a > b
		}
		return names[i] < names[j]
	})
	parts := make([]string, len(names))
	for i, n := range names {
		c := out.MemberCostMillis[n]
		p := fmt.Sprintf("%s %.2f", n, c)
		dropped := slices.Contains(out.DroppedMembers, n)
		if dropped && c > out.BudgetMillis {
			p = fmt.Sprintf("%s at least %.2f", n, c)
		}
		switch {
		case dropped && slices.Contains(out.HeldMembers, n):
			p += " (dropped, as by the previous run)"
		case dropped:
			p += " (dropped)"
		case slices.Contains(out.HeldMembers, n):
			p += " (kept, as by the previous run)"
		}
		parts[i] = p
	}
	return strings.Join(parts, ", ")
}

// writeHead prints the inner holdout's size and cost and the candidates with their cost.
func (out *Outcome) writeHead(w io.Writer) {
	fmt.Fprintf(w, "design auto: %d inner-holdout series, %.2f s CPU", out.InnerSeries, out.InnerCPU.Seconds())
	if out.SampleSeries > 0 {
		fmt.Fprintf(w, ", chosen once on a sample of %d series", out.SampleSeries)
	}
	if out.InnerSeries == 0 {
		// No series long enough for the inner holdout (n >= 2h + m + 2): nothing was
		// measured, and every segment takes the first candidate.
		fmt.Fprintf(w, "; no series long enough to choose on: the first candidate everywhere\n")
		return
	}
	fmt.Fprintf(w, "; budget %.2f ms/series", out.BudgetMillis)
	if len(out.DroppedMembers) > 0 {
		fmt.Fprintf(w, "; over budget: %s", strings.Join(out.DroppedMembers, ", "))
	}
	fmt.Fprintln(w)
	out.writeMemberCosts(w)
	for i, c := range out.Candidates {
		if i < len(out.CostMillis) {
			fmt.Fprintf(w, "  candidate %-16s %8.2f ms/series\n", c, out.CostMillis[i])
		} else {
			fmt.Fprintf(w, "  candidate %-16s (cost not measured)\n", c)
		}
	}
}

// Counts returns the number of series per chosen design.
func (out *Outcome) Counts() map[string]int {
	c := map[string]int{}
	for _, ch := range out.Choices {
		c[ch.Design] += ch.Series
	}
	return c
}

func finite(xs []float64) bool {
	for _, x := range xs {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// Standalone returns a test of whether Forecast gives a series the same result whichever
// other series the call holds, or nil when no series does. Under Fixed and PerSeries every
// series stands alone; under Auto with Decided, a series whose segment the decision holds
// (its design is the plan's) or that cannot be cleaned (the decided first candidate rejects
// it). Nil: Auto without Decided (the call chooses on its own series), or a zoo member fitted
// across the call's series (regression.acrossShard).
//
// A caller may forecast standalone series in batches of any size, and must give the others
// (segments the decision did not hold) to one call of their own, in input order: Forecast
// chooses their segments on their series only (Decided's segments draw no inner series), so
// that call chooses what one call over every series would have.
func (o Options) Standalone() func(series.Series) bool {
	o = o.withDefaults()
	for _, sp := range o.Base.Zoo {
		if sp.Regression != nil && sp.Regression.AcrossShard {
			return nil
		}
	}
	if o.Mode != Auto {
		return func(series.Series) bool { return true }
	}
	if o.Decided == nil {
		return nil
	}
	held := map[string]bool{}
	for _, ch := range o.Decided.Choices {
		held[ch.Segment.String()] = true
	}
	return func(s series.Series) bool {
		sg := segmentOf(s, o.Base)
		return sg == Segment{} || held[sg.String()]
	}
}
