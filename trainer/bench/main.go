package bench

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"maps"
	"math"
	"os"
	"os/signal"
	"path/filepath"
	"runtime"
	"runtime/pprof"
	"slices"
	"sort"
	"strings"
	"syscall"
	"time"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/cli"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// EnvM3Dir names the environment variable --m3 reads the data directory from.
const EnvM3Dir = "ALMANAC_M3_DIR"

func describe(o Options, zoo []models.Spec) string {
	names := make([]string, len(zoo))
	for i, s := range zoo {
		names[i] = s.DisplayName()
	}
	return fmt.Sprintf("zoo=%s origins=%d step=%d combine=%d/%s margin=%g metric=%s", strings.Join(names, ","),
		o.Origins, o.Step, o.CombineTop, o.CombineMethod, o.CombineMargin, o.Metric)
}

// cpuTime is this process's user plus system CPU time (getrusage RUSAGE_SELF).
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// Main is the `bench` command: it loads a directory in the M3 or the long layout (LoadDir),
// runs the selection design, prints sMAPE, MASE and OWA against the bench's own Naive2 per
// category (the long layout: its frequency) and overall and the CPU milliseconds per series,
// and ends with exactly one line (SummaryLine)
//
//	all: smape=S mase=M owa=O cpu_ms_per_series=C series=N
//
// With --json the report is first printed as one JSON line. It returns the process exit code
// (0 success, 1 failure, 2 usage).
func Main(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("bench", flag.ContinueOnError)
	fs.SetOutput(stderr)
	dataDir := fs.String("data", "", "directory in the M3 CSV layout (series.csv, train.csv, test.csv, published_forecasts.csv) or the long layout (train.csv, test.csv: series,date,value)")
	freqFlag := fs.String("frequency", "", "frequency of every series of the long layout: "+strings.Join(FrequencyNames(), ", "))
	m3 := fs.Bool("m3", false, "use $"+EnvM3Dir+", else ../shared/datasets/m3 relative to the repository root")
	zooFlag := fs.String("zoo", "", "comma-separated families (default: selection.DefaultZoo, every registered family except those taken only by name: Ridge, Lasso, GradientBoosting, the four-member combinations (selection.ByNameOnly); for hourly data also a Ridge pooled across the series, PooledRidge)")
	choice := fs.String("choice", string(design.OneSE), `with --design auto: "one-se" (the simplest design within one standard error of the lowest inner MASE), "lowest" or "relative-se" (one-se on each series' log ratio of inner MASE to the first candidate's)`)
	costLimit := fs.Float64("cost-limit", design.DefaultCostLimit, "with --design auto: drop candidate designs costing more than this many times the simplest's CPU per series")
	innerMax := fs.Int("inner-max", design.DefaultMaxSeries, "with --design auto: at most this many inner-holdout series per segment")
	innerOrigins := fs.Int("inner-origins", design.DefaultInnerOrigins, "with --design auto: inner-holdout origins per series (the last h points, the h before them, ...)")
	sampleMax := fs.Int("design-sample", design.DefaultSampleSeries, "with --design auto: the design is chosen once per group on at most this many of its series, drawn by key hash (a portfolio's plan step draws its sample the same way)")
	innerMin := fs.Int("inner-min", design.DefaultMinSeries, "with --design auto: a segment with fewer inner-holdout series takes the choice of the next coarser one")
	update := fs.Bool("backtest-update", true, "fit once at the earliest backtest origin and carry ETS, ARIMA and ETS+ARIMA+Theta fits forward (selection.Config.BacktestUpdate)")
	cpuProfile := fs.String("cpuprofile", "", "write a CPU profile of the run to this file")
	asJSON := fs.Bool("json", false, "also print the report as one JSON line before the summary line")
	against := fs.String("against", "", "the output of an earlier --json run on the same series and window: print this run's OWA minus that run's with a paired 90% bootstrap interval (2000 resamples)")
	hold := fs.String("hold", "", fmt.Sprintf("with --design auto: the output of an earlier --json run on the same data: each group keeps that run's cost verdict on the members within %.0f%% of the budget, as a portfolio's run keeps its previous run's (design.CostMargin); without it every group is judged as a portfolio's first run is, and a member near the budget may be kept by one run and dropped by the next", 100*design.CostMargin))
	published := fs.Bool("score-published", false, "score the competition forecasts in published_forecasts.csv")
	refR := fs.Bool("reference-r", false, "run R forecast's methods (--reference-r-methods) on the same series and compare (needs Rscript)")
	refRMethods := fs.String("reference-r-methods", "ets,thetaf,snaive", "with --reference-r: some of "+strings.Join(RMethodsAll, ",")+" (auto.arima is slow on long seasonal series; naive2 checks the bench's Naive2)")
	originBack := fs.Int("origin-back", 0, "move every forecast origin this many horizons back: the test becomes the last h training points (1) or the h before them (2), and the competition's test data is not read; a check that a figure holds at an origin it was not tuned on")
	keepLast := fs.Int("keep-last", 0, "shorten every training history to its last N horizons (N*h points, at least one season and two): the short histories of older competitions built from longer ones (0: whole histories)")
	limit := fs.Int("limit", 0, "use only the first N series (0: all)")
	every := fs.Int("every", 1, "use every K-th series, in the order of series.csv (M3 layout) or of train.csv (long layout): a spread sample")
	workers := fs.Int("workers", 0, "parallel workers (0: GOMAXPROCS)")
	origins := fs.Int("origins", selection.DefaultOrigins, "rolling origins per series")
	step := fs.Int("step", selection.DefaultStep, "distance between origins")
	combine := fs.Int("combine", 0, "also score the combination of the best N members (0/1: none)")
	combineMethod := fs.String("combine-method", selection.CombineMean, "combination: mean or median")
	marginPercent := fs.Int("combine-margin-percent", 0, "as a portfolio's spec.selection.combine.marginPercent: choose the combination unless the best member beats it by more than this percent of the best member's score")
	mode := fs.String("design", "Auto", `as spec.selection.design, any case: "Auto": what a portfolio's default spec.selection.design Auto runs (design.Forecast: one design per segment, chosen on an inner holdout of training data from candidates built from --zoo); "PerSeries": each series' best --zoo member by backtest; "Fixed": exactly the zoo and combination the flags give`)
	metric := fs.String("metric", string(selection.DefaultMetric), "selection metric")
	quantiles := fs.String("quantiles", "", `also publish these quantiles (percents, "10,50,90") and measure their calibration on the test data against the nominal levels and each series' backtest promise; with a symmetric pair (2.5,97.5: M4's 95% interval) also the central interval's MSIS and coverage, and with --reference-r R's interval at the same level`)
	if code, ok := cli.Parse(fs, "usage: almanac-trainer bench (--data DIR | --m3) [flags]\nScores the model zoo on a dataset in the M3 or the long layout.", args, stdout, stderr); !ok {
		return code
	}
	if *marginPercent < 0 {
		fmt.Fprintln(stderr, "bench: --combine-margin-percent must be >= 0")
		return 2
	}
	dir := *dataDir
	if dir == "" && *m3 {
		dir = defaultM3Dir()
	}
	if dir == "" {
		fmt.Fprintln(stderr, "bench: give --data DIR or --m3")
		return 2
	}
	if fi, err := os.Stat(dir); err != nil || !fi.IsDir() {
		fmt.Fprintf(stderr, "bench: --data %s: not a directory (%v)\n", dir, err)
		return 2
	}
	if *every < 1 {
		fmt.Fprintln(stderr, "bench: --every must be >= 1")
		return 2
	}
	switch {
	case *originBack < 0 || *keepLast < 0:
		fmt.Fprintln(stderr, "bench: --origin-back and --keep-last must be >= 0")
		return 2
	case *published && (*originBack > 0 || *keepLast > 0):
		fmt.Fprintln(stderr, "bench: --score-published scores the competition's forecasts of its own test data: not with --origin-back or --keep-last")
		return 2
	}
	var freq series.Frequency
	if *freqFlag != "" {
		f, err := ParseFrequency(*freqFlag)
		if err != nil {
			fmt.Fprintf(stderr, "bench: --frequency: %v\n", err)
			return 2
		}
		freq = f
	}
	rMethods, err := ParseRMethods(*refRMethods)
	if err != nil {
		fmt.Fprintf(stderr, "bench: --reference-r-methods: %v\n", err)
		return 2
	}
	levels, err := ParseQuantiles(*quantiles)
	if err != nil {
		fmt.Fprintf(stderr, "bench: --quantiles %v\n", err)
		return 2
	}
	// Every flag is checked before any data is read.
	o := Options{Levels: levels, Origins: *origins, Step: *step, CombineTop: *combine, CombineMethod: *combineMethod,
		CombineMargin: float64(*marginPercent) / 100, Metric: backtest.Metric(*metric), Workers: *workers, BacktestUpdate: *update,
		Mode: parseMode(*mode), Rule: design.Rule(*choice), CostLimit: *costLimit, MaxSeries: *innerMax, MinSeries: *innerMin, InnerOrigins: *innerOrigins, SampleSeries: *sampleMax, Log: stdout}
	switch {
	case !o.Mode.Valid():
		fmt.Fprintf(stderr, "bench: --design %q: want Auto, PerSeries or Fixed (spec.selection.design)\n", *mode)
		return 2
	case !o.Rule.Valid():
		fmt.Fprintf(stderr, "bench: --choice %q: want one-se, lowest or relative-se\n", *choice)
		return 2
	case !(*costLimit >= 1) || *innerMax < 1 || *innerMin < 1 || *innerOrigins < 1:
		fmt.Fprintln(stderr, "bench: --cost-limit must be >= 1, --inner-max, --inner-min and --inner-origins >= 1")
		return 2
	}
	if *hold != "" {
		if o.Mode != design.Auto {
			fmt.Fprintf(stderr, "bench: --hold: only with --design Auto (it holds the automatic design's cost verdict)\n")
			return 2
		}
		if o.Hold, err = readHold(*hold); err != nil {
			fmt.Fprintf(stderr, "bench: --hold: %v\n", err)
			return 2
		}
	}
	// SIGTERM or Ctrl-C cancels the run: the workers stop and any R child is killed.
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	defer stop()
	if *cpuProfile != "" {
		f, err := os.Create(*cpuProfile)
		if err != nil {
			fmt.Fprintf(stderr, "bench: %v\n", err)
			return 1
		}
		defer f.Close()
		if err := pprof.StartCPUProfile(f); err != nil {
			fmt.Fprintf(stderr, "bench: %v\n", err)
			return 1
		}
		defer pprof.StopCPUProfile()
	}
	entries, err := LoadDir(dir, freq)
	if err != nil {
		fmt.Fprintf(stderr, "bench: %v\n", err)
		return 1
	}
	entries = sample(entries, *every, *limit)
	if *originBack > 0 {
		var dropped int
		if entries, dropped, err = EarlierOrigin(entries, *originBack); err != nil {
			fmt.Fprintf(stderr, "bench: %v\n", err)
			return 2
		}
		fmt.Fprintf(stdout, "origin %d horizons back: %d series, %d too short left out\n", *originBack, len(entries), dropped)
	}
	if *keepLast > 0 {
		if entries, err = KeepLast(entries, *keepLast); err != nil {
			fmt.Fprintf(stderr, "bench: %v\n", err)
			return 2
		}
		fmt.Fprintf(stdout, "histories shortened to their last %d horizons\n", *keepLast)
	}
	naive2, err := Naive2Report(entries)
	if err != nil {
		fmt.Fprintf(stderr, "bench: %v\n", err)
		return 1
	}
	writeTable(stdout, naive2, naive2)
	if note := zeroActualsNote(entries); note != "" {
		fmt.Fprintln(stdout, note)
	}
	if *zooFlag != "" {
		for _, f := range strings.Split(*zooFlag, ",") {
			o.Families = append(o.Families, strings.TrimSpace(f))
		}
	}
	var pubs []*Report
	if *published {
		if pubs, err = ScorePublished(dir, entries); err != nil {
			fmt.Fprintf(stderr, "bench: %v\n", err)
			return 1
		}
		for _, r := range pubs {
			writeTable(stdout, r, naive2)
		}
	}
	var rep *Report
	var results []selection.Result
	rep, results, err = Run(ctx, entries, o)
	if err != nil {
		fmt.Fprintf(stderr, "bench: %v\n", err)
		return 1
	}
	writeTable(stdout, rep, naive2)
	writeChoices(stdout, results)
	fmt.Fprintf(stdout, "  failed=%d cpu_ms_per_series=%.2f workers=%d\n", rep.All.Failed, rep.All.CPUMilliseconds, effectiveWorkers(*workers))
	owaLo, owaHi, owaOK := OWAInterval(rep, naive2, 0.9, owaResamples, 1)
	if owaOK {
		fmt.Fprintf(stdout, "  OWA over the series, 90%% bootstrap interval (%d resamples): %.3f to %.3f\n", owaResamples, owaLo, owaHi)
	}
	if *against != "" {
		earlier, err := readAgainst(*against, naive2)
		if err != nil {
			fmt.Fprintf(stderr, "bench: --against: %v\n", err)
			return 1
		}
		diff, lo, hi, gain, ok := PairedOWADifference(rep, earlier, naive2, 0.9, pairedResamples, 1)
		if !ok {
			fmt.Fprintf(stderr, "bench: --against %s: no OWA difference (not the same series, or a MASE defined in one run only)\n", *against)
			return 1
		}
		fmt.Fprintf(stdout, "  OWA against %s (%s): %+.4f, paired 90%% bootstrap interval (%d resamples) %+.4f to %+.4f; this run lower in %.0f%% of draws\n",
			*against, earlier.Method, diff, pairedResamples, lo, hi, 100*gain)
		if there, _, err := readVerdicts(*against); err == nil {
			for _, c := range VerdictChanges(rep.Verdicts, there) {
				fmt.Fprintf(stdout, "  cost verdict differs from %s's: %s (the difference includes those members; --hold %s holds its verdict on members within %.0f%% of the budget)\n", *against, c, *against, 100*design.CostMargin)
			}
		}
	}
	if rep.All.ExpectedN > 0 {
		fmt.Fprintf(stdout, "  backtest expectation (training data only): mean %s %.4f over %d series\n",
			o.Metric, rep.All.Expected/float64(rep.All.ExpectedN), rep.All.ExpectedN)
	}
	if len(levels) > 0 {
		writeCalibration(stdout, Calibration(entries, results, levels))
	}
	// With a central pair among the quantiles (2.5 and 97.5: M4's 95% interval), MSIS and
	// coverage of ours and, with --reference-r, of R's intervals at the same level.
	ours := OursIntervals(rep.Method, entries, results, levels)
	var refs []*Report
	if *refR {
		level := 0.0 // no interval asked of R
		if ours != nil {
			level = 100 * (1 - ours.Alpha)
		}
		refs, err = ReferenceRIntervals(ctx, entries, rMethods, level, stdout)
		if err != nil && !errors.Is(err, ErrNoR) {
			fmt.Fprintf(stderr, "bench: reference-r: %v\n", err)
			return 1
		}
		if len(refs) > 0 {
			writeSideBySide(stdout, rep, refs, naive2)
		}
	}
	var intervals []*IntervalReport
	if ours != nil {
		intervals = append(intervals, ours)
		for _, r := range refs {
			if ri := refIntervals(r, entries, ours.Alpha); ri != nil {
				intervals = append(intervals, ri)
			}
		}
		writeIntervals(stdout, intervals)
	}
	if *asJSON {
		doc := map[string]any{"ours": jsonReport(rep), "naive2": jsonReport(naive2)}
		if owaOK {
			doc["owaInterval90"] = []float64{owaLo, owaHi}
		}
		if pubs != nil {
			doc["published"] = jsonReports(pubs)
		}
		if refs != nil {
			doc["referenceR"] = jsonReports(refs)
		}
		if intervals != nil {
			doc["intervals"] = jsonIntervals(intervals)
		}
		if rep.Verdicts != nil {
			doc[holdField] = rep.Verdicts
		}
		b, err := json.Marshal(doc)
		if err != nil {
			fmt.Fprintf(stderr, "bench: %v\n", err)
			return 1
		}
		fmt.Fprintf(stdout, "%s\n", b)
	}
	fmt.Fprintln(stdout, SummaryLine(rep, naive2))
	return 0
}

