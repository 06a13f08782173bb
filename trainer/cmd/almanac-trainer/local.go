package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"

	"k8s.io/apimachinery/pkg/util/validation/field"

	"almanac.dev/almanac/api/offline"
	"almanac.dev/almanac/api/render"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/cli"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/summary"
)

const localUsage = `usage: almanac-trainer local -f FILE [--input URI] [--output URI] [--run NAME]
       almanac-trainer local --config FILE [--input URI] [--output URI] [--run NAME]
       almanac-trainer local --input URI --output URI [portfolio flags]
Runs plan, every shard's train and publish in one process, as the cluster's Jobs would, from a
ForecastPortfolio file (-f: checked and defaulted as the apiserver would, then rendered as the
controller renders it), a run configuration (--config), or flags named after the portfolio's
fields. --input, --output and --run apply to all three (storage overrides for trying a
portfolio on local files); the portfolio flags only without -f and --config.`

// localFlags are the flags of local that build a portfolio; with -f or --config they are refused.
type localFlags struct {
	format, outFormat, frequency, series, date, value, covariates, partitioning string
	models, design, quantiles                                                   string
	horizon, perShard                                                           int
}

// fieldFlag names the flag that sets a spec field, so that a refused field is reported under
// the flag the user typed.
var fieldFlag = map[string]string{
	"spec.source.uri": "input", "spec.output.uri": "output", "spec.source.format": "format",
	"spec.output.format": "output-format", "spec.source.frequency": "frequency",
	"spec.source.columns.series": "series", "spec.source.columns.date": "date",
	"spec.source.columns.value": "value", "spec.source.columns.covariates": "covariates",
	"spec.source.partitioning": "partitioning", "spec.horizon": "horizon", "spec.models": "models",
	"spec.selection.design": "design", "spec.quantilePercents": "quantile-percents",
	"spec.sharding.targetSeriesPerShard": "target-series-per-shard",
}

// defaultLocalModels is local's zoo when --models is not given: the sample portfolio's
// time-series members, so that the automatic design's first candidate is the ETS, Theta and
// DOTM mean the M3 and M4 hourly benchmarks in README measured (with only ETS and Theta it
// falls back to their mean, design.Candidates).
const defaultLocalModels = "Naive,SeasonalNaive,Theta,DOTM,ETS"

