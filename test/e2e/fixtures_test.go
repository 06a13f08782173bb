package e2e

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"time"

	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apimeta "k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"k8s.io/client-go/rest"
	"k8s.io/client-go/util/retry"
	"k8s.io/utils/ptr"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/config"
	metricsserver "sigs.k8s.io/controller-runtime/pkg/metrics/server"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/controllers"
	"almanac.dev/almanac/test/e2e/harness"
	"almanac.dev/almanac/test/sandbox"
	"almanac.dev/almanac/trainer/synth"
)

// Trainer images of the almanac scenarios: the real trainer, or the fault program
// (testdata/fault) that misbehaves for one shard and otherwise runs the real trainer (no special
// case for almanac in localnode). See almanacImages for how localnode runs them.
const (
	trainerImage = "fenwick-lane/almanac-trainer:e2e"
	// flakyImage fails the first attempt of train shard 1 with exit 4 (transient storage).
	flakyImage = "fenwick-lane/almanac-trainer:flaky-shard-1"
	// brokenImage always fails train shard 1 with exit 3 (broken input data).
	brokenImage = "fenwick-lane/almanac-trainer:broken-shard-1"
	// gatedImage holds train shards 1 and up until the file gates/<portfolio> exists.
	gatedImage = "fenwick-lane/almanac-trainer:gated"
	// lingeringImage runs train and then keeps every train pod running until the file
	// gates/<portfolio> exists, so the run stays in Training with the trainer's progress lines
	// in the pods' logs and no shard folded.
	lingeringImage = "fenwick-lane/almanac-trainer:lingering"
)

// trainerBinary is the trainer on the host (built, or the image's file); stateDir holds the
// faulty images' markers/ (markerDir) and gates/ (gateDir); storageDir holds every scenario's
// file:// input and output. Sandboxed pods see stateDir and storageDir at these same paths.
var trainerBinary, stateDir, markerDir, gateDir, storageDir string

// trainerEntrypoint is the trainer's path inside its image when the trainer images' pods run in
// the image's root (test/sandbox), "" when they run trainerBinary on the host.
var trainerEntrypoint string

// faultEntrypoint is the path of the fault program (testdata/fault) inside the faulty images.
const faultEntrypoint = "/e2e-fault"