// pairedResamples is the number of bootstrap resamples of --against's difference (2000: the
// count the design decisions of PROJECT-NOTES were taken with).
const pairedResamples = 2000

// readAgainst reads the JSON line of an earlier bench --json run from path and returns its own
// report (method and per-series scores). Its Naive2 scores must be naive2's, series by series
// (the same series at the same window: --origin-back or --keep-last change them), or the
// comparison would pair different test data.
func readAgainst(path string, naive2 *Report) (*Report, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	type doc struct {
		Method string            `json:"method"`
		Series []jsonSeriesScore `json:"series"`
	}
	var d struct{ Ours, Naive2 *doc }
	line, n, found := firstJSONLine(b)
	if found {
		if err := json.Unmarshal(line, &d); err != nil {
			return nil, fmt.Errorf("%s:%d: %v", path, n, err)
		}
	}
	if !found || d.Ours == nil || d.Naive2 == nil || len(d.Ours.Series) == 0 {
		return nil, fmt.Errorf("%s: no JSON line with per-series scores (the output of bench --json)", path)
	}
	mine := make(map[string]SeriesScore, len(naive2.Scores))
	for _, s := range naive2.Scores {
		mine[s.ID] = s
	}
	if len(d.Naive2.Series) != len(mine) {
		return nil, fmt.Errorf("%s: %d series, this run %d", path, len(d.Naive2.Series), len(mine))
	}
	for _, s := range d.Naive2.Series {
		m, ok := mine[s.ID]
		if !ok {
			return nil, fmt.Errorf("%s: series %q is not in this run", path, s.ID)
		}
		if math.Abs(m.SMAPE-s.SMAPE) > 1e-9*math.Max(1, math.Abs(m.SMAPE)) {
			return nil, fmt.Errorf("%s: series %q: Naive2 sMAPE %.6g there, %.6g here (another window?)", path, s.ID, s.SMAPE, m.SMAPE)
		}
	}
	r := &Report{Method: d.Ours.Method}
	for _, s := range d.Ours.Series {
		sc := SeriesScore{ID: s.ID, SMAPE: s.SMAPE, MASE: math.NaN()}
		if s.MASE != nil {
			sc.MASE = *s.MASE
		}
		r.Scores = append(r.Scores, sc)
	}
	return r, nil
}

