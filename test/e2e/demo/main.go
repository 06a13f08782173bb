// Command demo is `make demo`: it starts the local control plane (etcd, kube-apiserver,
// kube-controller-manager, the localnode agent and the built almanac manager), generates
// weekly demand for Fenwick Lane Provisions (an invented regional distributor) in the
// promotion scenario (trainer/synth: demand driven by planned promotions, price cuts and the
// harvest fair, with the plan written past the history), applies the config/samples promotion
// portfolio (regression members on spec.features beside the time-series zoo) with its source
// and output pointed at demo-output/, runs it twice (a second time four weeks of actuals
// later, so the accuracy of the first forecasts can be measured), prints the kubectl tables,
// the published runs and an accuracy summary, writes a report page (with the features the
// regression members kept) to demo-output/report/index.html and stops everything it started.
//
// It expects bin/almanac-controller, bin/almanac-trainer and bin/k8s/<version>/ (the Makefile's
// demo target builds them). Run it from the repository root.
package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	apimeta "k8s.io/apimachinery/pkg/api/meta"
	"k8s.io/apimachinery/pkg/runtime"
	utilyaml "k8s.io/apimachinery/pkg/util/yaml"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"sigs.k8s.io/controller-runtime/pkg/client"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/test/e2e/harness"
	"almanac.dev/almanac/test/localnode"
	"almanac.dev/almanac/trainer/synth"
)

// Paths relative to the repository root.
const (
	outDir        = "demo-output"
	samplePortfol = "config/samples/forecasting_v1alpha1_forecastportfolio_promotions.yaml"
	sampleRun     = "config/samples/forecasting_v1alpha1_forecastrun.yaml"
	crdDir        = "config/crd/bases"
	k8sVersion    = "v1.37.2"
)

// The demo's data: items per depot, depots, and the two history ends (both Mondays). The
// first run sees history up to firstEnd; four weeks of actuals later the second run does.
// secondEnd is the Monday of the current week: the runs take the clock as their cutoff, and a
// history on fixed dates would, once the calendar passed its horizon, have every forecast
// rejected as stale (issue 18 case 6).
var (
	items, depots = 150, 4
	secondEnd     = synth.LastComplete(synth.Weekly, time.Now()).AddDate(0, 0, 7)
	firstEnd      = secondEnd.AddDate(0, 0, -28)
	firstPeriods  = 100
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := run(ctx)
	stop()
	if err != nil {
		fmt.Fprintln(os.Stderr, "demo:", err)
		os.Exit(1)
	}
}

// say prints one progress line with the time since the start.
var started = time.Now()

func say(format string, args ...any) {
	fmt.Printf("[%5.1fs] %s\n", time.Since(started).Seconds(), fmt.Sprintf(format, args...))
}

