package e2e

import (
	"encoding/json"
	"maps"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/tables"
)

// Issue 21 end to end: a hierarchical portfolio across several shards, with the real trainer's
// plan, train, reconcile and publish Jobs run by the real Job controller.
var _ = Describe("hierarchies end to end", Ordered, func() {
	var c client.Client

	BeforeAll(func(ctx SpecContext) {
		c = kube()
		almanacManager.start(ctx)
		DeferCleanup(almanacManager.halt)
	})

	It("reconciles the nodes that span shards in its own step and publishes a coherent run", func(ctx SpecContext) {
		// smallDemand: 10 items x 4 depots. Levels: depot totals (whole on one shard: the plan
		// buckets series by depot, the first level's column), item totals across depots and the
		// grand total (both span shards, so the reconcile step makes them add up).
		ns, d, fp := newPortfolio(ctx, c, "hierarchy", "fenwick-tree", trainerImage, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Hierarchy = &forecastingv1alpha1.HierarchySpec{
				Levels: []forecastingv1alpha1.HierarchyLevel{{"depot"}, {"item"}, {}},
			}
		})
		manualRun(ctx, c, fp, "fenwick-tree-1")

		By("watching the run pass through Reconciling")
		phases := map[forecastingv1alpha1.RunPhase]bool{}
		var run forecastingv1alpha1.ForecastRun
		Eventually(func(g Gomega) {
			g.Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: "fenwick-tree-1"}, &run)).To(Succeed())
			phases[run.Status.Phase] = true
			g.Expect(conditionStatus(run.Status.Conditions, forecastingv1alpha1.RunSucceeded)).To(BeElementOf(metav1.ConditionTrue, metav1.ConditionFalse))
		}).WithContext(ctx).WithTimeout(4 * time.Minute).WithPolling(100 * time.Millisecond).Should(Succeed())
		st := run.Status
		Expect(conditionStatus(st.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue), "%+v", st.Conditions)
		Expect(st.Shards.Total).To(BeNumerically(">=", 3), "the depots must land on 3 or more shards")
		Expect(st.Shards.Succeeded).To(Equal(st.Shards.Total))
		Expect(st.Series.Trained).To(BeEquivalentTo(40))
		// The phase is polled, so a short step can be missed; the Job is the proof it ran.
		GinkgoWriter.Printf("phases seen: %v\n", phases)
		rec := jobOf(ctx, ns, "fenwick-tree-1", "recon")
		Expect(rec).NotTo(BeNil(), "the reconcile Job")
		Expect(rec.Status.Succeeded).To(BeEquivalentTo(1))
		Expect(rec.Spec.Template.Spec.Containers[0].Args[0]).To(Equal("reconcile"))
		pub := jobOf(ctx, ns, "fenwick-tree-1", "publish")
		Expect(pub).NotTo(BeNil())
		Expect(pub.CreationTimestamp.Time).NotTo(BeTemporally("<", rec.Status.CompletionTime.Time.Truncate(time.Second)),
			"publish starts after reconcile ended")

		By("reading the levels in status: node counts from the shards and the reconcile step")
		Expect(st.Hierarchy).NotTo(BeNil())
		Expect(st.Hierarchy.ReconcileStep).To(BeTrue())
		nodes := map[string]int64{}
		for _, l := range st.Hierarchy.Levels {
			nodes[l.Name] = l.Nodes
		}
		Expect(nodes).To(Equal(map[string]int64{"total": 1, "depot": 4, "item": 10, "item+depot": 40}))
		dev, err := strconv.ParseFloat(st.Hierarchy.MaxDeviation, 64)
		Expect(err).NotTo(HaveOccurred(), "maxDeviation %q", st.Hierarchy.MaxDeviation)
		Expect(dev).To(BeNumerically("<=", 1e-9))

		By("checking the published forecasts add up at every level, period by period")
		Expect(d.latestRun()).To(Equal("fenwick-tree-1"))
		means := publishedMeans(d, "fenwick-tree-1", fp.Spec.Source.Columns.Series)
		checkCoherent(means)

		By("asking the trainer's inspect")
		out, err := exec.CommandContext(ctx, trainerBinary, "inspect", "--output", fp.Spec.Output.URI).CombinedOutput()
		Expect(err).NotTo(HaveOccurred(), string(out))
		Expect(string(out)).To(MatchRegexp(`hierarchy: coherent: 15 aggregates over 40 bottom series`))

		By("four more weeks of actuals: the next run measures the previous run's forecasts at every level")
		o := smallDemand()
		o.Periods += 4
		o.End = o.End.AddDate(0, 0, 28)
		d.write(o, nil)
		manualRun(ctx, c, fp, "fenwick-tree-2")
		second := finishedRun(ctx, c, ns, "fenwick-tree-2")
		Expect(conditionStatus(second.Status.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue), "%+v", second.Status.Conditions)
		h := second.Status.Hierarchy
		Expect(h).NotTo(BeNil())
		Expect(second.Status.Accuracy).NotTo(BeNil())
		GinkgoWriter.Printf("run accuracy %+v\n", second.Status.Accuracy)
		for _, l := range h.Levels {
			GinkgoWriter.Printf("level %s: %d nodes, accuracy %+v\n", l.Name, l.Nodes, l.Accuracy)
			Expect(l.Accuracy).NotTo(BeNil(), "level %s", l.Name)
			evaluated := l.Nodes
			if l.Name == "item+depot" {
				// Bottom series whose in-sample naive error is 0 have no MASE scale and are not
				// evaluated; the bottom level is what the run-level accuracy folds.
				evaluated = second.Status.Accuracy.EvaluatedSeries
				Expect(evaluated).To(BeNumerically(">=", l.Nodes-4))
			}
			Expect(l.Accuracy.EvaluatedSeries).To(Equal(evaluated), "level %s: every node had a previous forecast and 4 new actuals", l.Name)
			Expect(l.Accuracy.EvaluatedPoints).To(Equal(4*evaluated), "level %s", l.Name)
			Expect(l.Accuracy.Expected).NotTo(BeEmpty())
			Expect(l.Accuracy.Realized).NotTo(BeEmpty())
		}
		checkCoherent(publishedMeans(d, "fenwick-tree-2", fp.Spec.Source.Columns.Series))

		By("reading the second run's accuracy per level on the portfolio, with drift judged per level")
		Eventually(func(g Gomega) {
			var p forecastingv1alpha1.ForecastPortfolio
			g.Expect(c.Get(ctx, client.ObjectKeyFromObject(fp), &p)).To(Succeed())
			g.Expect(p.Status.Accuracy).NotTo(BeNil())
			g.Expect(p.Status.Accuracy.Run).To(Equal("fenwick-tree-2"))
			levels := p.Status.HierarchyLevels
			g.Expect(levels).To(HaveLen(len(h.Levels)))
			drift := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
			g.Expect(drift).NotTo(BeNil())
			for i, l := range levels {
				GinkgoWriter.Printf("portfolio level %s: %d nodes, drift %s\n", l.Name, l.Nodes, l.Drift)
				g.Expect(l.Name).To(Equal(h.Levels[i].Name))
				g.Expect(l.Nodes).To(Equal(h.Levels[i].Nodes))
				g.Expect(l.Accuracy).To(Equal(h.Levels[i].Accuracy))
				minPoints, threshold := int64(p.Spec.Drift.MinEvaluatedPoints), float64(p.Spec.Drift.ThresholdPercent)/100
				if l.Accuracy.EvaluatedPoints < minPoints {
					// The grand total has 4 new actuals, below the suite's minEvaluatedPoints 10.
					g.Expect(l.Drift).To(Equal(forecastingv1alpha1.ReasonTooFewPoints), "level %s", l.Name)
					continue
				}
				// Judged: the geometric ratio (the default aggregate) against the threshold; the
				// status shows it to 3 decimals, so a ratio that close to the threshold is left alone.
				ratio, err := strconv.ParseFloat(l.Accuracy.GeometricRatio, 64)
				g.Expect(err).NotTo(HaveOccurred(), "level %s", l.Name)
				if math.Abs(ratio-threshold) > 1e-3 {
					want := forecastingv1alpha1.ReasonWithinThreshold
					if ratio > threshold {
						want = forecastingv1alpha1.ReasonAboveThreshold
					}
					g.Expect(l.Drift).To(Equal(want), "level %s: geometric ratio %s, threshold %v", l.Name, l.Accuracy.GeometricRatio, threshold)
				}
				if l.Name == "item+depot" {
					// The bottom level's nodes are the input series: its verdict is the run's.
					g.Expect(l.Drift == forecastingv1alpha1.ReasonAboveThreshold).To(Equal(drift.Reason == forecastingv1alpha1.ReasonAboveThreshold), "level %s, condition %s", l.Name, drift.Reason)
				}
			}
		}).WithContext(ctx).WithTimeout(time.Minute).Should(Succeed())
	}, SpecTimeout(8*time.Minute))
})

