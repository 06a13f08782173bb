package ingest

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
)

// MinPoints is the fewest observed periods a series needs to be passed on: the smallest
// MinLength of any model in trainer/models (Mean, Naive and SeasonalAdjustedNaive need 2).
const MinPoints = 2

// MaxPeriods is the longest span, first to last period, a series may cover; a longer one is
// rejected before its grid is allocated (a stray year 2999 row in a daily file, say).
const MaxPeriods = 1_000_000

// Rejected is a series that cannot be used, with the reason.
type Rejected struct{ Key, Reason string }

// Collector gathers the rows of one shard into series. Its memory grows with the series and
// rows added, not with the file: the caller filters rows before Add.
//
// Decisions, each recorded in the series' Notes or the rejection reason:
//   - A row with a Problem rejects its series (first problem wins; later rows are dropped).
//   - Timestamps are taken as instants and placed on the UTC grid of series.Calendar; a
//     timestamp that is not a period label (a daily row at 12:00, a weekly row on the wrong
//     weekday, a monthly row on the 15th) rejects the series, naming the rule.
//   - Rows dated after now (their period starts after now) are dropped with a note: they are
//     plans or placeholders, not history. A zero now disables the check.
//   - With KeepFuture(h) and covariate columns, the plan is kept: rows dated after now, and
//     rows whose value cell is empty, that lie in the h periods after the series' last
//     observed period give their covariates as known future values (their value is never
//     read); Series.Covariates then extend past Values. An empty value before the last
//     observed period is still a problem that rejects the series; plan rows beyond the h
//     periods are dropped with a note; plan rows for one period must agree.
//   - Identical duplicate (series, period) rows are kept once with a note; duplicates that
//     differ in value or covariates reject the series.
//   - Missing periods between the first and last row become NaN (series.Clean fills them).
//   - Fewer than MinPoints observed periods, or a span over MaxPeriods, rejects the series.
//   - Negative, constant and all-zero series pass unchanged; series.Clean applies its rules.
type Collector struct {
	cal    series.Calendar
	now    time.Time
	covs   []string
	series map[string]*pending
	// keep is how many periods after now's period keep their covariates (KeepFuture).
	keep int
}

// pending is one series while rows arrive.
type pending struct {
	reason string
	ords   []int64
	vals   []float64
	covs   []float64 // len(covs) == len(ords) * number of covariates
	future int
	first  time.Time // a future row's date, for the note
	// fords, fcovs and fprob are the plan rows (KeepFuture): ordinals, covariates, and the
	// empty-value problem of a row dated at or before now ("" after now), which rejects the
	// series if the row turns out to lie inside the history.
	fords []int64
	fcovs []float64
	fprob []string
}

// NewCollector checks the source's frequency, week anchor and date layout (errors name the
// runconfig field) and returns an empty Collector. now bounds history (see Collector).
func NewCollector(src runconfig.Source, now time.Time) (*Collector, error) {
	f, err := series.ParseFrequency(src.Frequency)
	if err != nil {
		return nil, fmt.Errorf("source.frequency: %v", err)
	}
	anchor := series.DefaultWeekAnchor
	if f == series.Weekly {
		if anchor, err = series.ParseWeekday(src.WeekAnchor); err != nil {
			return nil, fmt.Errorf("source.weekAnchor: %v", err)
		}
	}
	if err := CheckLayout(src.DateLayout); err != nil {
		return nil, fmt.Errorf("source.dateLayout: %v", err)
	}
	return &Collector{
		cal:    series.Calendar{Freq: f, Anchor: anchor},
		now:    now,
		covs:   slices.Clone(src.Columns.Covariates),
		series: map[string]*pending{},
	}, nil
}

// KeepFuture keeps the plan: the covariates of the rows in the periods periods after each
// series' last observed period that are dated after now or have an empty value (promotion
// calendars, planned prices; see Collector). It does nothing when periods < 1 or the source
// has no covariates.
func (c *Collector) KeepFuture(periods int) { c.keep = periods }