func run(ctx context.Context) (err error) {
	root, err := os.Getwd()
	if err != nil {
		return err
	}
	if _, err := os.Stat(filepath.Join(root, "go.mod")); err != nil {
		return errors.New("run the demo from the repository root (make demo)")
	}
	bin := filepath.Join(root, "bin")
	trainer, controller := filepath.Join(bin, "almanac-trainer"), filepath.Join(bin, "almanac-controller")
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	if assets == "" {
		assets = filepath.Join(bin, "k8s", k8sVersion)
	}
	kubectl := filepath.Join(assets, "kubectl")
	for _, p := range []string{trainer, controller, kubectl} {
		if _, err := os.Stat(p); err != nil {
			return fmt.Errorf("%s is missing: run `make demo` (it builds it)", p)
		}
	}
	out := filepath.Join(root, outDir)
	for _, d := range []string{"data", "forecasts", "report"} {
		if err := os.RemoveAll(filepath.Join(out, d)); err != nil {
			return err
		}
	}
	dataDir, fcDir := filepath.Join(out, "data"), filepath.Join(out, "forecasts")
	if err := os.MkdirAll(dataDir, 0o755); err != nil {
		return err
	}
	if err := os.MkdirAll(fcDir, 0o755); err != nil {
		return err
	}

	fp, err := readPortfolio(filepath.Join(root, samplePortfol))
	if err != nil {
		return err
	}
	plan := int(fp.Spec.Horizon)
	say("Fenwick Lane Provisions: writing %d items x %d depots of weekly demand up to %s and the promotion plan for the %d weeks after it into %s",
		items, depots, firstEnd.Format("2006-01-02"), plan, rel(root, dataDir))
	if err := writeDemand(dataDir, firstPeriods, firstEnd, plan); err != nil {
		return err
	}

	clusterDir, err := os.MkdirTemp("", "almanac-demo-")
	if err != nil {
		return err
	}
	say("starting etcd, kube-apiserver, kube-controller-manager (Job controller, garbage collector), localnode and almanac-controller (logs in %s)", clusterDir)
	c, err := harness.Start(ctx, harness.Options{
		Dir:     clusterDir,
		Assets:  assets,
		CRDDirs: []string{filepath.Join(root, crdDir)},
		// The sample's nodeSelector asks for Linux nodes.
		Nodes:    []localnode.NodeSpec{{Name: "localnode-0", Labels: map[string]string{corev1.LabelOSStable: "linux"}}},
		Images:   map[string]string{fp.Spec.Trainer.Image: trainer},
		Manager:  harness.Binary{Path: controller},
		Lifetime: 20 * time.Minute,
	})
	if err != nil {
		return fmt.Errorf("start the local control plane: %w", err)
	}
	defer func() {
		say("stopping the control plane")
		if serr := c.Stop(); serr != nil && err == nil {
			err = serr
		}
		if left := stillRunning(clusterDir); len(left) > 0 {
			err = errors.Join(err, fmt.Errorf("processes still running: %v", left))
		} else {
			say("every process the demo started has ended")
		}
		if err == nil {
			_ = os.RemoveAll(clusterDir)
		} else {
			say("cluster logs kept in %s", clusterDir)
		}
	}()
	say("control plane up; CRDs installed from %s", crdDir)

	scheme := runtime.NewScheme()
	if err := clientgoscheme.AddToScheme(scheme); err != nil {
		return err
	}
	if err := forecastingv1alpha1.AddToScheme(scheme); err != nil {
		return err
	}
	cl, err := client.New(c.RESTConfig, client.Options{Scheme: scheme})
	if err != nil {
		return err
	}

	// The sample reads from and publishes to S3; the demo keeps everything else and points
	// those two fields at local directories.
	origSource, origOutput := fp.Spec.Source.URI, fp.Spec.Output.URI
	fp.Spec.Source.URI = "file://" + dataDir + "/"
	fp.Spec.Output.URI = "file://" + fcDir + "/"
	say("applying %s with two fields rewritten in memory (the file is unchanged):", samplePortfol)
	say("  spec.source.uri: %s -> %s", origSource, fp.Spec.Source.URI)
	say("  spec.output.uri: %s -> %s", origOutput, fp.Spec.Output.URI)
	if ref := fp.Spec.Source.CredentialsSecretRef; ref != nil {
		// The sample names a credentials Secret; files need none, so an empty one stands in.
		say("  creating an empty Secret %s (the sample's credentialsSecretRef; file:// needs no keys)", ref.Name)
		if err := cl.Create(ctx, &corev1.Secret{ObjectMeta: metav1.ObjectMeta{Name: ref.Name, Namespace: fp.Namespace}}); err != nil {
			return err
		}
	}
	if err := cl.Create(ctx, fp); err != nil {
		return fmt.Errorf("create portfolio: %w", err)
	}

	first, err := readRun(filepath.Join(root, sampleRun))
	if err != nil {
		return err
	}
	// The run sample names the other sample portfolio; the demo points it at this one.
	first.Spec.PortfolioName = fp.Name
	first.Name = fp.Name + "-manual-1"
	say("applying %s as %s (spec.portfolioName %s): a Manual run", sampleRun, first.Name, fp.Name)
	if err := runAndWait(ctx, cl, first); err != nil {
		return err
	}
	if err := show(ctx, kubectl, c.Kubeconfig, trainer, fp.Spec.Output.URI); err != nil {
		return err
	}

	say("four weeks later: appending the actuals of %s to %s (and the plan moves on four weeks)",
		firstEnd.AddDate(0, 0, 7).Format("2006-01-02"), secondEnd.Format("2006-01-02"))
	if err := writeDemand(dataDir, firstPeriods+4, secondEnd, plan); err != nil {
		return err
	}
	second := first.DeepCopy()
	second.Name = strings.TrimSuffix(first.Name, "-1") + "-2"
	say("creating %s: a second Manual run, which measures the first run's forecasts on the new actuals", second.Name)
	if err := runAndWait(ctx, cl, second); err != nil {
		return err
	}
	if err := waitDriftRun(ctx, cl, fp, second.Name); err != nil {
		return err
	}
	if err := show(ctx, kubectl, c.Kubeconfig, trainer, fp.Spec.Output.URI); err != nil {
		return err
	}
	if err := summarize(ctx, cl, fp); err != nil {
		return err
	}

	reportDir := filepath.Join(out, "report")
	// The report is of the second run: it measured the first run's forecasts on the new
	// actuals. A drift run that may follow trains on the same data and evaluates nothing new.
	say("writing the report page of %s: almanac-trainer report --output %s --run %s --dir %s",
		second.Name, fp.Spec.Output.URI, second.Name, rel(root, reportDir))
	if err := command(ctx, trainer, "report", "--output", fp.Spec.Output.URI, "--run", second.Name, "--dir", reportDir); err != nil {
		return err
	}
	say("done in %s", time.Since(started).Round(time.Second))
	fmt.Printf("\n  forecasts: %s (runs/<run>/units/*/forecasts.parquet, latest.json)\n", rel(root, fcDir))
	fmt.Printf("  report:    file://%s\n\n", filepath.Join(reportDir, "index.html"))
	return nil
}