// levelMeans are a published run's mean forecasts: level -> node key -> period -> mean.
type levelMeans map[string]map[string]map[time.Time]float64

// publishedMeans reads the forecasts table of every unit the run's manifest lists.
func publishedMeans(d dataset, run string, keys []string) levelMeans {
	GinkgoHelper()
	b, err := os.ReadFile(filepath.Join(d.output, "runs", run, "MANIFEST.json"))
	Expect(err).NotTo(HaveOccurred())
	var m struct {
		Units []struct {
			ID    string `json:"id"`
			Files []struct {
				Table string `json:"table"`
				Key   string `json:"key"`
			} `json:"files"`
		} `json:"units"`
	}
	Expect(json.Unmarshal(b, &m)).To(Succeed())
	out := levelMeans{}
	for _, u := range m.Units {
		for _, f := range u.Files {
			if f.Table != "forecasts" {
				continue
			}
			file, err := os.Open(filepath.Join(d.output, f.Key))
			Expect(err).NotTo(HaveOccurred())
			_, rows, err := tables.ReadForecasts(file, "csv", keys)
			_ = file.Close()
			Expect(err).NotTo(HaveOccurred(), "unit %s: %s", u.ID, f.Key)
			for _, r := range rows {
				level := r.Level
				if level == "" {
					level = "item+depot"
				}
				if out[level] == nil {
					out[level] = map[string]map[time.Time]float64{}
				}
				if out[level][r.Key] == nil {
					out[level][r.Key] = map[time.Time]float64{}
				}
				out[level][r.Key][r.Period] = r.Mean
			}
		}
	}
	return out
}

