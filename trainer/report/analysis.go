package report

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/tables"
)

// Count is a name and how many series it applies to.
type Count struct {
	Name  string
	Count int
}

// FamilyScore is the backtest accuracy of the series whose chosen model is of one family.
type FamilyScore struct {
	Family string
	// Series counts the series of the family; Scored those with a finite backtest score.
	Series, Scored int
	// Median is the median backtest score of the scored series (NaN when none).
	Median float64
	// BeatBenchmark counts scored series with a score below 1 (scaled metrics only).
	BeatBenchmark int
}

// Overview is the portfolio summary at the top of the report.
type Overview struct {
	// Series = Trained + Rejected; Carried counts trained series whose unit was carried forward.
	Series, Trained, Rejected, Carried int
	// Models counts series by chosen model, most used first.
	Models []Count
	// Families is the backtest accuracy by chosen model family, most used first.
	Families []FamilyScore
	// Designs counts series by segment and the design that forecast them (the models table's
	// design and segment columns), by segment then design; nil for tables without them.
	Designs []DesignRow
	// Cost says which models the plan's design left out for cost (CostWords; "" without a
	// timed plan).
	Cost string
	// Evaluated, Drifted and the means summarize the evaluation of the previous run's forecasts.
	Evaluated, Drifted, EvaluatedPoints int
	ExpectedMean, RealizedMean          float64
	PreviousRun                         string
}

// intermittentFamilies are the model families made for intermittent demand.
var intermittentFamilies = map[string]bool{models.FamilyCroston: true, models.FamilySBA: true, models.FamilyTSB: true}

// familyOf returns the model family of a chosen-model name: the zoo member's family when the
// name is a member's display name, Combination for a combination, and otherwise the name up to
// its first parenthesis (a fallback family's own name).
func familyOf(zoo []runconfig.Model, name string) string {
	for _, s := range zoo {
		if s.DisplayName() == name {
			return s.Family
		}
	}
	if strings.HasPrefix(name, selection.FamilyCombination) {
		return selection.FamilyCombination
	}
	if i := strings.IndexByte(name, '('); i > 0 {
		return name[:i]
	}
	return name
}

// overview adds up the run's tables.
func overview(r *Run) Overview {
	o := Overview{Trained: len(r.Models), Rejected: len(r.Rejected), Series: len(r.Models) + len(r.Rejected)}
	byModel := map[string]int{}
	byFamily := map[string][]float64{}
	famSeries := map[string]int{}
	for _, m := range r.Models {
		byModel[m.Model]++
		f := familyOf(r.Config.Models, m.Model)
		famSeries[f]++
		if !math.IsNaN(m.Score) && !math.IsInf(m.Score, 0) {
			byFamily[f] = append(byFamily[f], m.Score)
		}
		if _, ok := r.Carried[m.Key]; ok {
			o.Carried++
		}
	}
	o.Models = sortCounts(byModel)
	o.Designs = designRows(r.Models)
	withPlanScores(o.Designs, r.Design)
	o.Cost = CostWords(r.Design)
	for _, c := range sortCounts(famSeries) {
		fs := FamilyScore{Family: c.Name, Series: c.Count, Median: math.NaN()}
		scores := byFamily[c.Name]
		if len(scores) > 0 {
			sort.Float64s(scores)
			fs.Scored = len(scores)
			fs.Median = median(scores)
			for _, s := range scores {
				if s < 1 {
					fs.BeatBenchmark++
				}
			}
		}
		o.Families = append(o.Families, fs)
	}
	var es, rs float64
	for _, e := range r.Evaluation {
		o.Evaluated++
		o.EvaluatedPoints += e.Points
		es += e.Expected
		rs += e.Realized
		if e.Drifted {
			o.Drifted++
		}
		if o.PreviousRun == "" {
			o.PreviousRun = e.PreviousRun
		}
	}
	if o.Evaluated > 0 {
		o.ExpectedMean, o.RealizedMean = es/float64(o.Evaluated), rs/float64(o.Evaluated)
	}
	return o
}

// sortCounts returns the map's entries by count (descending), then name.
func sortCounts(m map[string]int) []Count {
	out := make([]Count, 0, len(m))
	for k, v := range m {
		out = append(out, Count{k, v})
	}
	sort.Slice(out, func(i, j int) bool {
		if out[i].Count != out[j].Count {
			return out[i].Count > out[j].Count
		}
		return out[i].Name < out[j].Name
	})
	return out
}

// median of sorted, non-empty x.
func median(x []float64) float64 {
	n := len(x)
	if n%2 == 1 {
		return x[n/2]
	}
	return (x[n/2-1] + x[n/2]) / 2
}

// Limits caps the per-series section.
type Limits struct {
	// Largest is the number of series with the highest forecast volume to draw.
	Largest int
	// Intermittent is the number of intermittent-demand series to draw (largest first).
	Intermittent int
	// Drifted caps the drifted series drawn.
	Drifted int
}

// DefaultLimits draws the 12 largest series, 4 intermittent ones and up to 12 drifted ones.
var DefaultLimits = Limits{Largest: 12, Intermittent: 4, Drifted: 12}

// Pick is a series chosen for the per-series section and why.
type Pick struct {
	Key string
	// Why holds "largest", "intermittent" and/or "drifted".
	Why []string
}

// Reasons a series is drawn.
const (
	WhyLargest      = "largest"
	WhyIntermittent = "intermittent"
	WhyDrifted      = "drifted"
)

