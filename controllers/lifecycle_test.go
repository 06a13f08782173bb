package controllers

import (
	"encoding/json"
	"fmt"
	"strconv"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	eventsv1 "k8s.io/api/events/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"almanac.dev/almanac/api/offline"
	"almanac.dev/almanac/api/render"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/tables"
)

// yearly is a schedule the tests never reach, for tests about manual runs.
const yearly = "0 4 1 1 *"

// testPortfolio is a Fenwick Lane Provisions portfolio (invented distributor): daily demand
// per item and depot, credentials in the Secret "fenwick-s3".
func testPortfolio(ns, name, schedule string, mutate func(*forecastingv1alpha1.ForecastPortfolio)) *forecastingv1alpha1.ForecastPortfolio {
	fp := portfolioSpec(ns, name, schedule, mutate)
	ExpectWithOffset(1, k8sClient.Create(ctx(), fp)).To(Succeed())
	DeferCleanup(func() { _ = k8sClient.Delete(ctx(), fp) })
	return fp
}

// portfolioSpec is testPortfolio's object as built in Go, before the apiserver defaults it.
func portfolioSpec(ns, name, schedule string, mutate func(*forecastingv1alpha1.ForecastPortfolio)) *forecastingv1alpha1.ForecastPortfolio {
	fp := &forecastingv1alpha1.ForecastPortfolio{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: ns},
		Spec: forecastingv1alpha1.ForecastPortfolioSpec{
			Schedule: schedule,
			TimeZone: ptr.To("Europe/London"),
			Source: forecastingv1alpha1.DataSource{
				URI:                  "s3://fenwick-planning/demand/daily/",
				Frequency:            forecastingv1alpha1.Daily,
				Columns:              forecastingv1alpha1.ColumnMapping{Series: []string{"item", "depot"}},
				CredentialsSecretRef: &forecastingv1alpha1.SecretReference{Name: "fenwick-s3"},
			},
			Output:  forecastingv1alpha1.DataOutput{URI: "s3://fenwick-planning/forecasts/daily/"},
			Horizon: 14,
			Models:  []forecastingv1alpha1.ModelSpec{{Family: forecastingv1alpha1.FamilyNaive}, {Family: forecastingv1alpha1.FamilyETS}, {Family: forecastingv1alpha1.FamilyTheta}},
			Trainer: forecastingv1alpha1.TrainerSpec{Image: "registry.example/almanac-trainer:test"},
		},
	}
	if mutate != nil {
		mutate(fp)
	}
	return fp
}

func createSecret(ns string) {
	s := &corev1.Secret{ObjectMeta: metav1.ObjectMeta{Name: "fenwick-s3", Namespace: ns},
		StringData: map[string]string{"AWS_ACCESS_KEY_ID": "fenwick", "AWS_SECRET_ACCESS_KEY": "not-a-real-key"}}
	ExpectWithOffset(1, k8sClient.Create(ctx(), s)).To(Succeed())
}

func manualRun(ns, name, portfolio string) {
	run := &forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: ns},
		Spec:       forecastingv1alpha1.ForecastRunSpec{PortfolioName: portfolio, Trigger: forecastingv1alpha1.TriggerManual},
	}
	ExpectWithOffset(1, k8sClient.Create(ctx(), run)).To(Succeed())
}

// poke changes an annotation so the portfolio is reconciled at the fake clock's new time.
func poke(ns, name string) {
	patch := fmt.Sprintf(`{"metadata":{"annotations":{"test.almanac.dev/poke":"%d"}}}`, time.Now().UnixNano())
	fp := &forecastingv1alpha1.ForecastPortfolio{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: name}}
	ExpectWithOffset(1, k8sClient.Patch(ctx(), fp, client.RawPatch(types.MergePatchType, []byte(patch)))).To(Succeed())
}

// phaseOf is a poller for a run's phase.
func phaseOf(ns, name string) func() forecastingv1alpha1.RunPhase {
	return func() forecastingv1alpha1.RunPhase {
		var run forecastingv1alpha1.ForecastRun
		if err := k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: name}, &run); err != nil {
			return ""
		}
		return run.Status.Phase
	}
}

// conditionOf is a poller for "Status/Reason" of a condition of a portfolio or run.
func conditionOf(obj client.Object, typ string) func() string {
	return func() string {
		if err := k8sClient.Get(ctx(), client.ObjectKeyFromObject(obj), obj); err != nil {
			return err.Error()
		}
		var conds []metav1.Condition
		switch o := obj.(type) {
		case *forecastingv1alpha1.ForecastPortfolio:
			conds = o.Status.Conditions
		case *forecastingv1alpha1.ForecastRun:
			conds = o.Status.Conditions
		}
		c := meta.FindStatusCondition(conds, typ)
		if c == nil {
			return "absent"
		}
		return string(c.Status) + "/" + c.Reason
	}
}

// parallelismOf is a poller for a Job's spec.parallelism.
func parallelismOf(job *batchv1.Job) func() int32 {
	return func() int32 {
		var cur batchv1.Job
		if err := k8sClient.Get(ctx(), client.ObjectKeyFromObject(job), &cur); err != nil {
			return -1
		}
		return ptr.Deref(cur.Spec.Parallelism, -1)
	}
}

// eventReasonsFor lists the reasons of the Events about the named object.
func eventReasonsFor(ns, name string) func() []string {
	return func() []string {
		var list eventsv1.EventList
		if err := k8sClient.List(ctx(), &list, client.InNamespace(ns)); err != nil {
			return nil
		}
		var out []string
		for _, e := range list.Items {
			if e.Regarding.Name == name {
				out = append(out, e.Reason)
			}
		}
		return out
	}
}

