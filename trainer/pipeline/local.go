package pipeline

import (
	"context"
	"fmt"
	"io"
	"math"
	"sort"
	"strings"

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/summary"
)

// RunLocal runs plan, every shard's train in turn, the reconcile step when the plan asks for
// it, and publish in one process, as the Jobs would, with the same outputs. A shard that fails on broken input is reported and left to
// publish to carry forward, as in the cluster; any other failure stops the run before publish.
// The summary is publish's, with the trained counts, accuracy sums and throughput of all shards.
func RunLocal(ctx context.Context, cfg *runconfig.Config, env Env) (summary.Summary, error) {
	start := env.now()
	ps, err := RunPlan(ctx, cfg, env)
	if err != nil {
		return ps, err
	}
	var failed []string
	var acc *summary.Accuracy
	var cal summary.Calibration
	var stab summary.Stability
	trained, fitSeries := 0, 0
	fitSeconds := 0.0
	for i := 0; i < ps.Shards; i++ {
		ts, err := RunTrain(ctx, cfg, i, env)
		if err != nil && ExitCode(err) != exitcode.Data {
			return ts, fmt.Errorf("shard %d: %w", i, err)
		}
		if err != nil {
			failed = append(failed, fmt.Sprintf("shard %d: %v", i, err))
		}
		trained += ts.Trained
		fitSeries += ts.Series
		if ts.SeriesPerSecond > 0 {
			fitSeconds += float64(ts.Series) / ts.SeriesPerSecond
		}
		if ts.Accuracy != nil {
			if acc == nil {
				acc = &summary.Accuracy{}
			}
			acc.Add(*ts.Accuracy)
		}
		if ts.Calibration != nil {
			cal.Add(*ts.Calibration)
		}
		if ts.Stability != nil {
			stab.Add(*ts.Stability)
		}
	}
	if ps.Reconcile {
		if rs, err := RunReconcile(ctx, cfg, env); err != nil {
			return rs, fmt.Errorf("reconcile: %w", err)
		}
	}
	s, err := RunPublish(ctx, cfg, env)
	if err != nil {
		return s, err
	}
	s.Shards = ps.Shards
	if cal.Series > 0 {
		s.Calibration = &cal
	}
	if stab.Series > 0 {
		s.Stability = &stab
	}
	s.DurationSeconds = env.now().Sub(start).Seconds()
	if fitSeconds > 0 {
		s.SeriesPerSecond = float64(fitSeries) / fitSeconds
	}
	if len(failed) > 0 {
		s.Error = strings.Join(failed, "; ")
	}
	return s, nil
}

// Inspect prints a published run for a planner: the run, whether it is complete, the totals,
// the accuracy of the previous run's forecasts and one line per unit. run "" means the run
// latest.json points at (checked against its checksum). InspectSeries shows one series.
func Inspect(ctx context.Context, outputURI, run string, w io.Writer) error {
	out, m, err := openPublished(ctx, outputURI, run)
	if err != nil {
		return err
	}
	defer out.Close()
	complete := "complete"
	if !m.Complete {
		complete = fmt.Sprintf("INCOMPLETE: %d units missing", m.Totals.Missing)
	}
	fmt.Fprintf(w, "run %s (%s), previous run %s\n", m.Run, complete, orNone(m.PreviousRun))
	fmt.Fprintf(w, "units: %d (%d trained, %d carried forward, %d missing)\n",
		m.Totals.Units, m.Totals.Trained, m.Totals.CarriedForward, m.Totals.Missing)
	t := m.Totals.Series
	fmt.Fprintf(w, "series: %d (%d forecast, %d rejected", t.Series, t.Trained, t.Rejected)
	if t.Carried > 0 {
		fmt.Fprintf(w, ", %d of them with their previous forecast carried forward", t.Carried)
	}
	fmt.Fprintln(w, ")")
	if len(t.Models) > 0 {
		fams := make([]string, 0, len(t.Models))
		for f := range t.Models {
			fams = append(fams, f)
		}
		sort.Strings(fams)
		var parts []string
		for _, f := range fams {
			parts = append(parts, fmt.Sprintf("%s %d", f, t.Models[f]))
		}
		fmt.Fprintf(w, "chosen models: %s\n", strings.Join(parts, ", "))
	}
	if len(t.Designs) > 0 {
		fmt.Fprintf(w, "designs: %s\n", designsText(t.Designs, t.DesignsByShard))
	}
	if a := m.Totals.Accuracy; a != nil && a.Evaluated > 0 {
		e, r := a.ExpectedSum/float64(a.Evaluated), a.RealizedSum/float64(a.Evaluated)
		fmt.Fprintf(w, "accuracy of %s's forecasts: %d series, %d points; %s expected %.4f, realized %.4f (ratio %.2f); %d drifted\n",
			m.PreviousRun, a.Evaluated, a.EvaluatedPoints, a.Metric, e, r, r/e, a.Drifted)
		if n := float64(a.LogEvaluated); n > 0 {
			ge, gr := math.Exp(a.ExpectedLogSum/n), math.Exp(a.RealizedLogSum/n)
			fmt.Fprintf(w, "geometric means over %d series: %s expected %.4f, realized %.4f (ratio %.2f)\n",
				a.LogEvaluated, a.Metric, ge, gr, gr/ge)
		}
	} else {
		fmt.Fprintln(w, "accuracy: nothing evaluated (first run, or no new actuals)")
	}
	if err := inspectHierarchy(ctx, out, m, w); err != nil {
		return err
	}
	fmt.Fprintln(w, "unit\tstate\tsource\tseries\ttrained\trejected\tnote")
	for _, u := range m.Units {
		fmt.Fprintf(w, "%s\t%s\t%s\t%d\t%d\t%d\t%s\n", u.ID, u.State, orNone(u.Source), u.Counts.Series, u.Counts.Trained, u.Counts.Rejected, u.Reason)
	}
	return nil
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

// designsText lists series per design, and how many of them had their design chosen by their
// shard rather than once by the plan: "ets-theta 20, per-series 4 (3 chosen by their shard)".
func designsText(designs, byShard map[string]int) string {
	names := make([]string, 0, len(designs))
	for d := range designs {
		names = append(names, d)
	}
	sort.Strings(names)
	parts := make([]string, len(names))
	for i, d := range names {
		parts[i] = fmt.Sprintf("%s %d", d, designs[d])
		if n := byShard[d]; n > 0 {
			parts[i] += fmt.Sprintf(" (%d chosen by their shard)", n)
		}
	}
	return strings.Join(parts, ", ")
}