// intermittent reports whether a trained series has intermittent demand. With the history's
// demand class known (class != "") that decides: intermittent or lumpy. Without it, the chosen
// model being of an intermittent-demand family, or selection's note of an intermittent or lumpy
// class, stands in; it is weaker evidence, as Croston's method also wins on some smooth series.
func intermittent(zoo []runconfig.Model, m modelInfo, class string) bool {
	if class != "" {
		return class == selection.ClassIntermittent || class == selection.ClassLumpy
	}
	if intermittentFamilies[familyOf(zoo, m.Model)] {
		return true
	}
	return strings.Contains(m.Notes, selection.ClassIntermittent+" demand") || strings.Contains(m.Notes, selection.ClassLumpy+" demand")
}

// modelInfo is the part of a models row choose needs.
type modelInfo struct{ Model, Notes string }

// choose picks the series to draw: the lim.Largest with the highest forecast volume (sum of
// the mean over the horizon), the lim.Intermittent largest intermittent ones (see
// intermittent; classes holds the history's demand class by series, nil when unknown), and up to
// lim.Drifted drifted ones (the highest realized/expected ratio first). A series picked for
// several reasons appears once, listing them all, in the order largest, intermittent, drifted.
func choose(r *Run, lim Limits, classes map[string]string) []Pick {
	info := map[string]modelInfo{}
	for _, m := range r.Models {
		info[m.Key] = modelInfo{m.Model, m.Notes}
	}
	type vol struct {
		key string
		v   float64
	}
	var vols []vol
	for k, v := range r.Volume {
		if _, ok := info[k]; ok {
			vols = append(vols, vol{k, v})
		}
	}
	sort.Slice(vols, func(i, j int) bool {
		if vols[i].v != vols[j].v {
			return vols[i].v > vols[j].v
		}
		return vols[i].key < vols[j].key
	})
	var out []Pick
	at := map[string]int{}
	add := func(key, why string) {
		if i, ok := at[key]; ok {
			out[i].Why = append(out[i].Why, why)
			return
		}
		at[key] = len(out)
		out = append(out, Pick{Key: key, Why: []string{why}})
	}
	for i := 0; i < len(vols) && i < lim.Largest; i++ {
		add(vols[i].key, WhyLargest)
	}
	n := 0
	for _, v := range vols {
		if n == lim.Intermittent {
			break
		}
		if intermittent(r.Config.Models, info[v.key], classes[v.key]) {
			add(v.key, WhyIntermittent)
			n++
		}
	}
	var drifted []int
	for i, e := range r.Evaluation {
		if _, ok := info[e.Key]; e.Drifted && ok {
			drifted = append(drifted, i)
		}
	}
	ratio := func(i int) float64 { return r.Evaluation[i].Realized / r.Evaluation[i].Expected }
	sort.SliceStable(drifted, func(a, b int) bool { return ratio(drifted[a]) > ratio(drifted[b]) })
	for i := 0; i < len(drifted) && i < lim.Drifted; i++ {
		add(r.Evaluation[drifted[i]].Key, WhyDrifted)
	}
	return out
}

// DesignRow is how many series of one segment one design forecast, and where it was chosen
// (ChosenBy: the models table's design_chosen_by, "plan" or "shard"; "" for tables written
// before it). The plan chooses once per segment for the run; a segment its sample did not
// hold is chosen by each shard apart, so such a segment can have more than one row.
type DesignRow struct {
	Segment, Design, ChosenBy string
	Series                    int
	// Inner and Simplest are, for a design the run's plan chose, the mean inner-holdout MASE
	// of the chosen design and of the simplest candidate on the series the choice rested on
	// (plan.json's scores; "" when not known).
	Inner, Simplest string
}

// withPlanScores fills Inner and Simplest of the rows the plan chose from its record: only
// where the record's segment chose the row's design (a carried-forward unit may come from a
// run whose plan chose otherwise).
func withPlanScores(rows []DesignRow, rec *design.Record) {
	if rec == nil || len(rec.Candidates) == 0 {
		return
	}
	simplest := rec.Candidates[0].Name
	for i, row := range rows {
		if row.ChosenBy != design.FromPlan {
			continue
		}
		for _, sg := range rec.Segments {
			if sg.Segment != row.Segment || sg.Design != row.Design {
				continue
			}
			for _, sc := range sg.Scores {
				if sc.Design == row.Design {
					rows[i].Inner = fmt.Sprintf("%.3f", sc.MeanMASE)
				}
				if sc.Design == simplest {
					rows[i].Simplest = fmt.Sprintf("%.3f", sc.MeanMASE)
				}
			}
		}
	}
}

// designRows counts the models rows by segment, design and where the design was chosen.
func designRows(rows []tables.ModelRow) []DesignRow {
	type key struct{ seg, design, by string }
	n := map[key]int{}
	for _, m := range rows {
		if m.Design != "" {
			n[key{m.Segment, m.Design, m.DesignBy}]++
		}
	}
	out := make([]DesignRow, 0, len(n))
	for k, c := range n {
		out = append(out, DesignRow{Segment: k.seg, Design: k.design, ChosenBy: k.by, Series: c})
	}
	sort.Slice(out, func(i, j int) bool {
		if out[i].Segment != out[j].Segment {
			return out[i].Segment < out[j].Segment
		}
		if out[i].Design != out[j].Design {
			return out[i].Design < out[j].Design
		}
		return out[i].ChosenBy < out[j].ChosenBy
	})
	if len(out) == 0 {
		return nil
	}
	return out
}
