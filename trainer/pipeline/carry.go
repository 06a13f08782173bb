package pipeline

import (
	"context"
	"errors"
	"fmt"
	"io"
	"slices"
	"sort"
	"strings"

	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// carryForward gives the series this unit rejects their previous forecast: for each rejected
// series whose rows are in the previous manifest's forecasts of the unit (previousUnits), the
// rows are published again, unchanged but for the mark: carried_runs one more than the
// previous row's (1 when the previous run made the forecast) and carried_from the run that
// made it. A series whose previous forecast was already carried maxRuns runs in a row, or
// whose previous table has other quantile levels than this run's, gets no forecast; either
// way the rejected row's reason says what happened to its forecast, so rejected.csv stays the
// one record of why a series was not forecast. It returns the carried rows and how many series
// they hold; maxRuns 0 carries nothing (publish.maxCarriedRuns).
//
// When the unit went without some input objects (loaded.broken: a hash-bucket shard skipped
// objects it could not read), the series of the previous forecasts that are absent from this
// run's input are added to the rejections, naming those objects, and carried the same way:
// their rows were most likely in the objects that could not be read. The returned rejections
// are rejected with those rows added.
//
// The forecast is not shortened: periods that are already past stay in it, as a reader of the
// previous run saw them. The series stays rejected in the counts (Counts.Rejected) and counts
// in Counts.Carried. The publish guard does not count it as forecast unless its rows were in
// a broken object (absent from the input, or dropped by loadBuckets): those are also counted
// in the returned broken (Counts.CarriedBroken) and count as forecast, as the series of a
// broken object's unit carried forward whole do with the Objects layout.
func carryForward(ctx context.Context, out *store.Store, keys []string, levels []float64, maxRuns int,
	prev *Manifest, u *loaded, rejected []tables.RejectedRow) (_ []tables.RejectedRow, _ []tables.ForecastRow, n, broken int, _ error) {
	if prev == nil || maxRuns <= 0 || (len(rejected) == 0 && len(u.broken) == 0) {
		return rejected, nil, 0, 0, nil
	}
	inBroken := map[string]bool{}
	for key := range u.dropped {
		inBroken[key] = true
	}
	at := make(map[string]int, len(rejected))
	for i, r := range rejected {
		if r.Key != "" {
			at[r.Key] = i
		}
	}
	present := map[string]bool{}
	absent := ""
	if len(u.broken) > 0 {
		for _, s := range u.series {
			present[s.Key] = true
		}
		var names []string
		for _, b := range u.broken {
			names = append(names, b.Key)
		}
		absent = "not in this run's input, which went without the broken objects " + clip(strings.Join(names, ", "), 300)
	}
	rows := map[string][]tables.ForecastRow{}
	otherLevels := map[string]bool{}
	for _, entry := range previousUnits(prev, u.unit, u.buckets) {
		f, ok := entry.file(TableForecasts)
		if !ok {
			continue
		}
		format := strings.TrimPrefix(f.Key[strings.LastIndex(f.Key, "."):], ".")
		var h tables.Header
		var fcs []tables.ForecastRow
		err := readTable(ctx, out, f, func(r io.Reader) (err error) { h, fcs, err = tables.ReadForecasts(r, format, keys); return })
		if errors.Is(err, store.ErrNotFound) {
			continue // pruned: nothing to carry
		}
		if err != nil {
			return nil, nil, 0, 0, err
		}
		same := slices.Equal(h.Quantiles, levels)
		for _, r := range fcs {
			if _, ok := at[r.Key]; !ok && absent != "" && !present[r.Key] {
				rejected = append(rejected, tables.RejectedRow{Key: r.Key, Reason: absent})
				at[r.Key] = len(rejected) - 1
				inBroken[r.Key] = true
			}
			if _, ok := at[r.Key]; !ok {
				continue
			}
			if !same {
				otherLevels[r.Key] = true
				continue
			}
			if r.CarriedRuns == 0 {
				r.CarriedFrom = entry.Source
			}
			r.CarriedRuns++
			rows[r.Key] = append(rows[r.Key], r)
		}
	}
	var carried []tables.ForecastRow
	for key, i := range at {
		rs := rows[key]
		switch {
		case otherLevels[key]:
			rejected[i].Reason += "; its previous forecast is not carried forward: its quantile levels differ from this run's"
		case len(rs) == 0:
		case rs[0].CarriedRuns > maxRuns:
			rejected[i].Reason += fmt.Sprintf("; its forecast from %s is not carried forward: it was carried %d runs in a row already (publish.maxCarriedRuns %d)",
				rs[0].CarriedFrom, rs[0].CarriedRuns-1, maxRuns)
		default:
			rejected[i].Reason += fmt.Sprintf("; the forecast from %s is carried forward (%d of at most %d runs)", rs[0].CarriedFrom, rs[0].CarriedRuns, maxRuns)
			carried = append(carried, rs...)
			n++
			if inBroken[key] {
				broken++
			}
		}
	}
	sort.SliceStable(carried, func(i, j int) bool {
		if carried[i].Key != carried[j].Key {
			return carried[i].Key < carried[j].Key
		}
		return carried[i].Step < carried[j].Step
	})
	sort.SliceStable(rejected, func(i, j int) bool { return rejected[i].Key < rejected[j].Key })
	return rejected, carried, n, broken, nil
}