// almanacImages builds the trainer into dir, or, with ALMANAC_IMAGES set, unpacks the trainer
// image (bin/almanac-trainer.oci.tar) and takes its binary. It builds the fault program
// (testdata/fault) that the faulty images run before the trainer. As root with ALMANAC_IMAGES,
// every trainer image pod then runs in the image's root as its security context says
// (localnode's Sandboxed images): trainerImage the image itself, the faulty images a tree of it
// with the fault program added at /e2e-fault; otherwise they are host processes (a one-line
// script execs the fault program). It returns localnode's image map, its sandboxed images, and
// the CRD directory for the suite's cluster.
func almanacImages(ctx context.Context, dir string) (map[string]string, map[string]*sandbox.Image, []string, error) {
	trainerBinary = filepath.Join(dir, "almanac-trainer")
	var img *sandbox.Image
	if images := os.Getenv("ALMANAC_IMAGES"); images != "" {
		archive := filepath.Join(images, "almanac-trainer.oci.tar")
		var err error
		if img, err = unpackImage(archive, filepath.Join(dir, "images", "almanac-trainer")); err != nil {
			return nil, nil, nil, fmt.Errorf("ALMANAC_IMAGES is set: %w", err)
		}
		trainerBinary = filepath.Join(img.Root, img.Entrypoint[0])
		if err := sandbox.Available(); err != nil {
			fmt.Fprintf(os.Stderr, "e2e: trainer binary %s from %s, run on the host: %v\n", img.Entrypoint[0], archive, err)
			img = nil
		} else {
			trainerEntrypoint = img.Entrypoint[0]
			fmt.Fprintf(os.Stderr, "e2e: trainer image pods run %s in the image's root from %s\n", img.Entrypoint[0], archive)
		}
	} else if err := goBuild(ctx, trainerBinary, "../../trainer/cmd/almanac-trainer"); err != nil {
		return nil, nil, nil, err
	}
	fault := filepath.Join(dir, "fault")
	if err := goBuild(ctx, fault, "./testdata/fault"); err != nil {
		return nil, nil, nil, err
	}
	storageDir, stateDir = filepath.Join(dir, "storage"), filepath.Join(dir, "state")
	markerDir, gateDir = filepath.Join(stateDir, "markers"), filepath.Join(stateDir, "gates")
	for _, d := range []string{storageDir, markerDir, gateDir} {
		if err := os.MkdirAll(d, 0o755); err != nil {
			return nil, nil, nil, err
		}
	}
	if err := os.Chmod(markerDir, 0o777); err != nil { // the flaky image's pods make markers as 65532
		return nil, nil, nil, err
	}
	faults := map[string]string{flakyImage: "flaky", brokenImage: "broken", gatedImage: "gated", lingeringImage: "lingering"}
	if img != nil {
		faultRoot := filepath.Join(dir, "images", "faults")
		if err := os.MkdirAll(faultRoot, 0o755); err != nil {
			return nil, nil, nil, err
		}
		root := filepath.Join(faultRoot, "rootfs")
		if err := sandbox.Tree(img.Root, root, true); err != nil {
			return nil, nil, nil, err
		}
		if err := os.Link(fault, filepath.Join(root, faultEntrypoint)); err != nil {
			return nil, nil, nil, err
		}
		sandboxed := map[string]*sandbox.Image{trainerImage: img}
		for image, mode := range faults {
			f := &sandbox.Image{Root: root, ImageConfig: img.ImageConfig}
			f.Entrypoint, f.Cmd = []string{faultEntrypoint, mode, img.Entrypoint[0], stateDir}, nil
			sandboxed[image] = f
		}
		return map[string]string{}, sandboxed, []string{"../../config/crd/bases"}, nil
	}
	images := map[string]string{trainerImage: trainerBinary}
	for image, mode := range faults {
		path := filepath.Join(dir, "almanac-trainer-"+mode)
		script := fmt.Sprintf("#!/bin/sh\nexec %s %s %s %s \"$@\"\n", fault, mode, trainerBinary, stateDir)
		if err := os.WriteFile(path, []byte(script), 0o755); err != nil {
			return nil, nil, nil, err
		}
		images[image] = path
	}
	return images, nil, []string{"../../config/crd/bases"}, nil
}

// goBuild builds a static binary of a package of this module.
func goBuild(ctx context.Context, out, pkg string) error {
	build := exec.CommandContext(ctx, "go", "build", "-o", out, pkg)
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if b, err := build.CombinedOutput(); err != nil {
		return fmt.Errorf("build %s: %v: %s", pkg, err, b)
	}
	return nil
}

// manager is the almanac manager of the scenarios, run in the test process so that a scenario
// can stop it mid-run and start another.
type manager struct {
	mu   sync.Mutex
	stop func() error
}

var almanacManager manager

// start starts a manager against the suite's cluster unless one runs.
func (m *manager) start(ctx context.Context) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.stop != nil {
		return
	}
	stop, err := harness.InProcess(runManager).Start(ctx, cluster)
	Expect(err).NotTo(HaveOccurred())
	m.stop = stop
}

// halt stops the running manager (its context is cancelled, as a killed process would stop
// reconciling; its trainer pods keep running).
func (m *manager) halt() {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.stop != nil {
		Expect(m.stop()).To(Succeed())
		m.stop = nil
	}
}

// runManager is the manager as main.go builds it, without metrics and probes.
func runManager(ctx context.Context, cfg *rest.Config) error {
	cacheOpts, err := controllers.CacheOptions(nil)
	if err != nil {
		return err
	}
	mgr, err := ctrl.NewManager(cfg, ctrl.Options{
		Scheme:                 scheme(),
		Cache:                  cacheOpts,
		Metrics:                metricsserver.Options{BindAddress: "0"},
		HealthProbeBindAddress: "0",
		// A restarted manager registers the same controller names in this process again.
		Controller: config.Controller{SkipNameValidation: ptr.To(true)},
	})
	if err != nil {
		return err
	}
	// Progress is read every second (the default is 30 s) so that a scenario sees it quickly.
	if err := controllers.SetupWithManager(ctx, mgr, controllers.Options{MaxConcurrentShards: 8, ProgressInterval: time.Second}); err != nil {
		return err
	}
	return mgr.Start(ctx)
}

