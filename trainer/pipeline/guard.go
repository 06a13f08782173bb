package pipeline

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"regexp"
	"sort"
	"strings"
	"unicode/utf8"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// ErrRefused marks a run the publish guard refused; the command exits with exitcode.Refused.
var ErrRefused = errors.New("too few forecasts to publish")

// guard applies the publish guard g to a manifest about to be written and returns why the run
// may not be published, or "". Published series are the trained series of every unit that has
// files (this run's units and carried-forward ones), plus the series carried forward one by one
// because their rows were in a broken input object (Counts.CarriedBroken, hash buckets): what a
// reader following latest.json would find, counted alike for both layouts (with Objects a
// broken object's unit is carried forward whole and its trained series count). The checks,
// each off at 0 (100 for the cap):
//
//	published * 100 >= g.MinForecastPercent * (series plan counted)
//	published * 100 >= g.MinPreviousPercent * (series the previous run published), when there is one
//	(carried-forward + missing units) * 100 <= g.MaxCarriedForwardPercent * (units)
//	(series carried forward one by one) * 100 <= g.MaxCarriedForwardPercent * max(series plan counted, published)
//
// Any other series carried forward one by one (carryForward) was rejected by this run: it
// counts in the last check and not as forecast in the first two, so carrying cannot hide a run
// that lost its series. The last check's base is at least published because the series of an
// object broken at plan are not in the plan's count (as an Objects unit broken at plan is in
// the unit count).
//
// Integer arithmetic, so 80% of 5 series needs 4, not 3.99. The thresholds are our own
// choice (PROJECT-NOTES, sixth session: publish guard), not from a source.
func guard(g runconfig.Publish, p *Plan, prev *Manifest, m *Manifest) string {
	published := m.Totals.Series.Trained + m.Totals.Series.CarriedBroken
	var why []string
	if published*100 < g.MinForecastPercent*p.Series {
		why = append(why, fmt.Sprintf("%d of %d planned series forecast, the guard needs %d%% (publish.minForecastPercent)",
			published, p.Series, g.MinForecastPercent))
	}
	if prev != nil && published*100 < g.MinPreviousPercent*prev.Totals.Series.Trained {
		why = append(why, fmt.Sprintf("%d series forecast against %d published by %s, the guard needs %d%% (publish.minPreviousPercent)",
			published, prev.Totals.Series.Trained, prev.Run, g.MinPreviousPercent))
	}
	if away := m.Totals.CarriedForward + m.Totals.Missing; away*100 > g.MaxCarriedForwardPercent*m.Totals.Units {
		why = append(why, fmt.Sprintf("%d of %d units carried forward or missing, the guard allows %d%% (publish.maxCarriedForwardPercent)",
			away, m.Totals.Units, g.MaxCarriedForwardPercent))
	}
	if c, base := m.Totals.Series.Carried, max(p.Series, published); c*100 > g.MaxCarriedForwardPercent*base {
		why = append(why, fmt.Sprintf("%d of %d series carried forward one by one, the guard allows %d%% (publish.maxCarriedForwardPercent)",
			c, base, g.MaxCarriedForwardPercent))
	}
	return strings.Join(why, "; ")
}

// digits masks numbers so that reasons differing only in a line number or a date group together.
var digits = regexp.MustCompile(`[0-9]+`)

// topReasons returns the n most frequent reasons in the run's rejected tables (grouped with
// numbers masked; each shown by its first example and series) and why units were carried
// forward or are missing, as text (keys: the run's key columns, which the tables hold) starting with "; ", or "".
func topReasons(ctx context.Context, out *store.Store, run string, keys []string, m *Manifest, n int) (string, error) {
	type group struct {
		count           int
		example, series string
	}
	groups := map[string]*group{}
	var order []string
	add := func(reason, series string) {
		k := digits.ReplaceAllString(reason, "#")
		g, ok := groups[k]
		if !ok {
			g = &group{example: reason, series: series}
			groups[k] = g
			order = append(order, k)
		}
		g.count++
	}
	var units []string
	for _, u := range m.Units {
		if u.State != StateTrained {
			units = append(units, u.ID+": "+clip(u.Reason, 160))
			continue
		}
		f, ok := u.file(TableRejected)
		if !ok || u.Counts.Rejected == 0 || u.Source != run {
			continue
		}
		b, err := out.Get(ctx, f.Key)
		if err != nil {
			return "", storageErr(err)
		}
		rows, err := tables.ReadRejected(bytes.NewReader(b), tables.CSV, keys)
		if err != nil {
			return "", fmt.Errorf("%s: %w", out.Describe(f.Key), err)
		}
		for _, r := range rows {
			add(r.Reason, r.Key)
		}
	}
	sort.SliceStable(order, func(i, j int) bool { return groups[order[i]].count > groups[order[j]].count })
	var b strings.Builder
	for i, k := range order {
		if i == n {
			break
		}
		if i == 0 {
			b.WriteString("; top rejection reasons: ")
		} else {
			b.WriteString(", ")
		}
		g := groups[k]
		fmt.Fprintf(&b, "%d series: %s (e.g. %s)", g.count, clip(g.example, 160), clip(g.series, 80))
	}
	if len(units) > n {
		units = append(units[:n], fmt.Sprintf("and %d more", len(units)-n))
	}
	if len(units) > 0 {
		b.WriteString("; units not trained: " + strings.Join(units, ", "))
	}
	return b.String(), nil
}

// clip cuts s to at most n bytes (on a rune boundary), marking the cut.
func clip(s string, n int) string {
	if len(s) <= n {
		return s
	}
	for n > 0 && !utf8.RuneStart(s[n]) {
		n--
	}
	return s[:n] + "..."
}
