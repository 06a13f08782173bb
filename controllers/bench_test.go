package controllers

import (
	"context"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/go-logr/logr"
	"github.com/prometheus/client_golang/prometheus"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	kruntime "k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"k8s.io/client-go/rest"
	"k8s.io/utils/ptr"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/config"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
	logf "sigs.k8s.io/controller-runtime/pkg/log"
	metricsserver "sigs.k8s.io/controller-runtime/pkg/metrics/server"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// BenchmarkPortfoliosAndRun measures the manager against a real apiserver (envtest): it creates
// ALMANAC_BENCH_PORTFOLIOS portfolios (default 1000), waits until every one is reconciled, then
// drives one run of ALMANAC_BENCH_SHARDS shards (default 2000; the README figure uses 10000) per
// iteration through plan, train and publish, with the benchmark playing the Job controller and
// kubelet: it creates the pods in batches of ALMANAC_BENCH_BATCH (default 100) and reports each
// batch in the Job status.
//
// Reported: reconcile latency percentiles of both controllers, also as ratios to the p50 of a
// plain GET against the same apiserver measured in the same run (the reference); API requests
// the manager sent per portfolio and per run (a counting http.RoundTripper on its rest config);
// and the Go heap in use after a GC, before the manager started and at the end (the process
// also holds the benchmark's own client, so this bounds the manager's share from above).
func BenchmarkPortfoliosAndRun(b *testing.B) {
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	for _, bin := range []string{"kube-apiserver", "etcd"} {
		if _, err := os.Stat(filepath.Join(assets, bin)); assets == "" || err != nil {
			b.Skipf("KUBEBUILDER_ASSETS has no %s: run `make controlplane`", bin)
		}
	}
	nPortfolios := benchEnv("ALMANAC_BENCH_PORTFOLIOS", 1000)
	nShards := benchEnv("ALMANAC_BENCH_SHARDS", 2000)
	batch := benchEnv("ALMANAC_BENCH_BATCH", 100)
	bctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	logf.SetLogger(logr.Discard())

	env := &envtest.Environment{CRDDirectoryPaths: []string{filepath.Join("..", "config", "crd", "bases")}, ErrorIfCRDPathMissing: true}
	rc, err := env.Start()
	if err != nil {
		b.Fatal(err)
	}
	defer func() { _ = env.Stop() }()
	bench := &benchDriver{b: b}
	driverCfg := rest.CopyConfig(rc)
	driverCfg.QPS, driverCfg.Burst = 2000, 4000
	if bench.c, err = client.New(driverCfg, client.Options{Scheme: benchScheme(b)}); err != nil {
		b.Fatal(err)
	}
	ns := "fenwick-bench"
	bench.must(bench.c.Create(bctx, &corev1.Namespace{ObjectMeta: metav1.ObjectMeta{Name: ns}}))
	bench.must(bench.c.Create(bctx, &corev1.ServiceAccount{ObjectMeta: metav1.ObjectMeta{Name: "default", Namespace: ns}}))
	bench.must(bench.c.Create(bctx, &corev1.Secret{ObjectMeta: metav1.ObjectMeta{Name: "fenwick-s3", Namespace: ns}}))

	// The reference: a plain GET of the Secret's namespace, round trip to the same apiserver.
	var ref []time.Duration
	for range 200 {
		t0 := time.Now()
		bench.must(bench.c.Get(bctx, types.NamespacedName{Name: ns}, &corev1.Namespace{}))
		ref = append(ref, time.Since(t0))
	}
	refP50 := percentile(ref, 50)

	var requests atomic.Int64
	mgrCfg := rest.CopyConfig(rc)
	mgrCfg.QPS, mgrCfg.Burst = 200, 400
	mgrCfg.Wrap(func(rt http.RoundTripper) http.RoundTripper { return countingTransport{rt, &requests} })
	heapBefore := heapInUse()
	timings := &reconcileTimings{byName: map[string][]time.Duration{}}
	cacheOpts, err := CacheOptions(nil)
	if err != nil {
		b.Fatal(err)
	}
	mgr, err := ctrl.NewManager(mgrCfg, ctrl.Options{
		Scheme: benchScheme(b), Cache: cacheOpts, Metrics: metricsserver.Options{BindAddress: "0"},
		Controller: config.Controller{SkipNameValidation: ptr.To(true)},
	})
	if err != nil {
		b.Fatal(err)
	}
	m, err := NewMetrics(prometheus.NewRegistry())
	if err != nil {
		b.Fatal(err)
	}
	if err := SetupWithManager(bctx, mgr, Options{MaxConcurrentShards: 32, Metrics: m, Wrap: timings.wrap}); err != nil {
		b.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- mgr.Start(bctx) }()
	defer func() { cancel(); <-done }()

	// Phase 1: the portfolios.
	t0 := time.Now()
	for i := range nPortfolios {
		bench.must(bench.c.Create(bctx, benchPortfolio(ns, i)))
	}
	bench.waitFor(10*time.Minute, func() bool {
		var list forecastingv1alpha1.ForecastPortfolioList
		bench.must(bench.c.List(bctx, &list, client.InNamespace(ns)))
		for _, fp := range list.Items {
			if c := meta.FindStatusCondition(fp.Status.Conditions, forecastingv1alpha1.PortfolioStalled); c == nil || c.Status != metav1.ConditionFalse {
				return false
			}
		}
		return len(list.Items) == nPortfolios
	})
	portfolioSeconds := time.Since(t0).Seconds()
	portfolioRequests := requests.Load()

	// Phase 2: b.N runs of nShards shards each.
	b.ResetTimer()
	before := requests.Load()
	for n := range b.N {
		bench.run(bctx, ns, fmt.Sprintf("fenwick-%04d", n%nPortfolios), fmt.Sprintf("fenwick-%04d-bench-%d", n%nPortfolios, n), nShards, batch)
	}
	b.StopTimer()
	runRequests := float64(requests.Load()-before) / float64(b.N)
	heapAfter := heapInUse()

	runLat, portLat := timings.get("forecastrun"), timings.get("forecastportfolio")
	for _, q := range []float64{50, 95, 99} {
		b.ReportMetric(ms(percentile(runLat, q)), fmt.Sprintf("run-reconcile-p%.0f-ms", q))
		b.ReportMetric(ms(percentile(portLat, q)), fmt.Sprintf("portfolio-reconcile-p%.0f-ms", q))
	}
	b.ReportMetric(float64(percentile(runLat, 50))/float64(refP50), "run-p50/get-p50")
	b.ReportMetric(float64(percentile(portLat, 50))/float64(refP50), "portfolio-p50/get-p50")
	b.ReportMetric(ms(refP50), "get-p50-ms")
	b.ReportMetric(runRequests, "api-requests/run")
	b.ReportMetric(runRequests/float64(nShards), "api-requests/shard")
	b.ReportMetric(float64(portfolioRequests)/float64(nPortfolios), "api-requests/portfolio")
	b.ReportMetric(portfolioSeconds, "portfolios-ready-s")
	b.ReportMetric(float64(heapBefore)/(1<<20), "heap-before-MB")
	b.ReportMetric(float64(heapAfter)/(1<<20), "heap-after-MB")
	b.Logf("%d portfolios, %d shards per run, %d runs; %d run and %d portfolio reconciles", nPortfolios, nShards, b.N, len(runLat), len(portLat))
}

// benchDriver plays the Job controller and kubelet for the benchmark.
type benchDriver struct {
	b *testing.B
	c client.Client
}

func (d *benchDriver) must(err error) {
	d.b.Helper()
	if err != nil {
		d.b.Fatal(err)
	}
}

func (d *benchDriver) waitFor(limit time.Duration, ok func() bool) {
	d.b.Helper()
	for deadline := time.Now().Add(limit); !ok(); time.Sleep(100 * time.Millisecond) {
		if time.Now().After(deadline) {
			d.b.Fatalf("condition not met within %v", limit)
		}
	}
}

// run drives one manual run through all its steps.
func (d *benchDriver) run(ctx context.Context, ns, portfolio, name string, shards, batch int) {
	d.must(d.c.Create(ctx, &forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: ns},
		Spec:       forecastingv1alpha1.ForecastRunSpec{PortfolioName: portfolio, Trigger: forecastingv1alpha1.TriggerManual},
	}))
	d.single(ctx, ns, name, stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: shards, Series: shards * 50})
	train := d.job(ctx, ns, name, stepTrain)
	for start := 0; start < shards; start += batch {
		end := min(shards, start+batch)
		var wg sync.WaitGroup
		errs := make(chan error, end-start)
		for i := start; i < end; i++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				s := shardSummary(i)
				s.Kind, s.Shard = summary.KindTrain, i
				msg, _ := summary.Encode(s)
				errs <- d.pod(ctx, train, i, string(msg))
			}()
		}
		wg.Wait()
		close(errs)
		for err := range errs {
			d.must(err)
		}
		d.jobStatus(ctx, train, func(st *batchv1.JobStatus) {
			st.CompletedIndexes = fmt.Sprintf("0-%d", end-1)
			if end == 1 {
				st.CompletedIndexes = "0"
			}
			st.Succeeded = int32(end)
			st.FailedIndexes = ptr.To("")
		})
	}
	want := fmt.Sprintf("0-%d", shards-1)
	if shards == 1 {
		want = "0"
	}
	d.waitFor(10*time.Minute, func() bool {
		var run forecastingv1alpha1.ForecastRun
		d.must(d.c.Get(ctx, types.NamespacedName{Namespace: ns, Name: name}, &run))
		return run.Status.Shards.Folded == want
	})
	d.finish(ctx, train)
	d.single(ctx, ns, name, stepPublish, summary.Summary{Kind: summary.KindPublish})
	d.waitFor(5*time.Minute, func() bool {
		var run forecastingv1alpha1.ForecastRun
		d.must(d.c.Get(ctx, types.NamespacedName{Namespace: ns, Name: name}, &run))
		return run.Status.Phase == forecastingv1alpha1.PhaseSucceeded
	})
}

