package design

import (
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/series"
)

// Record is a Decide outcome as plan.json holds it ("design"): what was weighed, on how many
// series, at what cost, and per segment the design, the rule's basis and the inner scores.
// JSON has no NaN: a candidate without a score is left out of Scores, an unknown cost or
// standard error is absent.
type Record struct {
	// Rule is the rule that picked (Options.Rule).
	Rule Rule `json:"rule"`
	// SampleSeries is the number of series the choice was made on; SampleLimit the most the
	// sample could hold (DefaultSampleSeries unless set otherwise).
	SampleSeries int `json:"sampleSeries"`
	SampleLimit  int `json:"sampleLimit"`
	// InnerSeries and InnerCPUSeconds: the inner holdout's series and the CPU time of the
	// pilot and the inner holdout together.
	InnerSeries     int     `json:"innerSeries"`
	InnerCPUSeconds float64 `json:"innerCPUSeconds"`
	// BudgetMillis, MemberCostMillis and DroppedMembers: the cost budget (Outcome). A decided
	// design is built from the declared zoo without DroppedMembers.
	BudgetMillis     float64            `json:"budgetMillis,omitempty"`
	MemberCostMillis map[string]float64 `json:"memberCostMillis,omitempty"`
	DroppedMembers   []string           `json:"droppedMembers,omitempty"`
	// HeldMembers kept the previous run's verdict on their cost (Outcome.HeldMembers).
	HeldMembers []string `json:"heldMembers,omitempty"`
	// Candidates are the designs weighed, simplest first.
	Candidates []RecordCandidate `json:"candidates"`
	// Segments hold one entry per segment the sample had, by name.
	Segments []RecordSegment `json:"segments"`
}

// RecordCandidate is one candidate: its name, its zoo members, and its CPU milliseconds per
// series (the sum of its members' on the pilot; absent when not measured).
type RecordCandidate struct {
	Name       string   `json:"name"`
	Members    []string `json:"members"`
	CostMillis *float64 `json:"costMillis,omitempty"`
}

// RecordSegment is the choice of one segment (Choice).
type RecordSegment struct {
	// Segment is "frequency/class/band"; Design the chosen candidate; Series the sample's
	// series in the segment.
	Segment string `json:"segment"`
	Design  string `json:"design"`
	Series  int    `json:"series"`
	// Basis is the segment whose inner series decided (the segment itself or a coarser one,
	// "*" pooled) and Inner their number; 0 when no segment had MinSeries and the simplest
	// candidate was taken.
	Basis string `json:"basis"`
	Inner int    `json:"inner"`
	// Scores are each scored candidate's mean inner MASE on the basis and its standard error.
	Scores []RecordScore `json:"scores,omitempty"`
}

// RecordScore is one candidate's mean inner MASE and standard error over the basis series.
type RecordScore struct {
	Design   string   `json:"design"`
	MeanMASE float64  `json:"meanMASE"`
	StdErr   *float64 `json:"stdErr,omitempty"`
}