// readPortfolio decodes the sample portfolio.
func readPortfolio(path string) (*forecastingv1alpha1.ForecastPortfolio, error) {
	var fp forecastingv1alpha1.ForecastPortfolio
	return &fp, decodeFile(path, &fp)
}

// readRun decodes the sample run.
func readRun(path string) (*forecastingv1alpha1.ForecastRun, error) {
	var r forecastingv1alpha1.ForecastRun
	return &r, decodeFile(path, &r)
}

func decodeFile(path string, into any) error {
	b, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	if err := utilyaml.NewYAMLOrJSONDecoder(bytes.NewReader(b), 4096).Decode(into); err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	return nil
}

// writeDemand writes one CSV per depot, periods weeks ending at end and the plan for the
// following weeks (units empty), under the column names generate writes, which the sample's
// source.columns read unchanged (trainer/synth TestSamplesReadGeneratedColumns). The generator
// draws each series' weeks in order from its own stream, so a longer history with the same
// start repeats the earlier weeks exactly (new weeks are appended) and the weeks planned
// earlier happen as planned.
func writeDemand(dir string, periods int, end time.Time, plan int) error {
	o := synth.Options{Items: items, Depots: depots, Frequency: synth.Weekly, Periods: periods, End: end,
		Scenario: synth.ScenarioPromotions, Future: plan}
	if err := o.Validate(); err != nil {
		return err
	}
	for d := 0; d < depots; d++ {
		var buf bytes.Buffer
		if err := o.WriteCSV(&buf, d); err != nil {
			return err
		}
		path := filepath.Join(dir, synth.ObjectKey(d, synth.CSV))
		if err := os.WriteFile(path+".tmp", buf.Bytes(), 0o644); err != nil {
			return err
		}
		if err := os.Rename(path+".tmp", path); err != nil {
			return err
		}
	}
	return nil
}