func (d *benchDriver) job(ctx context.Context, ns, run string, s step) *batchv1.Job {
	var job batchv1.Job
	d.waitFor(time.Minute, func() bool {
		return d.c.Get(ctx, types.NamespacedName{Namespace: ns, Name: jobName(run, s)}, &job) == nil
	})
	return &job
}

func (d *benchDriver) single(ctx context.Context, ns, run string, s step, sum summary.Summary) {
	job := d.job(ctx, ns, run, s)
	msg, _ := summary.Encode(sum)
	d.must(d.pod(ctx, job, 0, string(msg)))
	d.jobStatus(ctx, job, func(st *batchv1.JobStatus) { st.Succeeded = 1 })
	d.finish(ctx, job)
}

func (d *benchDriver) finish(ctx context.Context, job *batchv1.Job) {
	d.jobStatus(ctx, job, markComplete)
}

// pod creates the pod of index i and reports it Succeeded with the termination message.
func (d *benchDriver) pod(ctx context.Context, job *batchv1.Job, i int, message string) error {
	return playPod(ctx, d.c, job, i, 0, 0, message)
}

// jobStatus updates a Job's status, retrying on conflicts with the manager's parallelism patches.
func (d *benchDriver) jobStatus(ctx context.Context, job *batchv1.Job, mutate func(*batchv1.JobStatus)) {
	d.must(playJobStatus(ctx, d.c, job, mutate))
}

