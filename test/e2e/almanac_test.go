package e2e

import (
	"encoding/csv"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apimeta "k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/controllers"
	"almanac.dev/almanac/trainer/synth"
)

// The almanac scenarios of issue 5: the real manager (in the test process), the real Job
// controller and garbage collector, and the real trainer binary run by localnode as the pods.
var _ = Describe("almanac end to end", Ordered, ContinueOnFailure, func() {
	var c client.Client

	BeforeAll(func(ctx SpecContext) {
		c = kube()
		almanacManager.start(ctx)
		DeferCleanup(almanacManager.halt)
	})

	// expectClean checks the counts of a run of smallDemand that trained every shard.
	expectClean := func(run *forecastingv1alpha1.ForecastRun) {
		GinkgoHelper()
		st := run.Status
		Expect(conditionStatus(st.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue), "%+v", st.Conditions)
		Expect(conditionStatus(st.Conditions, forecastingv1alpha1.RunDegraded)).NotTo(Equal(metav1.ConditionTrue))
		Expect(st.Shards.Total).To(Equal(int32(4)))
		Expect(st.Shards.Succeeded).To(Equal(int32(4)))
		Expect(st.Shards.Failed).To(BeZero())
		Expect(st.Shards.Folded).To(Equal("0-3"))
		Expect(st.Series.Total).To(Equal(int64(40)))
		Expect(st.Series.Trained).To(Equal(int64(40)))
		Expect(st.Series.Rejected).To(BeZero())
		Expect(modelTotal(run)).To(Equal(int64(40)))
		// spec.selection.design Auto (the default) over Naive, SeasonalNaive and Theta has one
		// candidate, per-series: the plan decides it for every segment, no shard chooses.
		Expect(st.Designs).To(Equal([]forecastingv1alpha1.DesignCount{{Design: "per-series", Series: 40}}))
	}

	It("runs on its schedule and publishes; suspend stops new runs; no trainer pod runs between runs", func(ctx SpecContext) {
		ns, d, fp := newPortfolio(ctx, c, "schedule", "fenwick-weekly", trainerImage, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Schedule = "* * * * *"
			fp.Spec.StartingDeadlineSeconds = ptr.To[int64](30)
		})

		By("waiting for the next minute's run")
		var name string
		Eventually(func(g Gomega) {
			var runs forecastingv1alpha1.ForecastRunList
			g.Expect(c.List(ctx, &runs, client.InNamespace(ns))).To(Succeed())
			g.Expect(runs.Items).NotTo(BeEmpty())
			g.Expect(runs.Items[0].Spec.Trigger).To(Equal(forecastingv1alpha1.TriggerSchedule))
			name = runs.Items[0].Name
		}).WithContext(ctx).WithTimeout(3 * time.Minute).WithPolling(time.Second).Should(Succeed())
		run := finishedRun(ctx, c, ns, name)
		expectClean(run)
		Expect(run.Spec.ScheduledTime).NotTo(BeNil())

		By("checking what was published")
		Expect(d.latestRun()).To(Equal(name))
		m := d.readManifest(name)
		Expect(m.Complete).To(BeTrue())
		Expect(m.Units).NotTo(BeEmpty())
		for _, u := range m.Units {
			Expect(u.State).To(Equal("trained"), "unit %s", u.ID)
			Expect(u.Source).To(Equal(name), "unit %s", u.ID)
		}
		Eventually(func(g Gomega) {
			var got forecastingv1alpha1.ForecastPortfolio
			g.Expect(c.Get(ctx, client.ObjectKeyFromObject(fp), &got)).To(Succeed())
			g.Expect(got.Status.LastSuccessfulRun).To(Equal(name))
			g.Expect(got.Status.LastScheduleTime).NotTo(BeNil())
			g.Expect(got.Status.LastScheduleTime.Equal(run.Spec.ScheduledTime)).To(BeTrue())
		}).WithContext(ctx).WithTimeout(time.Minute).Should(Succeed())

		By("suspending the portfolio")
		editPortfolio(ctx, c, fp, func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Suspend = ptr.To(true) })
		Eventually(func(g Gomega) {
			var got forecastingv1alpha1.ForecastPortfolio
			g.Expect(c.Get(ctx, client.ObjectKeyFromObject(fp), &got)).To(Succeed())
			cond := findCondition(got.Status.Conditions, forecastingv1alpha1.PortfolioReconciling)
			g.Expect(cond).NotTo(BeNil())
			g.Expect(cond.Reason).To(Equal(forecastingv1alpha1.ReasonSuspended))
		}).WithContext(ctx).WithTimeout(time.Minute).Should(Succeed())

		By("watching past the next schedule time: no new run, no trainer pod or process")
		next := run.Spec.ScheduledTime.Add(time.Minute)
		for time.Now().After(next) {
			next = next.Add(time.Minute)
		}
		Consistently(func(g Gomega) {
			var runs forecastingv1alpha1.ForecastRunList
			g.Expect(c.List(ctx, &runs, client.InNamespace(ns))).To(Succeed())
			g.Expect(runs.Items).To(HaveLen(1))
			g.Expect(podsRunning(ctx, ns, fp.Name)).To(BeEmpty())
			g.Expect(trainerProcesses()).To(BeEmpty())
		}).WithContext(ctx).WithTimeout(time.Until(next) + 15*time.Second).WithPolling(time.Second).Should(Succeed())
	}, SpecTimeout(6*time.Minute))

	It("retries a shard that fails once and succeeds", func(ctx SpecContext) {
		ns, d, fp := newPortfolio(ctx, c, "retry", "fenwick-retry", flakyImage, nil)
		manualRun(ctx, c, fp, "fenwick-retry-1")
		run := finishedRun(ctx, c, ns, "fenwick-retry-1")
		expectClean(run)
		Expect(d.latestRun()).To(Equal("fenwick-retry-1"))

		Expect(shardExitCodes(ctx, ns, run.Name, "1")).To(ConsistOf(int32(4), int32(0)), "shard 1: a transient failure, then a success")
		if trainerEntrypoint != "" {
			By("checking that the faulty image's pods, too, wrote as the image's user, 65532")
			expectOwnedByImageUser(d.output)
			st, err := os.Stat(filepath.Join(markerDir, run.Name+"-1"))
			Expect(err).NotTo(HaveOccurred())
			Expect(st.Sys().(*syscall.Stat_t).Uid).To(BeEquivalentTo(imageUID), "the flaky pod's marker")
		}
	}, SpecTimeout(3*time.Minute))

	It("carries forward the previous forecasts of a shard that always fails and reports the run Degraded", func(ctx SpecContext) {
		ns, d, fp := newPortfolio(ctx, c, "degraded", "fenwick-degraded", trainerImage, nil)
		manualRun(ctx, c, fp, "fenwick-degraded-1")
		expectClean(finishedRun(ctx, c, ns, "fenwick-degraded-1"))

		By("a second run whose shard 1 exits 3 (broken input) every time")
		editPortfolio(ctx, c, fp, func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Trainer.Image = brokenImage })
		manualRun(ctx, c, fp, "fenwick-degraded-2")
		run := finishedRun(ctx, c, ns, "fenwick-degraded-2")
		st := run.Status
		Expect(conditionStatus(st.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue), "%+v", st.Conditions)
		Expect(conditionStatus(st.Conditions, forecastingv1alpha1.RunDegraded)).To(Equal(metav1.ConditionTrue))
		Expect(st.Shards.Total).To(Equal(int32(4)))
		Expect(st.Shards.Succeeded).To(Equal(int32(3)))
		Expect(st.Shards.Failed).To(Equal(int32(1)))
		Expect(st.Shards.FailedIndexes).To(Equal("1"))
		Expect(st.Series.CarriedForward).To(BeNumerically(">", 0))

		By("checking the manifest: shard 1's units point at the first run's files")
		Expect(d.latestRun()).To(Equal(run.Name))
		m := d.readManifest(run.Name)
		Expect(m.Complete).To(BeTrue())
		Expect(m.PreviousRun).To(Equal("fenwick-degraded-1"))
		carried := 0
		for _, u := range m.Units {
			switch u.State {
			case "carriedForward":
				carried++
				Expect(u.Source).To(Equal("fenwick-degraded-1"), "unit %s", u.ID)
			case "trained":
				Expect(u.Source).To(Equal(run.Name), "unit %s", u.ID)
			default:
				Fail("unit " + u.ID + " is " + u.State)
			}
		}
		Expect(int64(carried)).To(Equal(st.Series.CarriedForward))

		By("checking shard 1 was not retried: exit 3 fails the index at once")
		Expect(shardExitCodes(ctx, ns, run.Name, "1")).To(Equal([]int32{3}))
	}, SpecTimeout(3*time.Minute))

	It("finishes a run with correct counts when the manager is stopped mid-training and started again", func(ctx SpecContext) {
		ns, d, fp := newPortfolio(ctx, c, "restart", "fenwick-restart", gatedImage, nil)
		manualRun(ctx, c, fp, "fenwick-restart-1")

		By("waiting until shard 0 is folded while shards 1-3 are held")
		Eventually(func(g Gomega) {
			var run forecastingv1alpha1.ForecastRun
			g.Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: "fenwick-restart-1"}, &run)).To(Succeed())
			g.Expect(run.Status.Shards.Folded).To(Equal("0"))
			g.Expect(run.Status.Phase).To(Equal(forecastingv1alpha1.PhaseTraining))
		}).WithContext(ctx).WithTimeout(2 * time.Minute).WithPolling(250 * time.Millisecond).Should(Succeed())

		By("stopping the manager, then letting shards 1-3 finish while it is down")
		almanacManager.halt()
		Expect(os.WriteFile(filepath.Join(gateDir, fp.Name), nil, 0o644)).To(Succeed())
		Eventually(jobCondition(ctx, ns, "fenwick-restart-1-train", batchv1.JobComplete)).
			WithContext(ctx).WithTimeout(2 * time.Minute).ShouldNot(BeNil())
		var mid forecastingv1alpha1.ForecastRun
		Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: "fenwick-restart-1"}, &mid)).To(Succeed())
		Expect(mid.Status.Shards.Folded).To(Equal("0"), "nothing folds while the manager is down")

		By("starting a new manager")
		almanacManager.start(ctx)
		expectClean(finishedRun(ctx, c, ns, "fenwick-restart-1"))
		Expect(d.latestRun()).To(Equal("fenwick-restart-1"))
	}, SpecTimeout(4*time.Minute))

	It("learns a missing credentials Secret from the plan pod, reports it Stalled, and runs once it exists", func(ctx SpecContext) {
		// The controller has no right on Secrets: localnode, as the kubelet, leaves the plan
		// pod waiting in CreateContainerConfigError until the Secret appears.
		ns, d, fp := newPortfolio(ctx, c, "nosecret", "fenwick-nosecret", trainerImage, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Source.CredentialsSecretRef = &forecastingv1alpha1.SecretReference{Name: "fenwick-store"}
		})
		manualRun(ctx, c, fp, "fenwick-nosecret-1")
		Eventually(func(g Gomega) {
			var run forecastingv1alpha1.ForecastRun
			g.Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: "fenwick-nosecret-1"}, &run)).To(Succeed())
			cond := apimeta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunStalled)
			g.Expect(cond).NotTo(BeNil())
			g.Expect(cond.Reason).To(Equal(forecastingv1alpha1.ReasonMissingSecret))
			g.Expect(cond.Message).To(HavePrefix("spec.source.credentialsSecretRef: Secret " + ns + "/fenwick-store not found"))
			var got forecastingv1alpha1.ForecastPortfolio
			g.Expect(c.Get(ctx, client.ObjectKeyFromObject(fp), &got)).To(Succeed())
			g.Expect(conditionStatus(got.Status.Conditions, forecastingv1alpha1.PortfolioStalled)).To(Equal(metav1.ConditionTrue))
		}).WithContext(ctx).WithTimeout(time.Minute).WithPolling(250 * time.Millisecond).Should(Succeed())

		By("creating the Secret: the pod starts and the run publishes")
		Expect(c.Create(ctx, &corev1.Secret{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "fenwick-store"}})).To(Succeed())
		run := finishedRun(ctx, c, ns, "fenwick-nosecret-1")
		expectClean(run)
		Expect(apimeta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunStalled)).To(BeNil())
		Expect(d.latestRun()).To(Equal("fenwick-nosecret-1"))
	}, SpecTimeout(3*time.Minute))

	It("ends a plan pod stalled on its input with the trainer's own summary before the Job's deadline", func(ctx SpecContext) {
		// Issue 18 case 2: the controller passes --step-deadline, the Job's deadline (100 s)
		// from its creation less a quarter (25 s). The plan pod blocks in the kernel opening a
		// named pipe nobody writes, gives up 10 s after that time, writes its summary and exits
		// 4 before the Job controller's kill, so the run's reason is the trainer's own text,
		// not DeadlineExceeded with no summary.
		ns, d, fp := newPortfolio(ctx, c, "stall", "fenwick-stall", trainerImage, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Sharding.ActiveDeadlineSeconds = ptr.To[int64](100)
			fp.Spec.Sharding.RetriesPerShard = ptr.To[int32](0)
		})
		Expect(syscall.Mkfifo(filepath.Join(d.data, "depot-zz-stalled.csv"), 0o644)).To(Succeed())
		manualRun(ctx, c, fp, "fenwick-stall-1")
		run := finishedRun(ctx, c, ns, "fenwick-stall-1")
		cond := apimeta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunSucceeded)
		Expect(cond.Status).To(Equal(metav1.ConditionFalse))
		Expect(cond.Reason).To(Equal(forecastingv1alpha1.ReasonPlanFailed), cond.Message)
		Expect(cond.Message).To(ContainSubstring("plan failed: plan did not finish within --step-deadline "))
		Expect(d.latestRun()).To(BeEmpty())
	}, SpecTimeout(3*time.Minute))

	It("shows training progress in kubectl get frun from the running pods' progress lines", func(ctx SpecContext) {
		ns, _, fp := newPortfolio(ctx, c, "progress", "fenwick-progress", lingeringImage, nil)
		manualRun(ctx, c, fp, "fenwick-progress-1")
		kubectl := filepath.Join(os.Getenv("KUBEBUILDER_ASSETS"), "kubectl")
		if _, err := os.Stat(kubectl); err != nil {
			Skip("kubectl is not next to the control-plane binaries: " + err.Error())
		}

		By("waiting until every shard printed its last progress line while its pod still runs")
		Eventually(func(g Gomega) {
			var run forecastingv1alpha1.ForecastRun
			g.Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: "fenwick-progress-1"}, &run)).To(Succeed())
			g.Expect(run.Status.Phase).To(Equal(forecastingv1alpha1.PhaseTraining))
			g.Expect(run.Status.Shards.Folded).To(BeEmpty(), "nothing is folded while the pods run")
			p := run.Status.Progress
			g.Expect(p).NotTo(BeNil())
			g.Expect(p.RunningShards).To(Equal(int32(4)))
			g.Expect(p.SeriesDone).To(Equal(int64(40)), "10 series per shard, all from the pods' logs")
			g.Expect(p.Percent).To(Equal(int32(100)))
		}).WithContext(ctx).WithTimeout(2 * time.Minute).WithPolling(500 * time.Millisecond).Should(Succeed())

		By("reading it with kubectl get frun, as an operator would")
		out, err := exec.CommandContext(ctx, kubectl, "--kubeconfig", cluster.Kubeconfig, "get", "frun", "-n", ns, "-o", "wide").CombinedOutput()
		Expect(err).NotTo(HaveOccurred(), string(out))
		lines := strings.Split(strings.TrimSpace(string(out)), "\n")
		Expect(lines).To(HaveLen(2), string(out))
		// kubectl aligns each value under the start of its column's name and leaves an unset
		// value blank (the accuracy columns of a first run), so cut the row by the header.
		col := func(name string) string {
			GinkgoHelper()
			i := strings.Index(lines[0], " "+name+" ")
			Expect(i).To(BeNumerically(">=", 0), "no column %s in %q", name, lines[0])
			Expect(len(lines[1])).To(BeNumerically(">", i+1), lines[1])
			Expect(lines[1][i+1]).NotTo(Equal(byte(' ')), "column %s is blank: %q", name, lines[1])
			return strings.Fields(lines[1][i+1:])[0]
		}
		Expect(col("PHASE")).To(Equal("Training"))
		Expect(col("PROGRESS")).To(Equal("100"))
		Expect(col("SERIES/S")).To(MatchRegexp(`^[0-9.]+$`))
		Expect(col("EST-END")).To(MatchRegexp(`^\d{4}-\d\d-\d\dT\S+Z$`))

		By("letting the pods end: the run publishes and progress keeps its final figures")
		Expect(os.WriteFile(filepath.Join(gateDir, fp.Name), nil, 0o644)).To(Succeed())
		run := finishedRun(ctx, c, ns, "fenwick-progress-1")
		expectClean(run)
		Expect(run.Status.Progress).NotTo(BeNil())
		Expect(run.Status.Progress.Percent).To(Equal(int32(100)))
		Expect(run.Status.Progress.SeriesDone).To(Equal(int64(40)))
		Expect(conditionStatus(run.Status.Conditions, forecastingv1alpha1.RunShardsStalled)).NotTo(Equal(metav1.ConditionTrue))
	}, SpecTimeout(4*time.Minute))

	It("rejects bad series with reasons and forecasts the rest", func(ctx SpecContext) {
		ns := newNamespace(ctx, "badseries")
		d := newDataset()
		o := smallDemand()
		o.Bad = len(synth.Defects)
		d.write(o, nil)
		fp := portfolio(ns, "fenwick-bad", d, trainerImage)
		Expect(c.Create(ctx, fp)).To(Succeed())
		manualRun(ctx, c, fp, "fenwick-bad-1")
		run := finishedRun(ctx, c, ns, "fenwick-bad-1")
		st := run.Status
		Expect(conditionStatus(st.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue), "%+v", st.Conditions)
		Expect(st.Series.Rejected).To(Equal(int64(len(synth.Defects))))
		Expect(st.Series.Trained).To(Equal(int64(40 - len(synth.Defects))))
		Expect(modelTotal(run)).To(Equal(st.Series.Trained))

		By("reading every unit's rejected.csv")
		files, err := filepath.Glob(filepath.Join(d.output, "runs", run.Name, "units", "*", "rejected.csv"))
		Expect(err).NotTo(HaveOccurred())
		reasons := map[string]string{}
		for _, f := range files {
			fh, err := os.Open(f)
			Expect(err).NotTo(HaveOccurred())
			rows, err := csv.NewReader(fh).ReadAll()
			fh.Close()
			Expect(err).NotTo(HaveOccurred())
			Expect(rows[0]).To(Equal([]string{"item", "depot", "reason"}), "each key column has its own column")
			for _, r := range rows[1:] {
				reasons[r[0]+" at "+r[1]] = r[2]
			}
		}
		want := map[string]bool{}
		for i := range synth.Defects {
			key := o.ItemName(i) + " at " + synth.DepotName(0)
			want[key] = true
			Expect(reasons).To(HaveKey(key))
			Expect(strings.TrimSpace(reasons[key])).NotTo(BeEmpty())
		}
		Expect(reasons).To(HaveLen(len(want)))

		if trainerEntrypoint != "" {
			By("checking that the trainer image's pods wrote everything as the image's user, 65532")
			expectOwnedByImageUser(d.output)
		}
	}, SpecTimeout(3*time.Minute))

	It("reports AccuracyDrift after a level shift and, with action Retrain, starts a Drift run", func(ctx SpecContext) {
		ns := newNamespace(ctx, "drift")
		shifted, steady := newDataset(), newDataset()
		o := smallDemand()
		shifted.write(o, nil)
		steady.write(o, nil)
		mk := func(name string, d dataset) *forecastingv1alpha1.ForecastPortfolio {
			fp := portfolio(ns, name, d, trainerImage)
			fp.Spec.Drift = forecastingv1alpha1.DriftSpec{ThresholdPercent: 200, MinEvaluatedPoints: 40, Action: forecastingv1alpha1.DriftRetrain}
			Expect(c.Create(ctx, fp)).To(Succeed())
			return fp
		}
		fpShift, fpSteady := mk("fenwick-shift", shifted), mk("fenwick-steady", steady)
		manualRun(ctx, c, fpShift, "fenwick-shift-1")
		manualRun(ctx, c, fpSteady, "fenwick-steady-1")
		expectClean(finishedRun(ctx, c, ns, "fenwick-shift-1"))
		expectClean(finishedRun(ctx, c, ns, "fenwick-steady-1"))

		By("appending four weeks of actuals, at four times the level for one portfolio")
		cut := o.End
		o.Periods += 4
		o.End = o.End.AddDate(0, 0, 28)
		shifted.write(o, func(r synth.Record) float64 {
			if r.Date.After(cut) {
				return 4
			}
			return 1
		})
		steady.write(o, nil)
		manualRun(ctx, c, fpShift, "fenwick-shift-2")
		manualRun(ctx, c, fpSteady, "fenwick-steady-2")
		for _, name := range []string{"fenwick-shift-2", "fenwick-steady-2"} {
			run := finishedRun(ctx, c, ns, name)
			Expect(conditionStatus(run.Status.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue))
			Expect(run.Status.Accuracy).NotTo(BeNil())
			// At most 40 series x 4 new weeks; series without an error scale are not scored.
			Expect(run.Status.Accuracy.EvaluatedPoints).To(And(BeNumerically(">=", 40), BeNumerically("<=", 40*4)))
		}

		drift := func(fp *forecastingv1alpha1.ForecastPortfolio) func(Gomega) string {
			return func(g Gomega) string {
				var got forecastingv1alpha1.ForecastPortfolio
				g.Expect(c.Get(ctx, client.ObjectKeyFromObject(fp), &got)).To(Succeed())
				g.Expect(got.Status.Accuracy).NotTo(BeNil())
				g.Expect(got.Status.Accuracy.Run).To(HaveSuffix("-2"))
				cond := findCondition(got.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
				g.Expect(cond).NotTo(BeNil())
				return string(cond.Status) + "/" + cond.Reason
			}
		}
		Eventually(drift(fpSteady)).WithContext(ctx).WithTimeout(time.Minute).Should(Equal("False/" + forecastingv1alpha1.ReasonWithinThreshold))
		Eventually(drift(fpShift)).WithContext(ctx).WithTimeout(time.Minute).Should(Equal("True/" + forecastingv1alpha1.ReasonAboveThreshold))

		By("waiting for the Drift run of the shifted portfolio")
		var driftRuns []string
		Eventually(func(g Gomega) {
			var runs forecastingv1alpha1.ForecastRunList
			g.Expect(c.List(ctx, &runs, client.InNamespace(ns))).To(Succeed())
			driftRuns = nil
			for _, r := range runs.Items {
				if r.Spec.Trigger == forecastingv1alpha1.TriggerDrift {
					driftRuns = append(driftRuns, r.Spec.PortfolioName+" "+r.Name)
				}
			}
			g.Expect(driftRuns).To(HaveLen(1))
		}).WithContext(ctx).WithTimeout(time.Minute).Should(Succeed())
		Expect(driftRuns[0]).To(HavePrefix("fenwick-shift "))
		name := strings.Fields(driftRuns[0])[1]
		run := finishedRun(ctx, c, ns, name)
		Expect(conditionStatus(run.Status.Conditions, forecastingv1alpha1.RunSucceeded)).To(Equal(metav1.ConditionTrue))
		Expect(shifted.latestRun()).To(Equal(name))
		Expect(shifted.readManifest(name).PreviousRun).To(Equal("fenwick-shift-2"), "the drift run follows the run that measured the drift")
	}, SpecTimeout(4*time.Minute))

	It("skips a due run with an Event while a run is active (Forbid), and deleting the portfolio deletes its runs and Jobs", func(ctx SpecContext) {
		ns, d, fp := newPortfolio(ctx, c, "forbid", "fenwick-forbid", gatedImage, nil)
		manualRun(ctx, c, fp, "fenwick-forbid-1")
		Eventually(func(g Gomega) {
			var run forecastingv1alpha1.ForecastRun
			g.Expect(c.Get(ctx, client.ObjectKey{Namespace: ns, Name: "fenwick-forbid-1"}, &run)).To(Succeed())
			g.Expect(run.Status.Phase).To(Equal(forecastingv1alpha1.PhaseTraining))
		}).WithContext(ctx).WithTimeout(2 * time.Minute).Should(Succeed())

		By("making a run due every minute while shards 1-3 are held")
		editPortfolio(ctx, c, fp, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Schedule = "* * * * *"
			fp.Spec.StartingDeadlineSeconds = ptr.To[int64](30)
		})
		Eventually(func(g Gomega) []string {
			list, err := cluster.Client.EventsV1().Events(ns).List(ctx, metav1.ListOptions{})
			g.Expect(err).NotTo(HaveOccurred())
			var reasons []string
			for _, e := range list.Items {
				if e.Regarding.Name == fp.Name {
					reasons = append(reasons, e.Reason)
				}
			}
			return reasons
		}).WithContext(ctx).WithTimeout(2 * time.Minute).WithPolling(time.Second).Should(ContainElement(forecastingv1alpha1.ReasonSkippedForbidden))
		var runs forecastingv1alpha1.ForecastRunList
		Expect(c.List(ctx, &runs, client.InNamespace(ns))).To(Succeed())
		Expect(runs.Items).To(HaveLen(1), "no second run while the first is active")

		By("suspending, releasing the held shards and letting the run finish")
		editPortfolio(ctx, c, fp, func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Suspend = ptr.To(true) })
		Expect(os.WriteFile(filepath.Join(gateDir, fp.Name), nil, 0o644)).To(Succeed())
		expectClean(finishedRun(ctx, c, ns, "fenwick-forbid-1"))
		Expect(d.latestRun()).To(Equal("fenwick-forbid-1"))

		By("deleting the portfolio")
		Expect(c.Delete(ctx, fp)).To(Succeed())
		Eventually(func(g Gomega) {
			var runs forecastingv1alpha1.ForecastRunList
			g.Expect(c.List(ctx, &runs, client.InNamespace(ns))).To(Succeed())
			g.Expect(runs.Items).To(BeEmpty())
			jobs, err := cluster.Client.BatchV1().Jobs(ns).List(ctx, metav1.ListOptions{})
			g.Expect(err).NotTo(HaveOccurred())
			g.Expect(jobs.Items).To(BeEmpty())
			pods, err := cluster.Client.CoreV1().Pods(ns).List(ctx, metav1.ListOptions{})
			g.Expect(err).NotTo(HaveOccurred())
			g.Expect(pods.Items).To(BeEmpty())
			cms, err := cluster.Client.CoreV1().ConfigMaps(ns).List(ctx, metav1.ListOptions{LabelSelector: controllers.LabelPortfolio})
			g.Expect(err).NotTo(HaveOccurred())
			g.Expect(cms.Items).To(BeEmpty())
		}).WithContext(ctx).WithTimeout(2 * time.Minute).WithPolling(time.Second).Should(Succeed())
	}, SpecTimeout(5*time.Minute))
})

// findCondition returns the condition of type t, or nil.
func findCondition(conds []metav1.Condition, t string) *metav1.Condition {
	for i := range conds {
		if conds[i].Type == t {
			return &conds[i]
		}
	}
	return nil
}