// holdField is the JSON report's field with each group's cost verdict (Report.Verdicts),
// which --hold reads back.
const holdField = "costVerdict"

// readHold reads the cost verdicts (costVerdict, by GroupKey) from the JSON line of an
// earlier bench --json run, for Options.Hold; a file without them is an error.
func readHold(path string) (map[string]*design.Before, error) {
	v, line, err := readVerdicts(path)
	if err == nil && len(v) == 0 {
		err = fmt.Errorf("%s:%d: no %s (the JSON line of a bench --json run with --design Auto that measured member costs)", path, line, holdField)
	}
	return v, err
}

// readVerdicts returns the cost verdicts of the first JSON line of path (nil when it has
// none) and that line's number.
func readVerdicts(path string) (map[string]*design.Before, int, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, 0, err
	}
	line, n, found := firstJSONLine(b)
	if !found {
		return nil, 0, fmt.Errorf("%s: no JSON line (the output of bench --json)", path)
	}
	var doc map[string]json.RawMessage
	if err := json.Unmarshal(line, &doc); err != nil {
		return nil, n, fmt.Errorf("%s:%d: %v", path, n, err)
	}
	var v map[string]*design.Before
	if raw, ok := doc[holdField]; ok {
		if err := json.Unmarshal(raw, &v); err != nil {
			return nil, n, fmt.Errorf("%s:%d: %s: %v", path, n, holdField, err)
		}
	}
	for k, b := range v {
		if b == nil {
			return nil, n, fmt.Errorf("%s:%d: %s %q: null", path, n, holdField, k)
		}
	}
	return v, n, nil
}