func benchPortfolio(ns string, i int) *forecastingv1alpha1.ForecastPortfolio {
	return &forecastingv1alpha1.ForecastPortfolio{
		ObjectMeta: metav1.ObjectMeta{Name: fmt.Sprintf("fenwick-%04d", i), Namespace: ns},
		Spec: forecastingv1alpha1.ForecastPortfolioSpec{
			Schedule: yearly,
			Source: forecastingv1alpha1.DataSource{
				URI: fmt.Sprintf("s3://fenwick-planning/demand/depot-%04d/", i), Frequency: forecastingv1alpha1.Daily,
				CredentialsSecretRef: &forecastingv1alpha1.SecretReference{Name: "fenwick-s3"},
			},
			Output:  forecastingv1alpha1.DataOutput{URI: fmt.Sprintf("s3://fenwick-planning/forecasts/depot-%04d/", i)},
			Horizon: 14,
			Models:  []forecastingv1alpha1.ModelSpec{{Family: forecastingv1alpha1.FamilyNaive}, {Family: forecastingv1alpha1.FamilyETS}},
			Trainer: forecastingv1alpha1.TrainerSpec{Image: "registry.example/almanac-trainer:bench"},
		},
	}
}

func benchScheme(b *testing.B) *kruntime.Scheme {
	s := kruntime.NewScheme()
	if err := clientgoscheme.AddToScheme(s); err != nil {
		b.Fatal(err)
	}
	if err := forecastingv1alpha1.AddToScheme(s); err != nil {
		b.Fatal(err)
	}
	return s
}

// countingTransport counts the requests that pass through it.
type countingTransport struct {
	next http.RoundTripper
	n    *atomic.Int64
}

func (t countingTransport) RoundTrip(req *http.Request) (*http.Response, error) {
	t.n.Add(1)
	return t.next.RoundTrip(req)
}

// reconcileTimings records the duration of every reconcile by controller name.
type reconcileTimings struct {
	mu     sync.Mutex
	byName map[string][]time.Duration
}

func (rt *reconcileTimings) wrap(name string, r reconcile.Reconciler) reconcile.Reconciler {
	return reconcile.Func(func(ctx context.Context, req reconcile.Request) (reconcile.Result, error) {
		t0 := time.Now()
		res, err := r.Reconcile(ctx, req)
		rt.mu.Lock()
		rt.byName[name] = append(rt.byName[name], time.Since(t0))
		rt.mu.Unlock()
		return res, err
	})
}

func (rt *reconcileTimings) get(name string) []time.Duration {
	rt.mu.Lock()
	defer rt.mu.Unlock()
	return slices.Clone(rt.byName[name])
}

// percentile is the nearest-rank q-th percentile (q in (0, 100]); 0 for no data.
func percentile(d []time.Duration, q float64) time.Duration {
	if len(d) == 0 {
		return 0
	}
	s := slices.Clone(d)
	slices.Sort(s)
	k := int(float64(len(s))*q/100+0.999999) - 1
	return s[max(0, min(k, len(s)-1))]
}

func ms(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) }

func heapInUse() uint64 {
	runtime.GC()
	var m runtime.MemStats
	runtime.ReadMemStats(&m)
	return m.HeapInuse
}

func benchEnv(key string, def int) int {
	if v, err := strconv.Atoi(os.Getenv(key)); err == nil && v > 0 {
		return v
	}
	return def
}
