package controllers

import (
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"os"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/client-go/rest"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// Exactly-once folding under faults (issue 18 case 8): two managers reconcile the same runs at
// once (no leader election: a stale leader that has not noticed it lost the Lease), and each
// loses the response to some of its run status updates after the apiserver applied them (the
// controller sees an error and does not know the write happened). Over many random finish
// orders of the shards, every run's folded counts and sums must equal one clean fold of all
// its shards. ALMANAC_FOLD_ORDERS sets the number of orders (default 50).

// dropResponses is a transport that, for a share of the ForecastRun status updates the
// apiserver accepted, throws the response away and returns an error instead.
type dropResponses struct {
	next    http.RoundTripper
	mu      sync.Mutex
	rng     *rand.Rand
	share   float64
	dropped atomic.Int64
}

func (d *dropResponses) RoundTrip(req *http.Request) (*http.Response, error) {
	resp, err := d.next.RoundTrip(req)
	if err != nil || req.Method != http.MethodPut || resp.StatusCode != http.StatusOK ||
		!strings.Contains(req.URL.Path, "/forecastruns/") || !strings.HasSuffix(req.URL.Path, "/status") {
		return resp, err
	}
	d.mu.Lock()
	drop := d.rng.Float64() < d.share
	d.mu.Unlock()
	if !drop {
		return resp, nil
	}
	_, _ = io.Copy(io.Discard, resp.Body)
	_ = resp.Body.Close()
	d.dropped.Add(1)
	return nil, errors.New("test: the connection broke after the apiserver applied the status update")
}

// foldOrders is ALMANAC_FOLD_ORDERS, else 50 (about a minute on 2 cores).
func foldOrders() int {
	if n, err := strconv.Atoi(os.Getenv("ALMANAC_FOLD_ORDERS")); err == nil && n > 0 {
		return n
	}
	return 50
}

// orderSummary gives shard i of a run its own counts and sums, so that a shard folded twice
// or not at all changes every total.
func orderSummary(i int) summary.Summary {
	s := shardSummary(i)
	s.Accuracy.Evaluated, s.Accuracy.EvaluatedPoints = 10+i, 50+5*i
	s.Accuracy.ExpectedSum, s.Accuracy.RealizedSum = 5+0.25*float64(i), 6+0.5*float64(i)
	s.Calibration.Below = []int{5 + i%3, 45 - i%4}
	return s
}

var _ = Describe("Exactly-once folding under faults", func() {
	It("folds every shard once with two managers losing status-update responses, over random finish orders", func() {
		orders := foldOrders()
		rng := rand.New(rand.NewPCG(20261204, 8))
		var drops []*dropResponses
		startDropping := func(seed uint64) *testManager {
			d := &dropResponses{rng: rand.New(rand.NewPCG(seed, 1)), share: 0.3}
			cfg := rest.CopyConfig(managerCfg)
			cfg.Wrap(func(rt http.RoundTripper) http.RoundTripper { d.next = rt; return d })
			drops = append(drops, d)
			return startManagerWith(cfg, suiteBudget)
		}
		current.stop()
		a, b := startDropping(1), startDropping(2)
		defer func() {
			a.stop()
			b.stop()
			current = startManager(suiteBudget)
		}()

		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-orders", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Sharding.MaxFailedShards = ptr.To[int32](2)
			fp.Spec.SuccessfulRunsHistoryLimit = ptr.To[int32](100)
			fp.Spec.FailedRunsHistoryLimit = ptr.To[int32](100)
		})
		for o := range orders {
			name := fmt.Sprintf("fenwick-orders-%d", o)
			shards := 3 + rng.IntN(6)
			manualRun(ns, name, "fenwick-orders")
			succeedSingle(ns, name, stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: shards})
			train := getJob(ns, name, stepTrain)
			// A random order in random batches; up to two shards fail (maxFailedShards 2).
			perm, failures := rng.Perm(shards), 0
			for len(perm) > 0 {
				n := min(len(perm), 1+rng.IntN(3))
				var ok, bad []int
				for _, i := range perm[:n] {
					if failures < 2 && rng.IntN(5) == 0 {
						bad, failures = append(bad, i), failures+1
					} else {
						ok = append(ok, i)
					}
				}
				perm = perm[n:]
				finishShards(train, ok, bad, orderSummary)
			}
			if failures > 0 {
				failJob(train, batchv1.JobReasonFailedIndexes)
			} else {
				completeJob(train)
			}
			Eventually(phaseOf(ns, name)).Should(Equal(forecastingv1alpha1.PhasePublishing), name)

			// One clean fold of every shard: the reference.
			var pods corev1.PodList
			Expect(k8sClient.List(ctx(), &pods, client.InNamespace(ns), client.MatchingLabels{LabelRun: name, LabelStep: string(stepTrain)})).To(Succeed())
			Expect(k8sClient.Get(ctx(), client.ObjectKeyFromObject(train), train)).To(Succeed())
			want := forecastingv1alpha1.ForecastRunStatus{}
			_, err := foldShards(&want, train, pods.Items, true)
			Expect(err).NotTo(HaveOccurred())
			got := getRun(ns, name).Status
			Expect(got.Shards.Succeeded+got.Shards.Failed).To(BeEquivalentTo(shards), name)
			Expect(got.Shards.Folded).To(Equal(want.Shards.Folded), name)
			Expect(got.Shards.FailedIndexes).To(Equal(want.Shards.FailedIndexes), name)
			Expect(got.Shards.Succeeded).To(Equal(want.Shards.Succeeded), name)
			Expect(got.Series).To(Equal(want.Series), name)
			Expect(got.Models).To(Equal(want.Models), name)
			Expect(got.AccuracySums).To(Equal(want.AccuracySums), name)
			Expect(got.CalibrationSums).To(Equal(want.CalibrationSums), name)
		}
		dropped := drops[0].dropped.Load() + drops[1].dropped.Load()
		GinkgoWriter.Printf("%d finish orders, %d status-update responses dropped\n", orders, dropped)
		Expect(dropped).To(BeNumerically(">=", int64(orders)), "too few responses were dropped for the test to mean anything")
	})
})