func scheme() *runtime.Scheme {
	s := runtime.NewScheme()
	Expect(clientgoscheme.AddToScheme(s)).To(Succeed())
	Expect(forecastingv1alpha1.AddToScheme(s)).To(Succeed())
	return s
}

// kube returns a controller-runtime client of the suite's cluster.
func kube() client.Client {
	c, err := client.New(cluster.RESTConfig, client.Options{Scheme: scheme()})
	Expect(err).NotTo(HaveOccurred())
	return c
}

// dataset is one scenario's input and output directories.
type dataset struct {
	dir, data, output string
}

// newDataset makes the directories under a fresh directory of storageDir; the output is
// writable by any user (the trainer image's pods run as 65532), as a bucket the trainer's
// credentials may write.
func newDataset() dataset {
	dir, err := os.MkdirTemp(storageDir, "data-")
	Expect(err).NotTo(HaveOccurred())
	Expect(os.Chmod(dir, 0o755)).To(Succeed()) // MkdirTemp's 0700 would stop any other user
	d := dataset{dir: dir, data: filepath.Join(dir, "in"), output: filepath.Join(dir, "out")}
	Expect(os.MkdirAll(d.data, 0o755)).To(Succeed())
	Expect(os.MkdirAll(d.output, 0o755)).To(Succeed())
	Expect(os.Chmod(d.output, 0o777)).To(Succeed())
	return d
}

// smallDemand is Fenwick Lane weekly demand: 10 items x 4 depots, 60 weeks ending demandEnd,
// one spare part item per depot.
func smallDemand() synth.Options {
	return synth.Options{Items: 10, Depots: 4, Frequency: synth.Weekly, Periods: 60, End: demandEnd}
}

// demandEnd is four weeks before the Monday of the suite's current week. Every run here takes
// the real clock as its cutoff (manual runs the time plan runs, scheduled ones their schedule
// time), so the data must move with it: on fixed dates the 8-week horizon would one day lie
// wholly before the cutoff and every series would be rejected as stale (issue 18 case 6).
// The four weeks the drift and hierarchy specs append end on the current week's Monday, not
// after any run's cutoff; the first run's last forecast week ends four weeks after the
// suite's start. Computed once, so that specs straddling a Monday agree.
var demandEnd = synth.LastComplete(synth.Weekly, time.Now()).AddDate(0, 0, -21)

// write writes o's depots as CSV (the columns generate writes, o.ColumnsOf); scale, when not
// nil, multiplies each row's units (a level shift).
func (d dataset) write(o synth.Options, scale func(r synth.Record) float64) {
	Expect(o.Validate()).To(Succeed())
	for dep := 0; dep < o.Depots; dep++ {
		var b strings.Builder
		b.WriteString(strings.Join(o.ColumnsOf(), ",") + "\n")
		Expect(o.Depot(dep, func(r synth.Record) error {
			units := fmt.Sprint(r.Units)
			if scale != nil {
				units = fmt.Sprint(r.Units * scale(r))
			}
			if r.Text != "" {
				units = r.Text
			}
			date := r.Date.Format("2006-01-02")
			if r.Stamp != "" {
				date = r.Stamp
			}
			fmt.Fprintf(&b, "%s,%s,%s,%s,%d\n", r.Item, r.Depot, date, units, r.Promo)
			return nil
		})).To(Succeed())
		path := filepath.Join(d.data, synth.ObjectKey(dep, synth.CSV))
		Expect(os.WriteFile(path+".tmp", []byte(b.String()), 0o644)).To(Succeed())
		Expect(os.Rename(path+".tmp", path)).To(Succeed())
	}
}