// firstJSONLine returns the first line of a bench output that starts with "{" (the --json
// report) and its 1-based number; found is false when there is none.
func firstJSONLine(b []byte) (line []byte, n int, found bool) {
	for i, l := range strings.Split(string(b), "\n") {
		if strings.HasPrefix(l, "{") {
			return []byte(l), i + 1, true
		}
	}
	return nil, 0, false
}

// VerdictChanges lists, per group that both runs measured (sorted by GroupKey), the members
// one run kept and the other dropped for cost: "YEARLY h=6: MSTLARIMA kept here, dropped
// there". A paired comparison across such a change measures that member as well as whatever
// else differs between the runs.
func VerdictChanges(here, there map[string]*design.Before) []string {
	var out []string
	for _, g := range slices.Sorted(maps.Keys(here)) {
		a, b := here[g], there[g]
		if a == nil || b == nil {
			continue
		}
		var parts []string
		for _, m := range a.Kept {
			if slices.Contains(b.Dropped, m) {
				parts = append(parts, m+" kept here, dropped there")
			}
		}
		for _, m := range a.Dropped {
			if slices.Contains(b.Kept, m) {
				parts = append(parts, m+" dropped here, kept there")
			}
		}
		if len(parts) > 0 {
			out = append(out, g+": "+strings.Join(parts, "; "))
		}
	}
	return out
}