// runAndWait creates run and waits until it succeeds (an error when it fails), printing its
// phase and shard counts as they change.
func runAndWait(ctx context.Context, cl client.Client, run *forecastingv1alpha1.ForecastRun) error {
	run = run.DeepCopy()
	run.ResourceVersion = ""
	if err := cl.Create(ctx, run); err != nil {
		return fmt.Errorf("create run %s: %w", run.Name, err)
	}
	return waitRun(ctx, cl, run.Namespace, run.Name)
}

func waitRun(ctx context.Context, cl client.Client, ns, name string) error {
	ctx, cancel := context.WithTimeout(ctx, 10*time.Minute)
	defer cancel()
	last := ""
	for {
		var r forecastingv1alpha1.ForecastRun
		if err := cl.Get(ctx, client.ObjectKey{Namespace: ns, Name: name}, &r); err != nil {
			return fmt.Errorf("run %s: %w", name, err)
		}
		st := r.Status
		now := fmt.Sprintf("%s: %s, shards %d/%d done, %d failed, %d series forecast",
			name, orDash(string(st.Phase)), st.Shards.Succeeded, st.Shards.Total, st.Shards.Failed, st.Series.Trained)
		if now != last {
			say("  %s", now)
			last = now
		}
		if c := apimeta.FindStatusCondition(st.Conditions, forecastingv1alpha1.RunSucceeded); c != nil {
			if c.Status == metav1.ConditionTrue {
				return nil
			}
			if c.Status == metav1.ConditionFalse {
				return fmt.Errorf("run %s failed: %s: %s", name, c.Reason, c.Message)
			}
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("run %s: %w", name, ctx.Err())
		case <-time.After(500 * time.Millisecond):
		}
	}
}

// waitDriftRun waits until the portfolio has judged the accuracy measured by run; when that
// reports drift (the sample's drift action is Retrain), it waits for the drift run too.
func waitDriftRun(ctx context.Context, cl client.Client, fp *forecastingv1alpha1.ForecastPortfolio, run string) error {
	deadline := time.Now().Add(2 * time.Minute)
	for {
		var p forecastingv1alpha1.ForecastPortfolio
		if err := cl.Get(ctx, client.ObjectKeyFromObject(fp), &p); err != nil {
			return err
		}
		drift := apimeta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
		if p.Status.Accuracy != nil && p.Status.Accuracy.Run == run && drift != nil {
			if drift.Status != metav1.ConditionTrue {
				return nil
			}
			say("accuracy drifted (%s); the sample's drift action is Retrain, so a Drift run follows", drift.Message)
			var runs forecastingv1alpha1.ForecastRunList
			if err := cl.List(ctx, &runs, client.InNamespace(fp.Namespace)); err != nil {
				return err
			}
			for _, r := range runs.Items {
				if r.Spec.Trigger == forecastingv1alpha1.TriggerDrift {
					return waitRun(ctx, cl, r.Namespace, r.Name)
				}
			}
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("portfolio %s did not report the accuracy measured by %s", fp.Name, run)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(500 * time.Millisecond):
		}
	}
}

// show prints the kubectl tables and the published run.
func show(ctx context.Context, kubectl, kubeconfig, trainer, output string) error {
	fmt.Println()
	fmt.Println("$ kubectl get fp,frun -o wide")
	if err := command(ctx, kubectl, "--kubeconfig", kubeconfig, "-n", "default", "get", "fp,frun", "-o", "wide"); err != nil {
		return err
	}
	fmt.Println()
	fmt.Println("$ almanac-trainer inspect --output " + output)
	if err := command(ctx, trainer, "inspect", "--output", output); err != nil {
		return err
	}
	// One series by its key columns: its models row and forecast rows.
	o := synth.Options{Items: items, Depots: depots, Frequency: synth.Weekly}
	sel := fmt.Sprintf("item=%s,depot=%s", o.ItemName(0), synth.DepotName(0))
	fmt.Println()
	fmt.Printf("$ almanac-trainer inspect --output %s --series %s\n", output, sel)
	if err := command(ctx, trainer, "inspect", "--output", output, "--series", sel); err != nil {
		return err
	}
	fmt.Println()
	return nil
}