// Add takes one row.
func (c *Collector) Add(r Row) {
	p := c.series[r.Key]
	if p == nil {
		p = &pending{}
		c.series[strings.Clone(r.Key)] = p
	}
	if p.reason != "" {
		return
	}
	keeping := c.keep > 0 && len(c.covs) > 0
	after := !c.now.IsZero() && r.Date.After(c.now)
	switch {
	case r.Problem != "" && !(keeping && r.EmptyValue):
		p.reject(r.Problem)
		return
	case !c.cal.OnGrid(r.Date):
		p.reject(fmt.Sprintf("%s is off the %s grid: %s", r.Date.Format(time.RFC3339), strings.ToLower(string(c.cal.Freq)), c.cal.GridRule()))
		return
	case len(r.Covariates) != len(c.covs):
		panic(fmt.Sprintf("ingest: row has %d covariates, collector expects %d", len(r.Covariates), len(c.covs)))
	case keeping && (after || r.EmptyValue):
		prob := r.Problem
		if after {
			prob = ""
		}
		p.fords = append(p.fords, c.cal.Ordinal(r.Date))
		p.fcovs = append(p.fcovs, r.Covariates...)
		p.fprob = append(p.fprob, prob)
		return
	case after:
		if p.future == 0 || r.Date.Before(p.first) {
			p.first = r.Date
		}
		p.future++
		return
	}
	p.ords = append(p.ords, c.cal.Ordinal(r.Date))
	p.vals = append(p.vals, r.Value)
	p.covs = append(p.covs, r.Covariates...)
}

// Drop forgets every row of the series key (a sample that no longer keeps it).
func (c *Collector) Drop(key string) { delete(c.series, key) }

// Len is the number of series the Collector holds.
func (c *Collector) Len() int { return len(c.series) }

func (p *pending) reject(reason string) {
	*p = pending{reason: reason}
}

// Finish builds every series on its grid and returns those usable and those rejected, each
// sorted by key. The Collector is empty afterwards.
func (c *Collector) Finish() (ok []series.Series, rejected []Rejected) {
	keys := make([]string, 0, len(c.series))
	for k := range c.series {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		p := c.series[k]
		delete(c.series, k)
		s, reason := c.build(k, p)
		if reason != "" {
			rejected = append(rejected, Rejected{Key: k, Reason: reason})
			continue
		}
		ok = append(ok, s)
	}
	return ok, rejected
}