// owaResamples is the number of bootstrap resamples of OWAInterval's line (1000: the size
// Efron & Tibshirani 1993, ch. 13, advise for percentile intervals).
const owaResamples = 1000

func effectiveWorkers(w int) int {
	if w <= 0 {
		return runtime.GOMAXPROCS(0)
	}
	return w
}

// writeChoices prints how often each member was chosen.
func writeChoices(w io.Writer, rs []selection.Result) {
	count := map[string]int{}
	for _, r := range rs {
		if r.Chosen != "" {
			count[r.Chosen]++
		}
	}
	names := make([]string, 0, len(count))
	for n := range count {
		names = append(names, n)
	}
	sort.Slice(names, func(i, j int) bool {
		if count[names[i]] != count[names[j]] {
			return count[names[i]] > count[names[j]]
		}
		return names[i] < names[j]
	})
	fmt.Fprintf(w, "  chosen:")
	for _, n := range names {
		fmt.Fprintf(w, " %s=%d", n, count[n])
	}
	fmt.Fprintln(w)
}

type jsonTally struct {
	Series   int     `json:"series"`
	SMAPE    float64 `json:"smape"`
	MASE     float64 `json:"mase"`
	Failed   int     `json:"failed,omitempty"`
	CPUMsPer float64 `json:"cpuMsPerSeries,omitempty"`
}