// local runs the whole pipeline in this process.
func local(ctx context.Context, args []string, stdout, stderr io.Writer, env pipeline.Env) int {
	fs := flag.NewFlagSet("local", flag.ContinueOnError)
	file := fs.String("f", "", "ForecastPortfolio manifest `file` (YAML or JSON)")
	cfgPath := fs.String("config", "", "run configuration `file` (config.json)")
	termLog := fs.String("termination-log", "", "`file` the summary JSON is written to (default none)")
	in := fs.String("input", "", "input `URI` (an object, or a prefix ending in /); overrides spec.source.uri")
	out := fs.String("output", "", "output `URI`; overrides spec.output.uri")
	runName := fs.String("run", "", "run `name` (default local-<UTC time>)")
	workers := fs.Int("workers", 0, "forecasting goroutines (0: GOMAXPROCS)")
	var bounds timeoutFlags
	bounds.register(fs)
	var lf localFlags
	fs.StringVar(&lf.format, "format", "", "spec.source.format: csv or parquet (default csv)")
	fs.StringVar(&lf.outFormat, "output-format", "", "spec.output.format: csv or parquet (default parquet)")
	fs.StringVar(&lf.frequency, "frequency", "Daily", "spec.source.frequency: Hourly, Daily, Weekly, Monthly, Quarterly or Yearly")
	fs.StringVar(&lf.series, "series", "", "spec.source.columns.series: comma-separated key `columns` (default series)")
	fs.StringVar(&lf.date, "date", "", "spec.source.columns.date: date `column` (default date)")
	fs.StringVar(&lf.value, "value", "", "spec.source.columns.value: value `column` (default value)")
	fs.StringVar(&lf.covariates, "covariates", "", "spec.source.columns.covariates: comma-separated `columns`")
	fs.StringVar(&lf.partitioning, "partitioning", "", "spec.source.partitioning: HashBuckets, Objects or RowGroups (default HashBuckets)")
	fs.IntVar(&lf.horizon, "horizon", 14, "spec.horizon: periods to forecast")
	fs.StringVar(&lf.models, "models", defaultLocalModels, "spec.models: comma-separated model `families`")
	fs.StringVar(&lf.design, "design", "", "spec.selection.design: Auto, PerSeries or Fixed (default Auto)")
	fs.StringVar(&lf.quantiles, "quantile-percents", "", "spec.quantilePercents: comma-separated `percents` (default 10,50,90)")
	fs.IntVar(&lf.perShard, "target-series-per-shard", 0, "spec.sharding.targetSeriesPerShard (default 2000)")
	if code, ok := cli.Parse(fs, localUsage, args, stdout, stderr); !ok {
		return code
	}
	env.Workers = *workers
	fail := func(err error) int {
		fmt.Fprintf(stderr, "almanac-trainer local: %v\n", err)
		return exitcode.Config
	}
	set := cli.Set(fs)
	if *file != "" && *cfgPath != "" {
		return fail(errors.New("-f and --config: give one of them"))
	}
	if *file != "" || *cfgPath != "" {
		for name := range set {
			if !map[string]bool{"f": true, "config": true, "termination-log": true, "input": true, "output": true, "run": true, "workers": true,
				"request-timeout": true, "step-timeout": true, "step-deadline": true}[name] {
				from := "-f"
				if *cfgPath != "" {
					from = "--config"
				}
				return fail(fmt.Errorf("--%s: not allowed with %s, whose file declares it (only --input, --output and --run override a file)", name, from))
			}
		}
	}
	name := *runName
	if name == "" {
		name = "local-" + env.Now().UTC().Format("20060102-150405")
	}
	var cfg *runconfig.Config
	switch {
	case *cfgPath != "":
		c, err := runconfig.Load(*cfgPath)
		if err != nil {
			return fail(err)
		}
		if *in != "" {
			c.Source.URI = *in
		}
		if *out != "" {
			c.Output.URI = *out
		}
		if *runName != "" {
			c.Run = *runName
		}
		cfg = c
	default:
		var fp *forecastingv1alpha1.ForecastPortfolio
		var err error
		if *file != "" {
			fp, err = offline.LoadPortfolio(*file)
		} else {
			fp, err = flagPortfolio(lf, *in, *out)
		}
		if err != nil {
			return fail(err)
		}
		if *in != "" {
			fp.Spec.Source.URI = *in
		}
		if *out != "" {
			fp.Spec.Output.URI = *out
		}
		c, err := renderManual(fp, name, "")
		if err != nil {
			return fail(err)
		}
		cfg = &c
	}
	if _, err := pipeline.Check(cfg); err != nil {
		return fail(err)
	}
	s, err := bounds.bounded(ctx, summary.KindPublish, stderr, func(ctx context.Context) (summary.Summary, error) { return pipeline.RunLocal(ctx, cfg, env) })
	code := pipeline.ExitCode(err)
	if err != nil {
		s.Error = err.Error()
	}
	finish(s, code, *termLog, stdout, stderr)
	if err == nil {
		fmt.Fprintf(stdout, "local: run %s, %d shards in %.1fs, %.1f series/s fitting\n", cfg.Run, s.Shards, s.DurationSeconds, s.SeriesPerSecond)
	}
	return code
}

// renderManual renders a manual run named run of a defaulted portfolio (previousRun as the
// controller would pass it; empty: the trainer reads latest.json).
func renderManual(fp *forecastingv1alpha1.ForecastPortfolio, run, previousRun string) (runconfig.Config, error) {
	r := &forecastingv1alpha1.ForecastRun{}
	r.Name, r.Namespace = run, fp.Namespace
	r.Spec = forecastingv1alpha1.ForecastRunSpec{PortfolioName: fp.Name, Trigger: forecastingv1alpha1.TriggerManual}
	return render.RunConfig(fp, r, previousRun)
}