// dueAfter moves the fake clock just past the first schedule time after the portfolio's
// creation, for a schedule that fires every period ("*/5 * * * *": 5 minutes), and returns
// that time.
func dueAfter(fp *forecastingv1alpha1.ForecastPortfolio, period time.Duration) time.Time {
	created := getPortfolio(fp.Namespace, fp.Name).CreationTimestamp.Time
	due := created.Truncate(period).Add(period)
	fakeClock.SetTime(due.Add(time.Second))
	return due
}

// runName is the name of the scheduled run for due.
func runName(fp string, due time.Time) string { return fmt.Sprintf("%s-%d", fp, due.Unix()/60) }

// Each test starts with the fake clock at the apiserver's time, which stamps creation times;
// dueAfter then moves it forward.
var _ = BeforeEach(func() { fakeClock.SetTime(time.Now()) })

var _ = Describe("ForecastRun life cycle", func() {
	It("renders the config, plans, trains shards, publishes, and folds every shard once", func() {
		ns := newNamespace()
		createSecret(ns)
		mutate := func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Sharding.MaxParallel = 3
			fp.Spec.Suspend = ptr.To(false)
		}
		fp := testPortfolio(ns, "fenwick-daily", "* * * * *", mutate)
		due := dueAfter(fp, time.Minute)
		poke(ns, fp.Name)
		name := runName(fp.Name, due)

		plan := getJob(ns, name, stepPlan)
		// --step-deadline: the Job's deadline from the reconciler's clock at creation, less the
		// margin (TestStepDeadlineBelowTheJobDeadline holds the arithmetic).
		Expect(plan.Spec.Template.Spec.Containers[0].Args).To(HaveExactElements("plan", "--config", "/etc/almanac/run/config.json", "--termination-log", "/dev/termination-log",
			"--step-deadline", stepDeadline(fakeClock.Now(), *plan.Spec.ActiveDeadlineSeconds).Format(time.RFC3339)))
		Expect(stepDeadline(fakeClock.Now(), *plan.Spec.ActiveDeadlineSeconds)).To(BeTemporally("<", fakeClock.Now().Add(time.Duration(*plan.Spec.ActiveDeadlineSeconds)*time.Second)))
		Expect(metav1.IsControlledBy(plan, getRun(ns, name))).To(BeTrue())
		conf := configOf(ns, name)
		Expect(conf["quantilePercents"]).To(Equal([]any{10.0, 50.0, 90.0}))
		Expect(conf["run"]).To(Equal(name))
		// The ConfigMap is the trainer's strict, versioned file, unchanged by a decode and
		// encode; and the same spec loaded as a file by validate's loader (as almanac-trainer
		// validate, render -f and local -f do) renders the very same bytes.
		raw := configText(ns, name)
		parsed, err := runconfig.Parse([]byte(raw), "ConfigMap "+configMapName(name))
		Expect(err).NotTo(HaveOccurred())
		again, err := runconfig.Encode(parsed)
		Expect(err).NotTo(HaveOccurred())
		Expect(string(again)).To(Equal(raw))
		// The file a user would commit: the spec as written, checked and defaulted by the
		// trainer's validate loader (api/offline), not by the apiserver.
		file := portfolioSpec(ns, "fenwick-daily", "* * * * *", mutate)
		file.APIVersion, file.Kind = forecastingv1alpha1.GroupVersion.String(), "ForecastPortfolio"
		doc, err := json.Marshal(file)
		Expect(err).NotTo(HaveOccurred())
		objs, err := offline.Load("fenwick-daily.json", doc)
		Expect(err).NotTo(HaveOccurred())
		fromFile := objs[0].Portfolio
		fromFile.Generation = getPortfolio(ns, "fenwick-daily").Generation
		rendered, err := render.RunConfig(fromFile, getRun(ns, name), "")
		Expect(err).NotTo(HaveOccurred())
		b, err := runconfig.Encode(&rendered)
		Expect(err).NotTo(HaveOccurred())
		Expect(string(b)).To(Equal(raw))
		Eventually(phaseOf(ns, name)).Should(Equal(forecastingv1alpha1.PhasePlanning))
		Expect(metav1.IsControlledBy(getRun(ns, name), getPortfolio(ns, "fenwick-daily"))).To(BeTrue())

		succeedSingle(ns, name, stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 4, Units: 6, Series: 410,
			DroppedMembers: []string{"ARIMA", "MSTLARIMA"}, HeldMembers: []string{"MSTLARIMA"}})
		train := getJob(ns, name, stepTrain)
		Expect(*train.Spec.Completions).To(Equal(int32(4)))
		Expect(*train.Spec.CompletionMode).To(Equal(batchv1.IndexedCompletion))
		// min(maxParallel 3, 4 shards left, budget 4).
		Expect(*train.Spec.Parallelism).To(Equal(int32(3)))
		Eventually(phaseOf(ns, name)).Should(Equal(forecastingv1alpha1.PhaseTraining))
		Eventually(func() int32 { return getPortfolio(ns, "fenwick-daily").Status.Backlog.Shards }).Should(BeEquivalentTo(4))
		// The plan's cost verdict reaches the status and the Progressing message.
		Expect(getRun(ns, name).Status.DroppedMembers).To(Equal([]string{"ARIMA", "MSTLARIMA"}))
		Expect(getRun(ns, name).Status.HeldMembers).To(Equal([]string{"MSTLARIMA"}))
		Expect(meta.FindStatusCondition(getRun(ns, name).Status.Conditions, forecastingv1alpha1.RunProgressing).Message).To(
			Equal("training 4 shards (6 units); left out of the design for cost: ARIMA, MSTLARIMA"))

		finishShards(train, []int{0, 1}, nil, shardSummary)
		Eventually(func() string { return getRun(ns, name).Status.Shards.Folded }).Should(Equal("0-1"))
		Eventually(parallelismOf(train)).Should(Equal(int32(2)))
		Eventually(current.scrape).Should(And(
			ContainSubstring(fmt.Sprintf(`almanac_shards_pending{namespace=%q,portfolio="fenwick-daily",run=%q} 2`, ns, name)),
			ContainSubstring(fmt.Sprintf(`almanac_run_parallelism{namespace=%q,portfolio="fenwick-daily",run=%q} 2`, ns, name))))
		finishShards(train, []int{2, 3}, nil, shardSummary)
		// Every shard finished: the backlog is empty and no trainer pod may start.
		Eventually(parallelismOf(train)).Should(Equal(int32(0)))
		completeJob(train)

		Eventually(phaseOf(ns, name)).Should(Equal(forecastingv1alpha1.PhasePublishing))
		succeedSingle(ns, name, stepPublish, summary.Summary{Kind: summary.KindPublish, Manifest: "runs/" + name + "/MANIFEST.json"})
		Eventually(phaseOf(ns, name)).Should(Equal(forecastingv1alpha1.PhaseSucceeded))

		run := getRun(ns, name)
		// Series 100..103, one rejected each (shardSummary): by hand 406 seen, 402 trained.
		Expect(run.Status.Series).To(Equal(forecastingv1alpha1.SeriesCounts{Planned: 410, Total: 406, Trained: 402, Rejected: 4}))
		Expect(run.Status.Shards).To(Equal(forecastingv1alpha1.ShardCounts{Total: 4, Succeeded: 4, Folded: "0-3"}))
		Expect(run.Status.Models).To(Equal([]forecastingv1alpha1.ModelCount{{Model: "ETS", Series: 240}, {Model: "Theta", Series: 162}}))
		// Mean error = error sum / evaluated series (common practice): 4*5/40 and 4*6/40; the
		// geometric means exp(40 ln 0.5 / 40) and exp(40 ln 0.6 / 40) of equal errors are the same.
		Expect(run.Status.Accuracy).To(Equal(&forecastingv1alpha1.AccuracyStatus{
			Metric: "MASE", Expected: "0.5000", Realized: "0.6000", Ratio: "1.200",
			ExpectedGeometric: "0.5000", RealizedGeometric: "0.6000", GeometricRatio: "1.200", GeometricSeries: 40,
			// 4 shards of 50 actuals: 20 and 180 of 200 below the 0.1 and 0.9 quantiles, pinball 40/200,
			// as the levels promised; the hits' pair counts are below the binomial's (ρ < 0: deff 1).
			Calibration: []forecastingv1alpha1.QuantileCalibration{{Level: "0.1", Realized: "0.100", PinballLoss: "0.2000", Expected: "0.100", DesignEffect: "1.00"},
				{Level: "0.9", Realized: "0.900", PinballLoss: "0.2000", Expected: "0.900", DesignEffect: "1.00"}},
			BandCoverage: "0.800", BandLevel: "0.800", ExpectedBandCoverage: "0.800", Bias: "0.0000", CalibrationPoints: 200,
			EvaluatedSeries: 40, EvaluatedPoints: 200, DriftedSeries: 4, Run: name,
		}))
		Expect(conditionOf(run, forecastingv1alpha1.RunDegraded)()).To(Equal("False/AllShardsTrained"))
		for _, c := range run.Status.Conditions {
			Expect(c.ObservedGeneration).To(Equal(run.Generation), c.Type)
		}
		Expect(run.Status.ObservedGeneration).To(Equal(run.Generation))

		fp = getPortfolio(ns, "fenwick-daily")
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioReady)).Should(Equal("True/RunSucceeded"))
		// 1.2 is within the default threshold of 130%; 200 points >= the default 100.
		Expect(conditionOf(fp, forecastingv1alpha1.PortfolioAccuracyDrift)()).To(Equal("False/WithinThreshold"))
		Expect(fp.Status.LastSuccessfulRun).To(Equal(name))
		Expect(fp.Status.Accuracy.Expected).To(Equal("0.5000"))
		Expect(fp.Status.Backlog.Shards).To(BeZero())

		Eventually(eventReasonsFor(ns, name)).Should(ContainElements("Planning", "Training", "Publishing", "Published"))
		Expect(testutil.ToFloat64(current.runsCounter(ns, "fenwick-daily", "succeeded"))).To(Equal(1.0))
		Expect(testutil.ToFloat64(current.expectedGauge(ns, "fenwick-daily", "MASE"))).To(Equal(0.5))
		scraped := current.scrape()
		Expect(scraped).To(ContainSubstring(fmt.Sprintf(`almanac_runs_total{namespace=%q,portfolio="fenwick-daily",result="succeeded"} 1`, ns)))
		Expect(scraped).To(ContainSubstring(fmt.Sprintf(`almanac_accuracy_realized{metric="MASE",namespace=%q,portfolio="fenwick-daily"} 0.6`, ns)))
		Expect(scraped).To(ContainSubstring(fmt.Sprintf(`almanac_run_duration_seconds_count{namespace=%q,portfolio="fenwick-daily",result="succeeded"} 1`, ns)))
		Expect(scraped).NotTo(ContainSubstring(fmt.Sprintf(`almanac_shards_pending{namespace=%q,portfolio="fenwick-daily"`, ns)))
		// The portfolio's conditions, and its counters from 0 so the first failure is an increase.
		Eventually(current.scrape).Should(And(
			ContainSubstring(fmt.Sprintf(`almanac_portfolio_condition{namespace=%q,portfolio="fenwick-daily",reason="RunSucceeded",type="Ready"} 1`, ns)),
			ContainSubstring(fmt.Sprintf(`almanac_portfolio_condition{namespace=%q,portfolio="fenwick-daily",reason="WithinThreshold",type="AccuracyDrift"} 0`, ns)),
			ContainSubstring(fmt.Sprintf(`almanac_runs_total{namespace=%q,portfolio="fenwick-daily",result="failed"} 0`, ns)),
			ContainSubstring(fmt.Sprintf(`almanac_schedule_missed_total{namespace=%q,portfolio="fenwick-daily"} 0`, ns))))

		// kubectl shows date columns relative to the real clock: wait until the schedule time
		// the fake clock ran ahead to has really passed (at most a minute).
		Eventually(func() bool { return time.Now().After(due.Add(time.Second)) }, 70*time.Second, time.Second).Should(BeTrue())
		checkKubectlGet(ns)
	})

	It("publishes with failed shards below the limit and reports them as Degraded", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-degraded", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Sharding.MaxFailedShards = ptr.To[int32](1)
		})
		manualRun(ns, "fenwick-degraded-1", "fenwick-degraded")
		// A manual run is adopted by its portfolio, so history limits and deletion apply to it.
		Eventually(func() bool {
			return metav1.IsControlledBy(getRun(ns, "fenwick-degraded-1"), getPortfolio(ns, "fenwick-degraded"))
		}).Should(BeTrue())
		succeedSingle(ns, "fenwick-degraded-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 3, Series: 300})
		train := getJob(ns, "fenwick-degraded-1", stepTrain)
		Expect(*train.Spec.MaxFailedIndexes).To(Equal(int32(1)))
		finishShards(train, []int{0, 2}, []int{1}, shardSummary)
		failJob(train, batchv1.JobReasonFailedIndexes)
		Eventually(phaseOf(ns, "fenwick-degraded-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		succeedSingle(ns, "fenwick-degraded-1", stepPublish, summary.Summary{Kind: summary.KindPublish, CarriedForward: 2, Missing: 1})
		Eventually(phaseOf(ns, "fenwick-degraded-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))
		run := getRun(ns, "fenwick-degraded-1")
		Expect(conditionOf(run, forecastingv1alpha1.RunDegraded)()).To(Equal("True/ShardsFailed"))
		Expect(meta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunDegraded).Message).To(And(
			ContainSubstring("shards 1 failed"), ContainSubstring("1 units have no forecast")))
		Expect(run.Status.Shards.FailedIndexes).To(Equal("1"))
		Expect(run.Status.Series.CarriedForward).To(BeEquivalentTo(2))
		Expect(run.Status.Series.Trained).To(BeEquivalentTo(99 + 101))
		Eventually(eventReasonsFor(ns, "fenwick-degraded-1")).Should(ContainElement(forecastingv1alpha1.ReasonShardsFailed))
		Expect(testutil.ToFloat64(current.runsCounter(ns, "fenwick-degraded", "degraded"))).To(Equal(1.0))
	})

	It("publishes a run that went without broken input objects and marks it Degraded naming them", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-broken", yearly, nil)
		manualRun(ns, "fenwick-broken-1", "fenwick-broken")
		broken := "1 input object broken, their series carried forward: depot-brill.csv (at plan: line 1: header column 1 holds NUL bytes)"
		succeedSingle(ns, "fenwick-broken-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 1, Series: 100, Broken: broken})
		train := getJob(ns, "fenwick-broken-1", stepTrain)
		finishShards(train, []int{0}, nil, shardSummary)
		completeJob(train)
		Eventually(phaseOf(ns, "fenwick-broken-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		succeedSingle(ns, "fenwick-broken-1", stepPublish, summary.Summary{Kind: summary.KindPublish, CarriedForward: 1, Broken: broken})
		Eventually(phaseOf(ns, "fenwick-broken-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))
		run := getRun(ns, "fenwick-broken-1")
		Expect(conditionOf(run, forecastingv1alpha1.RunDegraded)()).To(Equal("True/BrokenInput"))
		Expect(meta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunDegraded).Message).To(ContainSubstring("depot-brill.csv (at plan: "))
	})

	It("fails the run with PublishRefused when the publish guard refuses, and says so on the portfolio", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-guard", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Publish.MinPreviousPercent = ptr.To[int32](90)
		})
		manualRun(ns, "fenwick-guard-1", "fenwick-guard")
		succeedSingle(ns, "fenwick-guard-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 1, Series: 359})
		// The apiserver defaults the rest of spec.publish; all five reach the trainer.
		Expect(configOf(ns, "fenwick-guard-1")["publish"]).To(Equal(map[string]any{
			"minForecastPercent": 80.0, "minPreviousPercent": 90.0, "maxCarriedForwardPercent": 50.0, "maxCarriedRuns": 3.0,
			"maxStalePeriods": 0.0}))
		train := getJob(ns, "fenwick-guard-1", stepTrain)
		finishShards(train, []int{0}, nil, func(int) summary.Summary { return summary.Summary{Series: 359, Rejected: 359} })
		completeJob(train)
		Eventually(phaseOf(ns, "fenwick-guard-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		publish := getJob(ns, "fenwick-guard-1", stepPublish)
		refusal := "publish refused, latest.json left as it was: 0 of 359 planned series forecast, the guard needs 80% (publish.minForecastPercent)"
		runPod(publish, 0, 0, 5, message(summary.Summary{Kind: summary.KindPublish, Refused: true, Units: 1, Series: 359, Rejected: 359, Error: refusal}))
		failJob(publish, batchv1.JobReasonPodFailurePolicy)
		Eventually(phaseOf(ns, "fenwick-guard-1")).Should(Equal(forecastingv1alpha1.PhaseFailed))
		c := meta.FindStatusCondition(getRun(ns, "fenwick-guard-1").Status.Conditions, forecastingv1alpha1.RunSucceeded)
		Expect(c.Reason).To(Equal(forecastingv1alpha1.ReasonPublishRefused))
		Expect(c.Message).To(Equal(refusal))
		Eventually(eventReasonsFor(ns, "fenwick-guard-1")).Should(ContainElement(forecastingv1alpha1.ReasonPublishRefused))
		Eventually(conditionOf(getPortfolio(ns, "fenwick-guard"), forecastingv1alpha1.PortfolioReady)).Should(Equal("False/RunFailed"))
		Expect(meta.FindStatusCondition(getPortfolio(ns, "fenwick-guard").Status.Conditions, forecastingv1alpha1.PortfolioReady).Message).To(
			ContainSubstring("(PublishRefused): " + refusal))
		Expect(getPortfolio(ns, "fenwick-guard").Status.LastSuccessfulRun).To(BeEmpty())
	})

	It("fails the run when more shards fail than allowed, and never publishes", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-strict", yearly, nil)
		manualRun(ns, "fenwick-strict-1", "fenwick-strict")
		succeedSingle(ns, "fenwick-strict-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 2})
		train := getJob(ns, "fenwick-strict-1", stepTrain)
		finishShards(train, []int{0}, []int{1}, shardSummary)
		failJob(train, batchv1.JobReasonMaxFailedIndexesExceeded)
		Eventually(phaseOf(ns, "fenwick-strict-1")).Should(Equal(forecastingv1alpha1.PhaseFailed))
		run := getRun(ns, "fenwick-strict-1")
		c := meta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunSucceeded)
		Expect(c.Reason).To(Equal(forecastingv1alpha1.ReasonTooManyFailures))
		Expect(c.Message).To(ContainSubstring("1 shards failed (indexes 1), more than maxFailedShards 0"))
		Consistently(func() bool {
			err := k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: jobName("fenwick-strict-1", stepPublish)}, &batchv1.Job{})
			return apierrors.IsNotFound(err)
		}, 2*time.Second).Should(BeTrue())
		Eventually(conditionOf(getPortfolio(ns, "fenwick-strict"), forecastingv1alpha1.PortfolioReady)).Should(Equal("False/RunFailed"))
	})

	It("starts one drift run when realized accuracy slips past the threshold and the action is Retrain", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-drift", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Drift = forecastingv1alpha1.DriftSpec{ThresholdPercent: 110, MinEvaluatedPoints: 100,
				Action: forecastingv1alpha1.DriftRetrain, CooldownSeconds: ptr.To[int64](3600)}
		})
		manualRun(ns, "fenwick-drift-1", "fenwick-drift")
		succeedSingle(ns, "fenwick-drift-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 2})
		train := getJob(ns, "fenwick-drift-1", stepTrain)
		// Two shards of shardSummary: realized 12 / expected 10 = 1.2 > 1.10, on 100 points.
		finishShards(train, []int{0, 1}, nil, shardSummary)
		completeJob(train)
		succeedSingle(ns, "fenwick-drift-1", stepPublish, summary.Summary{Kind: summary.KindPublish})
		fp := getPortfolio(ns, "fenwick-drift")
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioAccuracyDrift)).Should(Equal("True/AboveThreshold"))
		driftRuns := runsIn(ns, func(r *forecastingv1alpha1.ForecastRun) bool {
			return r.Spec.Trigger == forecastingv1alpha1.TriggerDrift
		})
		Eventually(driftRuns).Should(HaveLen(1))
		Expect(driftRuns()[0]).To(Equal(fmt.Sprintf("fenwick-drift-%d", fakeClock.Now().Unix()/60)))
		Expect(getPortfolio(ns, "fenwick-drift").Status.LastDriftRunTime).NotTo(BeNil())
		Eventually(eventReasonsFor(ns, "fenwick-drift")).Should(ContainElements(forecastingv1alpha1.ReasonAboveThreshold, forecastingv1alpha1.ReasonRunCreated))
		Consistently(driftRuns, 2*time.Second).Should(HaveLen(1))
	})

	It("calls calibration drift when a member's bands are overconfident", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-bands", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Drift.CalibrationFalseAlarmPercent = 1
		})
		manualRun(ns, "fenwick-bands-1", "fenwick-bands")
		succeedSingle(ns, "fenwick-bands-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 2})
		train := getJob(ns, "fenwick-bands-1", stepTrain)
		// Accuracy within the threshold (shardSummary: ratio 1.2 < 1.3), but the calibration the
		// trainer's own pipeline.Calibrate measures on Gaussian data whose published 80% band is a
		// third as wide as the noise's (calibration_test.go's construction): about 33% coverage.
		cal := gaussianShards(GinkgoT(), 2, 50, 1.0/3, 0, 21)
		finishShards(train, []int{0, 1}, nil, func(i int) summary.Summary {
			s := shardSummary(i)
			s.Calibration = &cal[i]
			return s
		})
		completeJob(train)
		succeedSingle(ns, "fenwick-bands-1", stepPublish, summary.Summary{Kind: summary.KindPublish})
		Eventually(phaseOf(ns, "fenwick-bands-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))
		fp := getPortfolio(ns, "fenwick-bands")
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioAccuracyDrift)).Should(Equal("True/CalibrationOff"))
		run := getRun(ns, "fenwick-bands-1")
		Expect(run.Status.CalibrationSums.Points).To(BeEquivalentTo(600))
		Expect(run.Status.Accuracy.BandLevel).To(Equal("0.800"))
		cov, err := strconv.ParseFloat(run.Status.Accuracy.BandCoverage, 64)
		Expect(err).NotTo(HaveOccurred())
		Expect(cov).To(BeNumerically("<", 0.5))
		Eventually(eventReasonsFor(ns, "fenwick-bands")).Should(ContainElement(forecastingv1alpha1.ReasonCalibrationOff))
	})

	It("judges coverage against what the backtest promised", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-promise", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Drift.CalibrationFalseAlarmPercent = 1
		})
		manualRun(ns, "fenwick-promise-1", "fenwick-promise")
		succeedSingle(ns, "fenwick-promise-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 2})
		train := getJob(ns, "fenwick-promise-1", stepTrain)
		// The same overconfident member (band a third as wide as the noise's), but its own
		// backtest showed it: every series promises shares 8, 12 and 16 of 24 backtest points
		// (0.333, 0.5, 0.667). Judged against that promise (the default), it is not off.
		promised := &tables.Calibration{Levels: []float64{0.1, 0.5, 0.9}, Points: 24, Below: []int{8, 12, 16}, Pinball: []float64{0.2, 0.4, 0.2}}
		cal := promisedShards(GinkgoT(), 2, 50, 1.0/3, 0, 23, promised)
		finishShards(train, []int{0, 1}, nil, func(i int) summary.Summary {
			s := shardSummary(i)
			s.Calibration = &cal[i]
			return s
		})
		completeJob(train)
		succeedSingle(ns, "fenwick-promise-1", stepPublish, summary.Summary{Kind: summary.KindPublish})
		Eventually(phaseOf(ns, "fenwick-promise-1")).Should(Equal(forecastingv1alpha1.PhaseSucceeded))
		fp := getPortfolio(ns, "fenwick-promise")
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioAccuracyDrift)).Should(HavePrefix("False/"))
		run := getRun(ns, "fenwick-promise-1")
		Expect(run.Status.Accuracy.ExpectedBandCoverage).To(Equal("0.333"))
		Expect(run.Status.Accuracy.BacktestSeries).To(BeEquivalentTo(100))
		Expect(run.Status.Accuracy.Calibration[0].Expected).To(Equal("0.333"))
		// Against the nominal levels the same sums are off.
		Eventually(func() error {
			fp := getPortfolio(ns, "fenwick-promise")
			fp.Spec.Drift.CalibrationExpectation = forecastingv1alpha1.ExpectationNominal
			return k8sClient.Update(ctx(), fp)
		}).Should(Succeed())
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioAccuracyDrift)).Should(Equal("True/CalibrationOff"))
	})

	It("counts each shard once across a manager restart mid-run", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-restart", yearly, nil)
		manualRun(ns, "fenwick-restart-1", "fenwick-restart")
		succeedSingle(ns, "fenwick-restart-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 4})
		train := getJob(ns, "fenwick-restart-1", stepTrain)
		finishShards(train, []int{0, 1}, nil, shardSummary)
		Eventually(func() string { return getRun(ns, "fenwick-restart-1").Status.Shards.Folded }).Should(Equal("0-1"))
		Expect(getRun(ns, "fenwick-restart-1").Status.Series.Total).To(BeEquivalentTo(201))

		current.stop()
		finishShards(train, []int{2, 3}, nil, shardSummary)
		completeJob(train)
		current = startManager(suiteBudget)

		Eventually(phaseOf(ns, "fenwick-restart-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
		run := getRun(ns, "fenwick-restart-1")
		Expect(run.Status.Series.Total).To(BeEquivalentTo(406))
		Expect(run.Status.Shards.Succeeded).To(BeEquivalentTo(4))
		Expect(run.Status.AccuracySums.Evaluated).To(BeEquivalentTo(40))
		Expect(run.Status.AccuracySums.ExpectedSum).To(Equal("20"))
	})

	It("shares the shard budget among active runs by weight and gives it back when a run ends", func() {
		ns := newNamespace()
		createSecret(ns)
		for _, name := range []string{"fenwick-north", "fenwick-south"} {
			testPortfolio(ns, name, yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Sharding.MaxParallel = 4 })
			manualRun(ns, name+"-1", name)
		}
		succeedSingle(ns, "fenwick-north-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 8})
		north := getJob(ns, "fenwick-north-1", stepTrain)
		Expect(*north.Spec.Parallelism).To(Equal(int32(suiteBudget)))
		succeedSingle(ns, "fenwick-south-1", stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 8})
		south := getJob(ns, "fenwick-south-1", stepTrain)
		Expect(*south.Spec.Parallelism).To(Equal(int32(2)))
		Eventually(parallelismOf(north)).Should(Equal(int32(2)))
		finishShards(north, []int{0, 1, 2, 3, 4, 5, 6, 7}, nil, shardSummary)
		completeJob(north)
		Eventually(parallelismOf(south)).Should(Equal(int32(suiteBudget)))
		Eventually(func() int32 { return getRun(ns, "fenwick-south-1").Status.Parallelism }).Should(Equal(int32(suiteBudget)))
		// Leave no active train Job behind for the other tests' budget.
		finishShards(south, []int{0, 1, 2, 3, 4, 5, 6, 7}, nil, shardSummary)
		completeJob(south)
		Eventually(phaseOf(ns, "fenwick-south-1")).Should(Equal(forecastingv1alpha1.PhasePublishing))
	})
})