// build places a pending series on its grid.
func (c *Collector) build(key string, p *pending) (series.Series, string) {
	if p.reason != "" {
		return series.Series{}, p.reason
	}
	nc := len(c.covs)
	idx := make([]int, len(p.ords))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return p.ords[idx[a]] < p.ords[idx[b]] })
	var notes []string
	if p.future > 0 {
		notes = append(notes, fmt.Sprintf("dropped %d rows dated after %s (first %s)",
			p.future, c.now.UTC().Format(time.RFC3339), p.first.Format(time.RFC3339)))
	}
	// Distinct periods; duplicates must agree.
	dups := 0
	uniq := idx[:0]
	for _, i := range idx {
		if len(uniq) > 0 {
			j := uniq[len(uniq)-1]
			if p.ords[j] == p.ords[i] {
				if !sameRow(p, nc, i, j) {
					return series.Series{}, fmt.Sprintf("two rows for period %s with different values (%s and %s)",
						c.label(p.ords[i]).Format(time.RFC3339), rowText(p, nc, j), rowText(p, nc, i))
				}
				dups++
				continue
			}
		}
		uniq = append(uniq, i)
	}
	if dups > 0 {
		notes = append(notes, fmt.Sprintf("dropped %d identical duplicate rows", dups))
	}
	if len(uniq) < MinPoints {
		return series.Series{}, fmt.Sprintf("%d observed periods, at least %d are needed", len(uniq), MinPoints)
	}
	first, last := p.ords[uniq[0]], p.ords[uniq[len(uniq)-1]]
	if span := last - first + 1; span > MaxPeriods {
		return series.Series{}, fmt.Sprintf("rows span %d %s periods (%s to %s), more than the %d allowed",
			span, c.cal.Freq, c.label(first).Format(time.RFC3339), c.label(last).Format(time.RFC3339), MaxPeriods)
	}
	n := int(last - first + 1)
	plan, reason := c.planOf(p, last)
	if reason != "" {
		return series.Series{}, reason
	}
	ncov := n // covariate grid: the history, then the plan's periods
	for o := range plan.covs {
		ncov = max(ncov, int(o-first+1))
	}
	s := series.Series{Key: key, Start: c.label(first), Freq: c.cal.Freq, Values: nanSlice(n), Notes: notes}
	if nc > 0 {
		s.Covariates = make(map[string][]float64, nc)
		for _, name := range c.covs {
			s.Covariates[name] = nanSlice(ncov)
		}
	}
	for _, i := range uniq {
		at := int(p.ords[i] - first)
		s.Values[at] = p.vals[i]
		for j, name := range c.covs {
			s.Covariates[name][at] = p.covs[i*nc+j]
		}
	}
	for o, row := range plan.covs {
		for j, name := range c.covs {
			s.Covariates[name][o-first] = row[j]
		}
	}
	if len(plan.covs) > 0 {
		s.Notes = append(s.Notes, fmt.Sprintf("kept the covariates of %d planned periods after %s as known values",
			len(plan.covs), c.label(last).Format(time.RFC3339)))
	}
	if plan.dropped > 0 {
		s.Notes = append(s.Notes, fmt.Sprintf("dropped %d planned rows more than %d periods after %s", plan.dropped, c.keep, c.label(last).Format(time.RFC3339)))
	}
	if gaps := n - len(uniq); gaps > 0 {
		s.Notes = append(s.Notes, fmt.Sprintf("%d missing periods between %s and %s",
			gaps, s.Start.Format(time.RFC3339), c.label(last).Format(time.RFC3339)))
	}
	return s, ""
}

// plan is a series' plan rows placed after its history: covariates by period ordinal, and how
// many plan rows lay beyond the kept periods.
type plan struct {
	covs    map[int64][]float64
	dropped int
}

// planOf sorts the plan rows against the last observed period: a row at or before it with an
// empty value is an interior missing value and rejects the series with the row's problem; rows
// in the c.keep periods after it are the plan (two rows for one period must agree); later
// rows are dropped.
func (c *Collector) planOf(p *pending, last int64) (plan, string) {
	out := plan{covs: map[int64][]float64{}}
	nc := len(c.covs)
	for i, o := range p.fords {
		row := p.fcovs[i*nc : (i+1)*nc]
		switch {
		case o <= last:
			if p.fprob[i] != "" {
				return out, p.fprob[i]
			}
		case o > last+int64(c.keep):
			out.dropped++
		default:
			if prev, dup := out.covs[o]; dup {
				if !sameCovariates(row, prev) {
					return out, fmt.Sprintf("two planned rows for period %s with different covariates (%v and %v)",
						c.label(o).Format(time.RFC3339), prev, row)
				}
				continue
			}
			out.covs[o] = row
		}
	}
	return out, ""
}

func sameCovariates(a, b []float64) bool {
	for k := range a {
		if a[k] != b[k] && !(math.IsNaN(a[k]) && math.IsNaN(b[k])) {
			return false
		}
	}
	return true
}

// label returns the period label of an ordinal.
func (c *Collector) label(ord int64) time.Time { return c.cal.Label(ord) }

func sameRow(p *pending, nc, i, j int) bool {
	if p.vals[i] != p.vals[j] {
		return false
	}
	for k := 0; k < nc; k++ {
		a, b := p.covs[i*nc+k], p.covs[j*nc+k]
		if a != b && !(math.IsNaN(a) && math.IsNaN(b)) {
			return false
		}
	}
	return true
}

func rowText(p *pending, nc, i int) string {
	s := fmt.Sprintf("value %g", p.vals[i])
	if nc > 0 {
		s += fmt.Sprintf(", covariates %v", p.covs[i*nc:(i+1)*nc])
	}
	return s
}

func nanSlice(n int) []float64 {
	x := make([]float64, n)
	for i := range x {
		x[i] = math.NaN()
	}
	return x
}