// portfolio is a small, fast Fenwick Lane portfolio on d: weekly, horizon 8, a zoo of Naive,
// SeasonalNaive and Theta, about 10 series per shard (4 shards for smallDemand), up to 4 pods
// at once, retried once per shard, a manual-only schedule (once a year).
func portfolio(ns, name string, d dataset, image string) *forecastingv1alpha1.ForecastPortfolio {
	return &forecastingv1alpha1.ForecastPortfolio{
		ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: name},
		Spec: forecastingv1alpha1.ForecastPortfolioSpec{
			Schedule: "0 0 1 1 *",
			Source: forecastingv1alpha1.DataSource{
				URI: "file://" + d.data + "/", Format: forecastingv1alpha1.FormatCSV, Frequency: forecastingv1alpha1.Weekly,
				Columns: forecastingv1alpha1.ColumnMapping{Series: []string{"item", "depot"}, Date: synth.ColWeekStart, Value: "units"},
			},
			Output:  forecastingv1alpha1.DataOutput{URI: "file://" + d.output + "/", Format: forecastingv1alpha1.FormatCSV},
			Horizon: 8,
			Models: []forecastingv1alpha1.ModelSpec{
				{Family: forecastingv1alpha1.FamilyNaive}, {Family: forecastingv1alpha1.FamilySeasonalNaive}, {Family: forecastingv1alpha1.FamilyTheta},
			},
			Selection: forecastingv1alpha1.SelectionSpec{BacktestOrigins: 2},
			Sharding: forecastingv1alpha1.ShardingSpec{
				TargetSeriesPerShard: 10, MaxParallel: 4, RetriesPerShard: ptr.To[int32](1), MaxFailedShards: ptr.To[int32](1),
			},
			Trainer: forecastingv1alpha1.TrainerSpec{Image: image},
			Drift:   forecastingv1alpha1.DriftSpec{MinEvaluatedPoints: 10},
		},
	}
}

// newPortfolio creates a namespace, writes smallDemand into a new dataset and creates the
// portfolio on it, changed by edit when not nil.
func newPortfolio(ctx context.Context, c client.Client, prefix, name, image string,
	edit func(*forecastingv1alpha1.ForecastPortfolio)) (string, dataset, *forecastingv1alpha1.ForecastPortfolio) {
	ns := newNamespace(ctx, prefix)
	d := newDataset()
	d.write(smallDemand(), nil)
	fp := portfolio(ns, name, d, image)
	if edit != nil {
		edit(fp)
	}
	Expect(c.Create(ctx, fp)).To(Succeed())
	return ns, d, fp
}

// editPortfolio changes the portfolio's spec, retrying when the controller's status writes
// race with the update.
func editPortfolio(ctx context.Context, c client.Client, fp *forecastingv1alpha1.ForecastPortfolio, edit func(*forecastingv1alpha1.ForecastPortfolio)) {
	Expect(retry.RetryOnConflict(retry.DefaultRetry, func() error {
		if err := c.Get(ctx, client.ObjectKeyFromObject(fp), fp); err != nil {
			return err
		}
		edit(fp)
		return c.Update(ctx, fp)
	})).To(Succeed())
}

// manualRun creates a Manual run of the portfolio.
func manualRun(ctx context.Context, c client.Client, fp *forecastingv1alpha1.ForecastPortfolio, name string) {
	Expect(c.Create(ctx, &forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{Namespace: fp.Namespace, Name: name},
		Spec:       forecastingv1alpha1.ForecastRunSpec{PortfolioName: fp.Name, Trigger: forecastingv1alpha1.TriggerManual},
	})).To(Succeed())
}

// finishedRun waits until the run's Succeeded condition is True or False and returns the run.
func finishedRun(ctx context.Context, c client.Client, ns, name string) *forecastingv1alpha1.ForecastRun {
	var run forecastingv1alpha1.ForecastRun
	Eventually(func(g Gomega) {
		g.Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: name}, &run)).To(Succeed())
		cond := apimeta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunSucceeded)
		g.Expect(cond).NotTo(BeNil())
		g.Expect(cond.Status).NotTo(Equal(metav1.ConditionUnknown))
	}).WithContext(ctx).WithTimeout(3 * time.Minute).WithPolling(500 * time.Millisecond).Should(Succeed())
	return &run
}