var _ = Describe("ForecastPortfolio", func() {

	It("starts a scheduled run named after its schedule time", func() {
		ns := newNamespace()
		createSecret(ns)
		fp := testPortfolio(ns, "fenwick-five", "*/5 * * * *", nil)
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioStalled)).Should(Equal("False/SpecValid"))
		due := dueAfter(fp, 5*time.Minute)
		poke(ns, fp.Name)
		Eventually(phaseOf(ns, runName(fp.Name, due))).Should(Equal(forecastingv1alpha1.PhasePlanning))
		run := getRun(ns, runName(fp.Name, due))
		Expect(run.Spec.Trigger).To(Equal(forecastingv1alpha1.TriggerSchedule))
		Expect(run.Spec.ScheduledTime.Time).To(BeTemporally("==", due))
		Eventually(func() *metav1.Time { return getPortfolio(ns, fp.Name).Status.LastScheduleTime }).ShouldNot(BeNil())
		fp = getPortfolio(ns, fp.Name)
		Expect(fp.Status.LastScheduleTime.Time).To(BeTemporally("==", due))
		Expect(fp.Status.NextScheduleTime.Time).To(BeTemporally("==", due.Add(5*time.Minute)))
		Expect(fp.Status.Active).To(ConsistOf(corev1.LocalObjectReference{Name: run.Name}))
		Expect(conditionOf(fp, forecastingv1alpha1.PortfolioReconciling)()).To(Equal("True/RunActive"))
	})

	It("skips a due time while a run is active under Forbid, and starts it once the run ends", func() {
		ns := newNamespace()
		createSecret(ns)
		fp := testPortfolio(ns, "fenwick-forbid", "*/5 * * * *", nil)
		manualRun(ns, "fenwick-forbid-manual", fp.Name)
		Eventually(phaseOf(ns, "fenwick-forbid-manual")).Should(Equal(forecastingv1alpha1.PhasePlanning))
		due := dueAfter(fp, 5*time.Minute)
		poke(ns, fp.Name)
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioReconciling)).Should(Equal("True/SkippedForbidden"))
		Eventually(eventReasonsFor(ns, fp.Name)).Should(ContainElement(forecastingv1alpha1.ReasonSkippedForbidden))
		Consistently(func() bool {
			return apierrors.IsNotFound(k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: runName(fp.Name, due)}, &forecastingv1alpha1.ForecastRun{}))
		}, 2*time.Second).Should(BeTrue())
		failJob(getJob(ns, "fenwick-forbid-manual", stepPlan), batchv1.JobReasonBackoffLimitExceeded)
		Eventually(phaseOf(ns, "fenwick-forbid-manual")).Should(Equal(forecastingv1alpha1.PhaseFailed))
		Eventually(phaseOf(ns, runName(fp.Name, due))).Should(Equal(forecastingv1alpha1.PhasePlanning))
	})

	It("stops the active run under Replace and then starts the due one", func() {
		ns := newNamespace()
		createSecret(ns)
		fp := testPortfolio(ns, "fenwick-replace", "*/5 * * * *", func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.ConcurrencyPolicy = forecastingv1alpha1.ReplaceConcurrent
		})
		manualRun(ns, "fenwick-replace-manual", fp.Name)
		getJob(ns, "fenwick-replace-manual", stepPlan)
		due := dueAfter(fp, 5*time.Minute)
		poke(ns, fp.Name)
		Eventually(phaseOf(ns, "fenwick-replace-manual")).Should(Equal(forecastingv1alpha1.PhaseFailed))
		old := getRun(ns, "fenwick-replace-manual")
		Expect(meta.FindStatusCondition(old.Status.Conditions, forecastingv1alpha1.RunSucceeded).Reason).To(Equal(forecastingv1alpha1.ReasonReplaced))
		Expect(old.Annotations[AnnotationReplacedBy]).To(ContainSubstring("schedule time"))
		Eventually(func() bool {
			var job batchv1.Job
			err := k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: jobName(old.Name, stepPlan)}, &job)
			return apierrors.IsNotFound(err) || job.DeletionTimestamp != nil
		}).Should(BeTrue())
		Eventually(phaseOf(ns, runName(fp.Name, due))).Should(Equal(forecastingv1alpha1.PhasePlanning))
	})

	It("starts nothing while suspended", func() {
		ns := newNamespace()
		createSecret(ns)
		fp := testPortfolio(ns, "fenwick-suspended", "*/5 * * * *", func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Suspend = ptr.To(true) })
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioReconciling)).Should(Equal("False/Suspended"))
		dueAfter(fp, 5*time.Minute)
		poke(ns, fp.Name)
		Consistently(func() int {
			var list forecastingv1alpha1.ForecastRunList
			Expect(k8sClient.List(ctx(), &list, client.InNamespace(ns))).To(Succeed())
			return len(list.Items)
		}, 2*time.Second).Should(BeZero())
		Expect(getPortfolio(ns, fp.Name).Status.NextScheduleTime).To(BeNil())
	})

	It("prunes finished runs beyond the history limits, oldest first", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-history", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.SuccessfulRunsHistoryLimit = ptr.To[int32](1)
			fp.Spec.FailedRunsHistoryLimit = ptr.To[int32](1)
		})
		t0 := time.Now().Add(-time.Hour)
		for i, outcome := range []metav1.ConditionStatus{"True", "False", "True", "False"} {
			name := fmt.Sprintf("fenwick-history-%d", i)
			manualRun(ns, name, "fenwick-history")
			forceFinish(ns, name, outcome, t0.Add(time.Duration(i)*time.Minute))
		}
		Eventually(runsIn(ns, func(r *forecastingv1alpha1.ForecastRun) bool { return r.DeletionTimestamp == nil })).
			Should(ConsistOf("fenwick-history-2", "fenwick-history-3"))
	})

	It("reports invalid references as Stalled with a message naming the field", func() {
		ns := newNamespace()
		zone := testPortfolio(ns, "fenwick-badzone", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.TimeZone = ptr.To("Mars/Olympus_Mons") })
		Eventually(conditionOf(zone, forecastingv1alpha1.PortfolioStalled)).Should(Equal("True/InvalidTimeZone"))
		Expect(meta.FindStatusCondition(zone.Status.Conditions, forecastingv1alpha1.PortfolioStalled).Message).To(ContainSubstring(`spec.timeZone "Mars/Olympus_Mons"`))

		cron := testPortfolio(ns, "fenwick-badcron", "0 25 * * *", nil)
		Eventually(conditionOf(cron, forecastingv1alpha1.PortfolioStalled)).Should(Equal("True/InvalidSchedule"))

		manualRun(ns, "fenwick-orphan-1", "fenwick-nowhere")
		orphan := &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "fenwick-orphan-1"}}
		Eventually(conditionOf(orphan, forecastingv1alpha1.RunProgressing)).Should(Equal("False/PortfolioNotFound"))
		Expect(meta.FindStatusCondition(orphan.Status.Conditions, forecastingv1alpha1.RunProgressing).Message).
			To(ContainSubstring("spec.portfolioName: ForecastPortfolio " + ns + "/fenwick-nowhere not found"))
		Expect(orphan.Status.Phase).To(Equal(forecastingv1alpha1.PhasePending))
	})
})