// checkCoherent checks that every aggregate's mean equals the sum of its bottom series' means
// for every period, within 1e-9 relative: |f_a − Σ f_j| / max(1, |f_a|) (the coherence measure
// of trainer/reconcile.MaxDeviation; issue 21 asks for 1e-9). The children are found from the
// key cells alone (item, depot): a depot total sums that depot's items, an item total that
// item's depots (one per shard at most), the grand total everything.
func checkCoherent(means levelMeans) {
	GinkgoHelper()
	bottom := means["item+depot"]
	Expect(bottom).To(HaveLen(40))
	cells := func(key string) []string {
		c, err := ingest.SplitKey(key, 2)
		Expect(err).NotTo(HaveOccurred(), "key %q", key)
		return c
	}
	checked := 0
	for level, wants := range map[string]int{"depot": 4, "item": 10, "total": 1} {
		Expect(means[level]).To(HaveLen(wants), "level %s", level)
		for key, series := range means[level] {
			agg := cells(key)
			var children []string
			for b := range bottom {
				bc := cells(b)
				if (agg[0] == "" || agg[0] == bc[0]) && (agg[1] == "" || agg[1] == bc[1]) {
					children = append(children, b)
				}
			}
			Expect(len(children)).To(Equal(map[string]int{"depot": 10, "item": 4, "total": 40}[level]), "children of %s %q", level, key)
			Expect(series).NotTo(BeEmpty())
			for period, f := range series {
				sum := 0.0
				for _, ch := range children {
					v, ok := bottom[ch][period]
					Expect(ok).To(BeTrue(), "%s has no forecast for %s", ch, period)
					sum += v
				}
				Expect(math.Abs(f-sum)/math.Max(1, math.Abs(f))).To(BeNumerically("<=", 1e-9),
					"%s %q at %s: %v, children sum to %v", level, key, period.Format(time.DateOnly), f, sum)
				checked++
			}
		}
	}
	Expect(checked).To(BeNumerically(">", 0))
	GinkgoWriter.Printf("coherence: %d (aggregate, period) pairs within 1e-9; levels %v\n", checked, slices.Sorted(maps.Keys(means)))
}