// conditionStatus returns the status of the condition type in conds ("" when absent).
func conditionStatus(conds []metav1.Condition, t string) metav1.ConditionStatus {
	if c := apimeta.FindStatusCondition(conds, t); c != nil {
		return c.Status
	}
	return ""
}

// modelTotal sums the run's chosen-model counts.
func modelTotal(run *forecastingv1alpha1.ForecastRun) int64 {
	var n int64
	for _, m := range run.Status.Models {
		n += m.Series
	}
	return n
}

// manifest is the part of runs/<run>/MANIFEST.json the scenarios read (the publish contract,
// PROJECT-NOTES.md "Outputs, publish and carry-forward").
type manifest struct {
	Run         string `json:"run"`
	PreviousRun string `json:"previousRun"`
	Complete    bool   `json:"complete"`
	Units       []struct {
		ID     string `json:"id"`
		State  string `json:"state"`
		Source string `json:"source"`
	} `json:"units"`
}

// readManifest reads a published run's manifest from the file:// output.
func (d dataset) readManifest(run string) manifest {
	b, err := os.ReadFile(filepath.Join(d.output, "runs", run, "MANIFEST.json"))
	Expect(err).NotTo(HaveOccurred())
	var m manifest
	Expect(json.Unmarshal(b, &m)).To(Succeed())
	return m
}

// latestRun returns the run latest.json names ("" when nothing is published).
func (d dataset) latestRun() string {
	b, err := os.ReadFile(filepath.Join(d.output, "latest.json"))
	if errors.Is(err, os.ErrNotExist) {
		return ""
	}
	Expect(err).NotTo(HaveOccurred())
	var p struct {
		Run string `json:"run"`
	}
	Expect(json.Unmarshal(b, &p)).To(Succeed())
	return p.Run
}

// shardExitCodes returns the exit codes of the finished pods of the run's train shard index,
// oldest first.
func shardExitCodes(ctx context.Context, ns, run, index string) []int32 {
	var codes []int32
	for _, p := range jobPods(ctx, ns, run+"-train") {
		if p.Annotations[batchv1.JobCompletionIndexAnnotation] == index && terminated(p) != nil {
			codes = append(codes, terminated(p).ExitCode)
		}
	}
	return codes
}

// podsRunning returns the names of the portfolio's pods that have not finished.
func podsRunning(ctx context.Context, ns, portfolio string) []string {
	list, err := cluster.Client.CoreV1().Pods(ns).List(ctx, metav1.ListOptions{LabelSelector: controllers.LabelPortfolio + "=" + portfolio})
	Expect(err).NotTo(HaveOccurred())
	var out []string
	for _, p := range list.Items {
		if p.Status.Phase != corev1.PodSucceeded && p.Status.Phase != corev1.PodFailed {
			out = append(out, p.Name)
		}
	}
	return out
}

// trainerProcesses returns the command lines of live processes running the suite's trainer:
// on the host (trainerBinary in the command line, the fault program's included) or in the
// image's root (an argument that is the image's entrypoint; the sandbox's own unshare and sh
// carry it only inside their script).
func trainerProcesses() []string {
	entries, _ := os.ReadDir("/proc")
	var out []string
	for _, e := range entries {
		b, err := os.ReadFile(filepath.Join("/proc", e.Name(), "cmdline"))
		inImage := trainerEntrypoint != "" && slices.Contains(strings.Split(string(b), "\x00"), trainerEntrypoint)
		if err != nil || !(strings.Contains(string(b), trainerBinary) || inImage) {
			continue
		}
		if stat, err := os.ReadFile(filepath.Join("/proc", e.Name(), "stat")); err == nil {
			s := string(stat)
			if i := strings.LastIndexByte(s, ')'); i >= 0 && i+2 < len(s) && s[i+2] == 'Z' {
				continue // exited, not yet reaped
			}
		}
		out = append(out, strings.ReplaceAll(string(b), "\x00", " "))
	}
	return out
}

// jobOf returns the run's Job of one step, or nil when it does not exist.
func jobOf(ctx context.Context, ns, run, step string) *batchv1.Job {
	job, err := cluster.Client.BatchV1().Jobs(ns).Get(ctx, run+"-"+step, metav1.GetOptions{})
	if err != nil {
		return nil
	}
	return job
}