// runsIn is a poller for the names of the runs in ns that keep says to keep.
func runsIn(ns string, keep func(*forecastingv1alpha1.ForecastRun) bool) func() []string {
	return func() []string {
		var list forecastingv1alpha1.ForecastRunList
		Expect(k8sClient.List(ctx(), &list, client.InNamespace(ns))).To(Succeed())
		var names []string
		for i := range list.Items {
			if keep(&list.Items[i]) {
				names = append(names, list.Items[i].Name)
			}
		}
		return names
	}
}

// forceFinish sets a run's Succeeded condition directly (the run controller then leaves it
// alone), retrying while the controller writes the same status.
func forceFinish(ns, name string, status metav1.ConditionStatus, done time.Time) {
	EventuallyWithOffset(1, func() error {
		run := getRun(ns, name)
		meta.SetStatusCondition(&run.Status.Conditions, metav1.Condition{Type: forecastingv1alpha1.RunSucceeded, Status: status, Reason: "SetByTest", Message: "set by the test"})
		run.Status.CompletionTime = &metav1.Time{Time: done}
		return k8sClient.Status().Update(ctx(), run)
	}, 10*time.Second, 50*time.Millisecond).Should(Succeed())
}

// runsCounter and expectedGauge read this manager's metrics.
func (tm *testManager) runsCounter(ns, portfolio, result string) prometheus.Collector {
	return tm.metrics.runs.WithLabelValues(ns, portfolio, result)
}