// flagPortfolio builds the ForecastPortfolio that local's flags describe and checks and
// defaults it as a file would be (api/offline), so flags and files run through the same rules
// and defaults. A refused field is reported under its flag.
func flagPortfolio(lf localFlags, in, out string) (*forecastingv1alpha1.ForecastPortfolio, error) {
	spec := map[string]any{
		"schedule": "@daily", // required by the API, unused by a local run
		"trainer":  map[string]any{"image": "local"},
		"source":   map[string]any{"uri": in, "frequency": lf.frequency},
		"output":   map[string]any{"uri": out},
		"horizon":  lf.horizon,
	}
	src, output := spec["source"].(map[string]any), spec["output"].(map[string]any)
	setIf := func(m map[string]any, key, v string) {
		if v != "" {
			m[key] = v
		}
	}
	setIf(src, "format", lf.format)
	setIf(src, "partitioning", lf.partitioning)
	setIf(output, "format", lf.outFormat)
	cols := map[string]any{}
	setIf(cols, "date", lf.date)
	setIf(cols, "value", lf.value)
	for flagName, key := range map[string]string{"series": "series", "covariates": "covariates"} {
		v := map[string]string{"series": lf.series, "covariates": lf.covariates}[flagName]
		items, err := cli.List(flagName, v)
		if err != nil {
			return nil, err
		}
		if items != nil {
			cols[key] = items
		}
	}
	src["columns"] = cols
	families, err := cli.List("models", lf.models)
	if err != nil {
		return nil, err
	}
	var models []any
	for _, f := range families {
		models = append(models, map[string]any{"family": f})
	}
	spec["models"] = models
	if lf.quantiles != "" {
		q, err := cli.Ints("quantile-percents", lf.quantiles)
		if err != nil {
			return nil, err
		}
		spec["quantilePercents"] = q
	}
	if lf.design != "" {
		spec["selection"] = map[string]any{"design": lf.design}
	}
	if lf.perShard != 0 {
		spec["sharding"] = map[string]any{"targetSeriesPerShard": lf.perShard}
	}
	doc, err := json.Marshal(map[string]any{
		"apiVersion": forecastingv1alpha1.GroupVersion.String(), "kind": "ForecastPortfolio",
		"metadata": map[string]any{"name": "local"}, "spec": spec,
	})
	if err != nil {
		return nil, err
	}
	objs, err := offline.Load("flags", doc)
	if err != nil {
		return nil, flagErrors(err)
	}
	return objs[0].Portfolio, nil
}

// flagErrors restates the loader's refused fields under the flags that set them.
func flagErrors(err error) error {
	var oe *offline.Error
	if !errors.As(err, &oe) || len(oe.Fields()) == 0 {
		return err
	}
	var msgs []string
	for _, fe := range oe.Fields() {
		if fe.Field == "" || fe.Field == "<nil>" {
			continue // "some rules were not checked": the refusals above say why
		}
		msgs = append(msgs, flagMessage(fe))
	}
	if len(msgs) == 0 {
		return err
	}
	return errors.New(strings.Join(msgs, "; "))
}

func flagMessage(fe *field.Error) string {
	path := fe.Field
	for p := path; p != ""; {
		if name, ok := fieldFlag[p]; ok {
			return fmt.Sprintf("--%s: %s (%s)", name, fe.ErrorBody(), path)
		}
		i := strings.LastIndexAny(p, ".[")
		if i < 0 {
			break
		}
		p = p[:i]
	}
	return fe.Error()
}

const renderUsage = `usage: almanac-trainer render -f FILE [--run NAME] [--previous-run NAME]
Prints the run configuration (config.json) the controller would write for a manual run of the
ForecastPortfolio in FILE, checked and defaulted as the apiserver would, from the function the
controller calls (api/render).`

// renderCmd prints the run configuration of a portfolio file.
func renderCmd(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("render", flag.ContinueOnError)
	file := fs.String("f", "", "ForecastPortfolio manifest `file` (YAML or JSON)")
	run := fs.String("run", "", "run `name` (default <portfolio>-manual)")
	prev := fs.String("previous-run", "", "the last published run, as the controller would name it (default none: the trainer reads latest.json)")
	if code, ok := cli.Parse(fs, renderUsage, args, stdout, stderr); !ok {
		return code
	}
	fail := func(err error) int {
		fmt.Fprintf(stderr, "almanac-trainer render: %v\n", err)
		return exitcode.Config
	}
	if *file == "" {
		return fail(errors.New("-f FILE is required"))
	}
	fp, err := offline.LoadPortfolio(*file)
	if err != nil {
		return fail(err)
	}
	name := *run
	if name == "" {
		name = fp.Name + "-manual"
	}
	c, err := renderManual(fp, name, *prev)
	if err != nil {
		return fail(err)
	}
	if _, err := pipeline.Check(&c); err != nil {
		return fail(err)
	}
	b, err := runconfig.Encode(&c)
	if err != nil {
		return fail(err)
	}
	stdout.Write(b)
	return exitcode.OK
}