func jsonReport(r *Report) map[string]any {
	cats := map[string]jsonTally{}
	for c, t := range r.By {
		cats[c] = jsonTally{Series: t.N, SMAPE: t.MeanSMAPE(), MASE: t.MeanMASE(), Failed: t.Failed}
	}
	doc := map[string]any{"method": r.Method, "categories": cats,
		"all": jsonTally{Series: r.All.N, SMAPE: r.All.MeanSMAPE(), MASE: r.All.MeanMASE(), Failed: r.All.Failed, CPUMsPer: r.All.CPUMilliseconds}}
	if len(r.Scores) > 0 {
		doc["series"] = jsonScores(r.Scores)
	}
	return doc
}

// jsonSeriesScore is one series' scores in the JSON report, so that two runs on the same
// series can be compared series by series (a paired bootstrap, say); mase is null where the
// series' MASE scale is undefined.
type jsonSeriesScore struct {
	ID    string   `json:"id"`
	SMAPE float64  `json:"smape"`
	MASE  *float64 `json:"mase"`
}

func jsonScores(ss []SeriesScore) []jsonSeriesScore {
	out := make([]jsonSeriesScore, len(ss))
	for i, s := range ss {
		out[i] = jsonSeriesScore{ID: s.ID, SMAPE: s.SMAPE}
		if !math.IsNaN(s.MASE) {
			m := s.MASE
			out[i].MASE = &m
		}
	}
	return out
}

func jsonReports(rs []*Report) []map[string]any {
	out := make([]map[string]any, len(rs))
	for i, r := range rs {
		out[i] = jsonReport(r)
	}
	return out
}

// defaultM3Dir is $ALMANAC_M3_DIR, else ../shared/datasets/m3 beside the repository root
// (the directory holding go.mod, searched upwards from the working directory).
func defaultM3Dir() string {
	if d := os.Getenv(EnvM3Dir); d != "" {
		return d
	}
	root, err := repoRoot()
	if err != nil {
		return filepath.Join("..", "shared", "datasets", "m3")
	}
	return filepath.Join(root, "..", "shared", "datasets", "m3")
}

func repoRoot() (string, error) {
	d, err := os.Getwd()
	if err != nil {
		return "", err
	}
	for {
		if _, err := os.Stat(filepath.Join(d, "go.mod")); err == nil {
			return d, nil
		}
		p := filepath.Dir(d)
		if p == d {
			return "", errors.New("bench: no go.mod above the working directory")
		}
		d = p
	}
}

// sample keeps every k-th entry, then the first limit of those (limit <= 0: all).
func sample(es []Entry, k, limit int) []Entry {
	var out []Entry
	for i := 0; i < len(es); i += k {
		if limit > 0 && len(out) == limit {
			break
		}
		out = append(out, es[i])
	}
	return out
}

func shortName(m string) string {
	if strings.HasPrefix(m, "almanac") {
		return "almanac"
	}
	return m
}

// parseMode reads --design in the API's spelling of spec.selection.design (Auto, PerSeries,
// Fixed), in any case; anything else is returned as it is and refused by Mode.Valid.
func parseMode(s string) design.Mode {
	for _, m := range design.Modes() {
		if strings.EqualFold(s, string(m)) {
			return m
		}
	}
	return design.Mode(s)
}