// summarize prints the portfolio's accuracy and the newest run's chosen models.
func summarize(ctx context.Context, cl client.Client, fp *forecastingv1alpha1.ForecastPortfolio) error {
	var p forecastingv1alpha1.ForecastPortfolio
	if err := cl.Get(ctx, client.ObjectKeyFromObject(fp), &p); err != nil {
		return err
	}
	fmt.Println("Accuracy summary")
	if a := p.Status.Accuracy; a != nil {
		fmt.Printf("  %s measured the forecasts of the run before it on %d new actuals of %d series:\n", a.Run, a.EvaluatedPoints, a.EvaluatedSeries)
		fmt.Printf("  %s promised by the backtest (expected) %s, achieved (realized) %s, ratio %s;\n", a.Metric, a.Expected, a.Realized, a.Ratio)
		fmt.Printf("  %d series were individually worse than %d%% of their promise.\n", a.DriftedSeries, p.Spec.Drift.ThresholdPercent)
	} else {
		fmt.Println("  nothing evaluated yet")
	}
	if d := apimeta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift); d != nil {
		fmt.Printf("  AccuracyDrift=%s (%s): %s\n", d.Status, d.Reason, d.Message)
	}
	var r forecastingv1alpha1.ForecastRun
	if err := cl.Get(ctx, client.ObjectKey{Namespace: p.Namespace, Name: p.Status.LastSuccessfulRun}, &r); err == nil {
		var parts []string
		for _, m := range r.Status.Models {
			parts = append(parts, fmt.Sprintf("%s %d", m.Model, m.Series))
		}
		fmt.Printf("  chosen models in %s: %s\n", r.Name, strings.Join(parts, ", "))
		parts = parts[:0]
		for _, d := range r.Status.Designs {
			by := "" // Fixed and PerSeries run the declaration: nothing is chosen
			if p.Spec.Selection.Design == forecastingv1alpha1.DesignAuto {
				by = " (chosen once by the plan)"
				if d.ChosenByShard > 0 {
					by = fmt.Sprintf(" (%d of them chosen by their shard)", d.ChosenByShard)
				}
			}
			parts = append(parts, fmt.Sprintf("%s %d%s", d.Design, d.Series, by))
		}
		fmt.Printf("  designs (spec.selection.design %s): %s\n", p.Spec.Selection.Design, strings.Join(parts, ", "))
	}
	fmt.Println()
	return nil
}

// command runs a program with its output on ours.
func command(ctx context.Context, name string, args ...string) error {
	cmd := exec.CommandContext(ctx, name, args...)
	cmd.Stdout, cmd.Stderr = os.Stdout, os.Stderr
	if err := cmd.Run(); err != nil {
		return fmt.Errorf("%s %s: %w", filepath.Base(name), strings.Join(args, " "), err)
	}
	return nil
}

// stillRunning returns the PIDs recorded by the harness that are still alive.
func stillRunning(dir string) []string {
	b, _ := os.ReadFile(filepath.Join(dir, "pids"))
	var left []string
	for _, line := range strings.Split(string(b), "\n") {
		var pid int
		if _, err := fmt.Sscanf(line, "%d", &pid); err != nil || pid <= 0 {
			continue
		}
		if syscall.Kill(pid, 0) == nil && !zombie(pid) {
			left = append(left, line)
		}
	}
	return left
}

// zombie reports whether pid has exited but not been reaped.
func zombie(pid int) bool {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return true
	}
	s := string(b)
	i := strings.LastIndexByte(s, ')')
	return i >= 0 && i+2 < len(s) && s[i+2] == 'Z'
}

func rel(root, p string) string {
	if r, err := filepath.Rel(root, p); err == nil {
		return r
	}
	return p
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
