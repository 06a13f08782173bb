package controllers

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// The reconcile step of hierarchical runs (issue 21): the plan and the trainer pods are played
// by the test (jobplay_test.go), with the summaries of trainer/summary's contract.

// kubectl runs kubectl on the envtest cluster, appends the command and its output to golden and
// returns the output.
func kubectl(golden *strings.Builder, args ...string) string {
	GinkgoHelper()
	out, err := exec.Command(kubectlPath(), append([]string{"--kubeconfig", writeKubeconfig()}, args...)...).CombinedOutput()
	Expect(err).NotTo(HaveOccurred(), string(out))
	golden.WriteString("$ kubectl " + strings.Join(args, " ") + "\n" + string(out) + "\n")
	return string(out)
}

// jobGone is a poller that is true while the run has no Job of step s.
func jobGone(ns, run string, s step) func() bool {
	return func() bool {
		err := k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: jobName(run, s)}, &batchv1.Job{})
		return apierrors.IsNotFound(err)
	}
}

// hierarchyShard is shardSummary with the levels of shard i of hierarchySources (two depots,
// one per shard, and a third shard reporting only its depot's items).
func hierarchyShard(i int) summary.Summary {
	s := shardSummary(i)
	if i < 2 {
		s.Levels = hierarchySources()[i]
	} else {
		s.Levels = []summary.Level{{Name: "item+depot", Nodes: 4}, {Name: "depot", Nodes: 1}}
	}
	return s
}

// reconcileSummary is the reconcile step's summary: the nodes that span shards.
func reconcileSummary() summary.Summary {
	return summary.Summary{Kind: summary.KindReconcile, Levels: hierarchySources()[2], MaxDeviation: 2.220446049250313e-16}
}

// trainHierarchy plans a run of three shards that asks for the reconcile step and trains them.
func trainHierarchy(ns, name string) {
	succeedSingle(ns, name, stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 3, Units: 3, Series: 9, Reconcile: true})
	Eventually(func() *forecastingv1alpha1.HierarchyStatus { return getRun(ns, name).Status.Hierarchy }).
		Should(Equal(&forecastingv1alpha1.HierarchyStatus{ReconcileStep: true}))
	train := getJob(ns, name, stepTrain)
	finishShards(train, []int{0, 1, 2}, nil, hierarchyShard)
	completeJob(train)
}

// expectLevels checks the folded levels: hierarchySources plus the third shard's, each once.
func expectLevels(h *forecastingv1alpha1.HierarchyStatus) {
	GinkgoHelper()
	Expect(h).NotTo(BeNil())
	nodes := map[string]int64{}
	for _, l := range h.Levels {
		nodes[l.Name] = l.Nodes
	}
	Expect(nodes).To(Equal(map[string]int64{"total": 1, "depot": 3, "item": 3, "item+depot": 9}))
	Expect(h.Levels[0].Name).To(Equal("total"))
	// The grand total, evaluated once by the reconcile step: expected 0.5, realized 0.5.
	Expect(h.Levels[0].Accuracy.Expected).To(Equal("0.5000"))
	Expect(h.Levels[0].Accuracy.Ratio).To(Equal("1.000"))
	// Items by depot: shards 0 and 1 evaluated 5 nodes, sums 0.5 and 1.0 (hierarchySources).
	bottom := h.Levels[len(h.Levels)-1]
	Expect(bottom.AccuracySums.Evaluated).To(BeEquivalentTo(5))
	Expect(bottom.Accuracy.Realized).To(Equal("0.2000"))
}

