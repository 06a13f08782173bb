package report

import (
	"fmt"
	"sort"
	"strconv"
	"strings"

	"almanac.dev/almanac/trainer/tables"
)

// FeatureUse is what one feature-built zoo member kept across the series whose published
// forecast uses it (the chosen member, or a member of the chosen combination): how many such
// series there are and, per feature, on how many of them the member kept it after feature
// selection (the models table's kept_features).
type FeatureUse struct {
	Member string
	Series int
	// Features is by count, most kept first, then by name.
	Features []FeatureCount
}

// FeatureCount is one feature, on how many series it was kept, the share of the member's
// series, and what it is in words.
type FeatureCount struct {
	Name, Words, Share string
	Count              int
}

// featureUse adds up the kept features of the models table by member, members by series
// count (most first), then name. noun is the period noun ("week").
func featureUse(rows []tables.ModelRow, noun string) []FeatureUse {
	series := map[string]int{}
	kept := map[string]map[string]int{}
	for _, r := range rows {
		for member, fs := range r.Features {
			series[member]++
			if kept[member] == nil {
				kept[member] = map[string]int{}
			}
			for _, f := range fs {
				kept[member][f]++
			}
		}
	}
	var out []FeatureUse
	for _, c := range sortCounts(series) {
		u := FeatureUse{Member: c.Name, Series: c.Count}
		for _, fc := range sortCounts(kept[c.Name]) {
			u.Features = append(u.Features, FeatureCount{Name: fc.Name, Count: fc.Count, Words: FeatureWords(fc.Name, noun),
				Share: fmt.Sprintf("%.0f%%", 100*float64(fc.Count)/float64(c.Count))})
		}
		out = append(out, u)
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Series > out[j].Series })
	return out
}

// FeatureWords says in plain words what a generated feature (trainer/features' names) is,
// for planners: "covariate:promo:lag1" is "promo one week earlier". Unknown names are
// returned as they are.
func FeatureWords(name, noun string) string {
	ago := func(n string) string {
		k, err := strconv.Atoi(n)
		if err != nil {
			return n + " " + noun + "s earlier"
		}
		if k == 1 {
			return "one " + noun + " earlier"
		}
		return plural(k, noun) + " earlier"
	}
	switch {
	case strings.HasPrefix(name, "covariate:"):
		rest := strings.TrimPrefix(name, "covariate:")
		if i := strings.LastIndex(rest, ":lag"); i > 0 {
			return fmt.Sprintf("the input column %s, %s", rest[:i], ago(rest[i+4:]))
		}
		return "the input column " + rest + " (its planned value for the forecast " + noun + ")"
	case strings.HasPrefix(name, "event:"):
		ev := strings.TrimPrefix(name, "event:")
		switch {
		case strings.HasSuffix(ev, ":before"):
			return "the " + noun + "s just before the event " + strings.TrimSuffix(ev, ":before")
		case strings.HasSuffix(ev, ":after"):
			return "the " + noun + "s just after the event " + strings.TrimSuffix(ev, ":after")
		}
		return "the " + noun + " of the event " + ev
	case strings.HasPrefix(name, "rolling"):
		w, stat, ok := strings.Cut(strings.TrimPrefix(name, "rolling"), ":")
		if k, err := strconv.Atoi(w); ok && err == nil {
			words := map[string]string{"mean": "mean", "min": "lowest", "max": "highest", "std": "spread (standard deviation) of"}[stat]
			if words == "" {
				words = stat
			}
			return fmt.Sprintf("%s demand over the last %s", words, plural(k, noun))
		}
	case strings.HasPrefix(name, "lag"):
		return "demand " + ago(strings.TrimPrefix(name, "lag"))
	case strings.HasPrefix(name, "fourier"):
		p, wave, _ := strings.Cut(strings.TrimPrefix(name, "fourier"), ":")
		return fmt.Sprintf("a smooth seasonal wave (%s) repeating every %s %ss", wave, p, noun)
	case strings.HasPrefix(name, "month:"), strings.HasPrefix(name, "dayOfWeek:"), strings.HasPrefix(name, "quarter:"):
		kind, v, _ := strings.Cut(name, ":")
		return map[string]string{"month": "the month is ", "dayOfWeek": "the day is ", "quarter": "the quarter is Q"}[kind] + v
	case name == "weekOfYear":
		return "the week of the year"
	case name == "weekend":
		return "the day is a Saturday or Sunday"
	case name == "positionInMonth":
		return "how far into its month the period is"
	}
	return name
}

// sortedKeys returns the map's keys in order.
func sortedKeys(m map[string][]string) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
}