func finitePtr(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

// NewRecord returns the record of a Decide outcome made with rule on a sample limited to
// sampleLimit series.
func NewRecord(out *Outcome, rule Rule, sampleLimit int) *Record {
	if rule == "" {
		rule = OneSE
	}
	r := &Record{Rule: rule, SampleSeries: out.SampleSeries, SampleLimit: sampleLimit, InnerSeries: out.InnerSeries,
		InnerCPUSeconds: math.Round(out.InnerCPU.Seconds()*1000) / 1000, DroppedMembers: slices.Clone(out.DroppedMembers),
		HeldMembers: slices.Clone(out.HeldMembers)}
	if finitePtr(out.BudgetMillis) != nil {
		r.BudgetMillis = out.BudgetMillis
	}
	for m, v := range out.MemberCostMillis {
		if finitePtr(v) != nil {
			if r.MemberCostMillis == nil {
				r.MemberCostMillis = map[string]float64{}
			}
			r.MemberCostMillis[m] = v
		}
	}
	for i, c := range out.Candidates {
		rc := RecordCandidate{Name: c}
		if i < len(out.Members) {
			rc.Members = out.Members[i]
		}
		if i < len(out.CostMillis) {
			rc.CostMillis = finitePtr(out.CostMillis[i])
		}
		r.Candidates = append(r.Candidates, rc)
	}
	for _, ch := range out.Choices {
		rs := RecordSegment{Segment: ch.Segment.String(), Design: ch.Design, Series: ch.Series, Basis: ch.Basis.String(), Inner: ch.Inner}
		for i, m := range ch.Means {
			if finitePtr(m) != nil && i < len(out.Candidates) {
				rs.Scores = append(rs.Scores, RecordScore{Design: out.Candidates[i], MeanMASE: m, StdErr: finitePtr(ch.StdErrs[i])})
			}
		}
		r.Segments = append(r.Segments, rs)
	}
	return r
}

// Before is the record's verdict on its members' cost, for the next run's Options.Before:
// Kept the members measured and not dropped, Dropped those dropped (nil when no member was
// measured: the run had nothing to choose between, or chose on no inner series).
func (r *Record) Before() *Before {
	if len(r.MemberCostMillis) == 0 {
		return nil
	}
	b := &Before{Dropped: slices.Clone(r.DroppedMembers)}
	for m := range r.MemberCostMillis {
		if !slices.Contains(r.DroppedMembers, m) {
			b.Kept = append(b.Kept, m)
		}
	}
	slices.Sort(b.Kept)
	return b
}

// Outcome turns the record back into the Outcome Forecast takes as Options.Decided; errors
// name the field.
func (r *Record) Outcome() (*Outcome, error) {
	out := &Outcome{Mode: Auto, SampleSeries: r.SampleSeries, InnerSeries: r.InnerSeries, BudgetMillis: r.BudgetMillis,
		InnerCPU: time.Duration(r.InnerCPUSeconds * float64(time.Second)), MemberCostMillis: r.MemberCostMillis, DroppedMembers: r.DroppedMembers,
		HeldMembers: r.HeldMembers}
	if !r.Rule.Valid() {
		return nil, fmt.Errorf("rule %q is not %q, %q or %q", r.Rule, OneSE, Lowest, RelativeSE)
	}
	if len(r.Candidates) == 0 {
		return nil, fmt.Errorf("candidates: none")
	}
	at := map[string]int{}
	for i, c := range r.Candidates {
		if _, dup := at[c.Name]; dup || c.Name == "" {
			return nil, fmt.Errorf("candidates[%d]: name %q empty or repeated", i, c.Name)
		}
		at[c.Name] = i
		if len(c.Members) == 0 {
			return nil, fmt.Errorf("candidates[%d] (%s): no members", i, c.Name)
		}
		out.Candidates = append(out.Candidates, c.Name)
		out.Members = append(out.Members, c.Members)
		cost := math.NaN()
		if c.CostMillis != nil {
			cost = *c.CostMillis
		}
		out.CostMillis = append(out.CostMillis, cost)
	}
	seen := map[string]bool{}
	for i, rs := range r.Segments {
		sg, err := ParseSegment(rs.Segment)
		if err == nil && (sg.Class == Any || sg.Band == Any) {
			err = fmt.Errorf("%q is pooled; a choice is made for a segment", rs.Segment)
		}
		if err != nil {
			return nil, fmt.Errorf("segments[%d].segment: %w", i, err)
		}
		basis, err := ParseSegment(rs.Basis)
		if err != nil {
			return nil, fmt.Errorf("segments[%d].basis: %w", i, err)
		}
		if seen[rs.Segment] {
			return nil, fmt.Errorf("segments[%d]: %s is listed twice", i, rs.Segment)
		}
		seen[rs.Segment] = true
		if _, ok := at[rs.Design]; !ok {
			return nil, fmt.Errorf("segments[%d].design: %q is not one of the candidates %v", i, rs.Design, out.Candidates)
		}
		ch := Choice{Segment: sg, Design: rs.Design, From: FromPlan, Series: rs.Series, Basis: basis, Inner: rs.Inner,
			Means: make([]float64, len(r.Candidates)), StdErrs: make([]float64, len(r.Candidates))}
		for j := range ch.Means {
			ch.Means[j], ch.StdErrs[j] = math.NaN(), math.NaN()
		}
		for j, sc := range rs.Scores {
			ci, ok := at[sc.Design]
			if !ok {
				return nil, fmt.Errorf("segments[%d].scores[%d].design: %q is not a candidate", i, j, sc.Design)
			}
			ch.Means[ci] = sc.MeanMASE
			if sc.StdErr != nil {
				ch.StdErrs[ci] = *sc.StdErr
			}
		}
		out.Choices = append(out.Choices, ch)
	}
	return out, nil
}

// ParseSegment reads Segment.String's form "frequency/class/band" (lower-case frequency;
// "*" for a pooled field).
func ParseSegment(s string) (Segment, error) {
	parts := strings.Split(s, "/")
	if len(parts) != 3 || parts[1] == "" || parts[2] == "" {
		return Segment{}, fmt.Errorf("%q is not frequency/class/band", s)
	}
	var sg Segment
	for _, f := range series.Frequencies {
		if strings.ToLower(string(f)) == parts[0] {
			sg.Frequency = f
		}
	}
	if sg.Frequency == "" {
		return Segment{}, fmt.Errorf("%q: frequency %q is not one of %v (lower case)", s, parts[0], series.Frequencies)
	}
	sg.Class, sg.Band = parts[1], parts[2]
	if !slices.Contains([]string{BandShort, BandMedium, BandLong, Any}, sg.Band) {
		return Segment{}, fmt.Errorf("%q: band %q is not %s, %s, %s or %s", s, sg.Band, BandShort, BandMedium, BandLong, Any)
	}
	return sg, nil
}