var _ = Describe("ForecastRun reconcile step", func() {
	It("runs only when the plan asks for it, between train and publish, and folds its levels once", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-tree", yearly, nil)

		By("a plan without the flag goes from train straight to publish")
		manualRun(ns, "fenwick-tree-1", "fenwick-tree")
		succeedSingle(ns, "fenwick-tree-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 1})
		flat := getJob(ns, "fenwick-tree-1", stepTrain)
		finishShards(flat, []int{0}, nil, shardSummary)
		completeJob(flat)
		Eventually(phaseOf(ns, "fenwick-tree-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		Expect(jobGone(ns, "fenwick-tree-1", stepReconcile)()).To(BeTrue())
		Expect(getRun(ns, "fenwick-tree-1").Status.Hierarchy).To(BeNil())
		succeedSingle(ns, "fenwick-tree-1", stepPublish, summary.Summary{Kind: summary.KindPublish})
		Eventually(phaseOf(ns, "fenwick-tree-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))

		By("a plan with it: train, then the reconcile Job, and publish only after it")
		manualRun(ns, "fenwick-tree-2", "fenwick-tree")
		trainHierarchy(ns, "fenwick-tree-2")
		Eventually(phaseOf(ns, "fenwick-tree-2")).Should(Equal(forecastingv1alpha1.PhaseReconciling))
		rec := getJob(ns, "fenwick-tree-2", stepReconcile)
		Expect(metav1.IsControlledBy(rec, getRun(ns, "fenwick-tree-2"))).To(BeTrue())
		Expect(rec.Spec.Template.Spec.Containers[0].Args[0]).To(Equal("reconcile"))
		Expect(conditionOf(getRun(ns, "fenwick-tree-2"), forecastingv1alpha1.RunProgressing)()).To(Equal("True/Reconciling"))
		var golden strings.Builder
		_, noKubectl := exec.LookPath(kubectlPath())
		if noKubectl == nil {
			out := kubectl(&golden, "get", "frun", "fenwick-tree-2", "-n", ns)
			Expect(out).To(MatchRegexp(`fenwick-tree-2\s+fenwick-tree\s+Manual\s+Reconciling\s+3\s+3\s`))
		}
		Consistently(jobGone(ns, "fenwick-tree-2", stepPublish), 2*time.Second).Should(BeTrue())
		// While reconciling, the status holds the shards' levels only.
		Expect(getRun(ns, "fenwick-tree-2").Status.Hierarchy.Levels).To(HaveLen(2))

		succeedSingle(ns, "fenwick-tree-2", stepReconcile, reconcileSummary())
		Eventually(phaseOf(ns, "fenwick-tree-2")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		expectLevels(getRun(ns, "fenwick-tree-2").Status.Hierarchy)
		Expect(getRun(ns, "fenwick-tree-2").Status.Hierarchy.MaxDeviation).To(Equal("2.22e-16"))
		succeedSingle(ns, "fenwick-tree-2", stepPublish, summary.Summary{Kind: summary.KindPublish})
		Eventually(phaseOf(ns, "fenwick-tree-2")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))
		run := getRun(ns, "fenwick-tree-2")
		expectLevels(run.Status.Hierarchy)
		Expect(run.Status.Hierarchy.ReconcileStep).To(BeTrue())
		Expect(run.Status.Series.Trained).To(BeEquivalentTo(99 + 100 + 101))
		Eventually(eventReasonsFor(ns, "fenwick-tree-2")).Should(ContainElements("Training", "Reconciling", "Reconciled", "Publishing", "Published"))
		if noKubectl == nil {
			out := kubectl(&golden, "get", "frun", "fenwick-tree-2", "-n", ns, "-o",
				`jsonpath={.status.hierarchy.maxDeviation}{"\n"}{range .status.hierarchy.levels[*]}{.name}{"\t"}{.nodes}{"\t"}{.accuracy.expected}{"\t"}{.accuracy.realized}{"\n"}{end}`)
			Expect(out).To(Equal("2.22e-16\ntotal\t1\t0.5000\t0.5000\ndepot\t3\t0.1000\t0.2000\nitem\t3\t\t\nitem+depot\t9\t0.1000\t0.2000\n"))
			if os.Getenv("ALMANAC_UPDATE_GOLDEN") == "1" {
				Expect(os.WriteFile(filepath.Join("testdata", "kubectl-get-hierarchy.txt"), []byte(golden.String()), 0o644)).To(Succeed())
			}
		}
	})

	It("shows the published run's accuracy per level on the portfolio and in the metrics, and calls drift on a level", func() {
		ns := newNamespace()
		createSecret(ns)
		// minEvaluatedPoints 10: the grand total (1 node, 7 new actuals) is not judged.
		// maxBiasPercent 1: the item+depot nodes' mean scaled bias, 0.5 over 35 actuals (0.0143,
		// hierarchySources), is beyond it; the input series' (shardSummary: 0) is not.
		testPortfolio(ns, "fenwick-levels", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Drift = forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 10, MaxBiasPercent: 1}
		})
		manualRun(ns, "fenwick-levels-1", "fenwick-levels")
		trainHierarchy(ns, "fenwick-levels-1")
		succeedSingle(ns, "fenwick-levels-1", stepReconcile, reconcileSummary())
		succeedSingle(ns, "fenwick-levels-1", stepPublish, summary.Summary{Kind: summary.KindPublish})
		Eventually(phaseOf(ns, "fenwick-levels-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))

		// The input series as a whole (shardSummary: geometric ratio 0.6/0.5 = 1.2) are within
		// 130%; the depot totals and the item+depot nodes of hierarchySources realize twice
		// their promise (geometric ratio 2 on 14 and 35 new actuals).
		fp := getPortfolio(ns, "fenwick-levels")
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioAccuracyDrift)).Should(Equal("True/LevelAboveThreshold"))
		c := meta.FindStatusCondition(getPortfolio(ns, "fenwick-levels").Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
		Expect(c.Message).To(And(HavePrefix("run fenwick-levels-1: level depot: realized MASE geometric mean 0.2000 is 2.000 times the expected 0.1000"),
			ContainSubstring("; level item+depot: realized MASE geometric mean 0.2000 is 2.000 times"),
			ContainSubstring("; input series: realized MASE geometric mean 0.6000 is 1.200 times the expected 0.5000"),
			Not(ContainSubstring("level total"))))
		Eventually(eventReasonsFor(ns, "fenwick-levels")).Should(ContainElement(forecastingv1alpha1.ReasonLevelAboveThreshold))
		levels := getPortfolio(ns, "fenwick-levels").Status.HierarchyLevels
		verdicts := map[string]string{}
		for _, l := range levels {
			verdicts[l.Name] = fmt.Sprintf("%d %s %s", l.Nodes, l.Drift, l.CalibrationDrift)
		}
		// calibrationDrift came back through the apiserver (the CRD's schema keeps the field).
		Expect(verdicts).To(Equal(map[string]string{"total": "1 TooFewPoints ", "depot": "3 AboveThreshold ", "item": "3 NotEvaluated ", "item+depot": "9 AboveThreshold Biased"}))
		Expect(levels[0].Name).To(Equal("total"))
		Expect(levels[0].Accuracy.Run).To(Equal("fenwick-levels-1"))

		labels := fmt.Sprintf(`namespace=%q,portfolio="fenwick-levels"`, ns)
		Eventually(current.scrape).Should(And(
			ContainSubstring(`almanac_hierarchy_accuracy_drift{hierarchy_level="depot",`+labels+`} 1`),
			ContainSubstring(`almanac_hierarchy_accuracy_drift{hierarchy_level="item+depot",`+labels+`} 1`),
			ContainSubstring(`almanac_hierarchy_accuracy_realized{hierarchy_level="depot",metric="MASE",`+labels+`} 0.2`),
			ContainSubstring(`almanac_hierarchy_accuracy_expected_geometric{hierarchy_level="total",metric="MASE",`+labels+`} 0.5`),
			ContainSubstring(`almanac_portfolio_condition{`+labels+`,reason="LevelAboveThreshold",type="AccuracyDrift"} 1`)))
		Expect(current.scrape()).NotTo(Or(ContainSubstring(`almanac_hierarchy_accuracy_drift{hierarchy_level="total",`+labels),
			ContainSubstring(`almanac_hierarchy_accuracy_expected{hierarchy_level="item",`)))

		var golden strings.Builder
		if _, err := exec.LookPath(kubectlPath()); err == nil {
			out := kubectl(&golden, "get", "fp", "fenwick-levels", "-n", ns, "-o",
				`jsonpath={range .status.hierarchyLevels[*]}{.name}{"\t"}{.nodes}{"\t"}{.accuracy.expectedGeometric}{"\t"}{.accuracy.realizedGeometric}{"\t"}{.drift}{"\n"}{end}`)
			Expect(out).To(Equal("total\t1\t0.5000\t0.5000\tTooFewPoints\ndepot\t3\t0.1000\t0.2000\tAboveThreshold\nitem\t3\t\t\tNotEvaluated\nitem+depot\t9\t0.1000\t0.2000\tAboveThreshold\n"))
			if os.Getenv("ALMANAC_UPDATE_GOLDEN") == "1" {
				Expect(os.WriteFile(filepath.Join("testdata", "kubectl-get-levels.txt"), []byte(golden.String()), 0o644)).To(Succeed())
			}
		}

		By("deleting the portfolio drops its per-level series")
		Expect(k8sClient.Delete(ctx(), getPortfolio(ns, "fenwick-levels"))).To(Succeed())
		Eventually(current.scrape).ShouldNot(ContainSubstring(`almanac_hierarchy_accuracy_drift{hierarchy_level="depot",` + labels))
	})

	It("fails the run with the trainer's own error when the reconcile step fails, and never publishes", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-tree-bad", yearly, nil)
		manualRun(ns, "fenwick-tree-bad-1", "fenwick-tree-bad")
		trainHierarchy(ns, "fenwick-tree-bad-1")
		rec := getJob(ns, "fenwick-tree-bad-1", stepReconcile)
		why := "units/0002/nodes.csv: line 4: node item=FLP-0007 has no base forecast for period 2026-12-05"
		runPod(rec, 0, 0, 3, message(summary.Summary{Kind: summary.KindReconcile, Error: why}))
		failJob(rec, batchv1.JobReasonPodFailurePolicy)
		Eventually(phaseOf(ns, "fenwick-tree-bad-1")).Should(Equal(forecastingv1alpha1.PhaseFailed))
		c := meta.FindStatusCondition(getRun(ns, "fenwick-tree-bad-1").Status.Conditions, forecastingv1alpha1.RunSucceeded)
		Expect(c.Reason).To(Equal(forecastingv1alpha1.ReasonReconcileFailed))
		Expect(c.Message).To(Equal("reconcile failed: " + why))
		Consistently(jobGone(ns, "fenwick-tree-bad-1", stepPublish), 2*time.Second).Should(BeTrue())
		Eventually(conditionOf(getPortfolio(ns, "fenwick-tree-bad"), forecastingv1alpha1.PortfolioReady)).Should(Equal("False/RunFailed"))

		By("a reconcile pod that crashed before its summary: the log tail is the reason")
		manualRun(ns, "fenwick-tree-bad-2", "fenwick-tree-bad")
		trainHierarchy(ns, "fenwick-tree-bad-2")
		rec = getJob(ns, "fenwick-tree-bad-2", stepReconcile)
		runPod(rec, 0, 0, 2, "fatal error: runtime: out of memory")
		failJob(rec, batchv1.JobReasonBackoffLimitExceeded)
		Eventually(phaseOf(ns, "fenwick-tree-bad-2")).Should(Equal(forecastingv1alpha1.PhaseFailed))
		c = meta.FindStatusCondition(getRun(ns, "fenwick-tree-bad-2").Status.Conditions, forecastingv1alpha1.RunSucceeded)
		Expect(c.Reason).To(Equal(forecastingv1alpha1.ReasonReconcileFailed))
		Expect(c.Message).To(And(HavePrefix("reconcile Job failed: BackoffLimitExceeded"), ContainSubstring("out of memory")))
	})

	It("folds the reconcile step once across a manager restart, and recreates a reconcile Job deleted meanwhile", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-tree-restart", yearly, nil)
		manualRun(ns, "fenwick-tree-restart-1", "fenwick-tree-restart")
		manualRun(ns, "fenwick-tree-restart-2", "fenwick-tree-restart")
		trainHierarchy(ns, "fenwick-tree-restart-1")
		trainHierarchy(ns, "fenwick-tree-restart-2")
		Eventually(phaseOf(ns, "fenwick-tree-restart-1")).Should(Equal(forecastingv1alpha1.PhaseReconciling))
		Eventually(phaseOf(ns, "fenwick-tree-restart-2")).Should(Equal(forecastingv1alpha1.PhaseReconciling))
		first := getJob(ns, "fenwick-tree-restart-1", stepReconcile)
		gone := getJob(ns, "fenwick-tree-restart-2", stepReconcile)

		current.stop()
		// Run 1's step ends while the manager is down; run 2's Job is deleted (a TTL while
		// the manager was down), so it must be created again.
		runPod(first, 0, 0, 0, message(reconcileSummary()))
		updateJobStatus(first, func(st *batchv1.JobStatus) { st.Succeeded = 1 })
		completeJob(first)
		// Background: the default for Jobs (orphan) leaves a finalizer only a garbage collector removes.
		Expect(k8sClient.Delete(ctx(), gone, client.PropagationPolicy(metav1.DeletePropagationBackground))).To(Succeed())
		Eventually(jobGone(ns, "fenwick-tree-restart-2", stepReconcile)).Should(BeTrue())
		current = startManager(suiteBudget)

		Eventually(phaseOf(ns, "fenwick-tree-restart-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		expectLevels(getRun(ns, "fenwick-tree-restart-1").Status.Hierarchy)
		again := getJob(ns, "fenwick-tree-restart-2", stepReconcile)
		Expect(again.UID).NotTo(Equal(gone.UID))
		Expect(phaseOf(ns, "fenwick-tree-restart-2")()).To(Equal(forecastingv1alpha1.PhaseReconciling))
		// More reconciles of run 1 (a status write on the publish Job's creation) fold nothing again.
		succeedSingle(ns, "fenwick-tree-restart-1", stepPublish, summary.Summary{Kind: summary.KindPublish})
		Eventually(phaseOf(ns, "fenwick-tree-restart-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))
		expectLevels(getRun(ns, "fenwick-tree-restart-1").Status.Hierarchy)
		succeedSingle(ns, "fenwick-tree-restart-2", stepReconcile, reconcileSummary())
		Eventually(phaseOf(ns, "fenwick-tree-restart-2")).Should(Equal(forecastingv1alpha1.PhasePublishing))
	})
})