func (tm *testManager) expectedGauge(ns, portfolio, metric string) prometheus.Collector {
	return tm.metrics.expected.WithLabelValues(ns, portfolio, metric)
}

var _ = Describe("Pod Security", func() {
	It("admits the trainer pods in a namespace that enforces the restricted standard", func() {
		ns := newNamespace()
		// A pod that breaks the standard is refused, so the admission really runs here.
		bad := &corev1.Pod{
			ObjectMeta: metav1.ObjectMeta{Name: "privileged", Namespace: ns},
			Spec:       corev1.PodSpec{Containers: []corev1.Container{{Name: "c", Image: "registry.example/tool:1"}}},
		}
		err := k8sClient.Create(ctx(), bad)
		Expect(err).To(HaveOccurred())
		Expect(err.Error()).To(ContainSubstring("violates PodSecurity"))
		// The trainer pods of all three steps are admitted.
		fp, run := fenwickPortfolio(), fenwickRun("fenwick-pss-1")
		fp.Namespace, run.Namespace = ns, ns
		for _, s := range []step{stepPlan, stepTrain, stepPublish} {
			job := buildJob(fp, run, s, jobParams{Shards: 2, Parallelism: 1})
			pod := &corev1.Pod{ObjectMeta: metav1.ObjectMeta{Name: job.Name, Namespace: ns}, Spec: job.Spec.Template.Spec}
			Expect(k8sClient.Create(ctx(), pod)).To(Succeed(), string(s))
		}
	})
})

var _ = Describe("Manager RBAC", func() {
	It("runs the suite's managers with only the generated role: no Secret can be read, not even its metadata", func() {
		c, err := client.New(managerCfg, client.Options{Scheme: scheme})
		Expect(err).NotTo(HaveOccurred())
		ns := newNamespace()
		createSecret(ns)
		var meta metav1.PartialObjectMetadata
		meta.SetGroupVersionKind(corev1.SchemeGroupVersion.WithKind("Secret"))
		Expect(apierrors.IsForbidden(c.Get(ctx(), types.NamespacedName{Namespace: ns, Name: "fenwick-s3"}, &meta))).To(BeTrue())
		Expect(apierrors.IsForbidden(c.List(ctx(), &corev1.SecretList{}, client.InNamespace(ns)))).To(BeTrue())
		Expect(apierrors.IsForbidden(c.Create(ctx(), &corev1.Pod{
			ObjectMeta: metav1.ObjectMeta{Name: "x", Namespace: ns},
			Spec:       corev1.PodSpec{Containers: []corev1.Container{{Name: "c", Image: "i"}}},
		}))).To(BeTrue())
	})
})
