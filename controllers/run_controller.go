package controllers

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/equality"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/utils/clock"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/controller/controllerutil"
	"sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"
	"sigs.k8s.io/controller-runtime/pkg/recorder"

	"almanac.dev/almanac/api/render"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/summary"
)

// RunReconciler drives a ForecastRun through its steps: ConfigMap, Job plan, Indexed Job train,
// Job reconcile (only when the plan asks for it), Job publish. It folds each finished shard's termination-message summary into the run status
// exactly once and shares the manager's budget of concurrent shards among all active runs.
type RunReconciler struct {
	client.Client
	// APIReader reads around the cache: pods that the cache has not seen yet.
	APIReader client.Reader
	Scheme    *runtime.Scheme
	Recorder  recorder.EventRecorder
	Clock     clock.PassiveClock
	Metrics   *Metrics
	// MaxConcurrentShards is the manager's budget of train pods across all active runs
	// (--max-concurrent-shards); 0 or less means unlimited.
	MaxConcurrentShards int32
	// Images is the install's allowlist of trainer images (empty: any).
	Images ImageAllowlist
	// Logs reads the running train pods' progress lines (nil: progress shows folded shards only).
	Logs PodLogs
	// ProgressInterval is how often a training run is requeued to read them (0: the default).
	ProgressInterval time.Duration
}

// runEvent is an Event to emit once the status write succeeded.
type runEvent struct{ kind, reason, note string }

// runWork is one reconcile's outcome for a run, applied by Reconcile.
type runWork struct {
	status  *forecastingv1alpha1.ForecastRunStatus
	events  []runEvent
	requeue time.Duration
}

func (w *runWork) event(kind, reason, format string, args ...any) {
	w.events = append(w.events, runEvent{kind, reason, fmt.Sprintf(format, args...)})
}

// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastruns,verbs=get;list;watch;update;patch
// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastruns/status,verbs=get;update;patch
// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastruns/finalizers,verbs=update
// +kubebuilder:rbac:groups=batch,resources=jobs,verbs=get;list;watch;create;patch;delete
// +kubebuilder:rbac:groups="",resources=configmaps,verbs=get;list;watch;create
// +kubebuilder:rbac:groups="",resources=pods,verbs=get;list;watch
// +kubebuilder:rbac:groups="",resources=pods/log,verbs=get
// +kubebuilder:rbac:groups=events.k8s.io,resources=events,verbs=create;patch

// Reconcile advances one run by as many steps as the cluster allows and writes its status once.
func (r *RunReconciler) Reconcile(ctx context.Context, req reconcile.Request) (reconcile.Result, error) {
	var run forecastingv1alpha1.ForecastRun
	if err := r.Get(ctx, req.NamespacedName, &run); err != nil {
		if apierrors.IsNotFound(err) {
			r.Metrics.forgetRun(req.Namespace, req.Name)
		}
		return reconcile.Result{}, client.IgnoreNotFound(err)
	}
	if runFinished(&run.Status) {
		return reconcile.Result{}, nil
	}
	w := &runWork{status: run.Status.DeepCopy()}
	err := r.advance(ctx, &run, w)
	w.status.Phase = runPhase(w.status)
	if !equality.Semantic.DeepEqual(&run.Status, w.status) {
		before := run.Status.Phase
		run.Status = *w.status
		if uerr := r.Status().Update(ctx, &run); uerr != nil {
			return reconcile.Result{}, fmt.Errorf("update status of run %s/%s: %w", run.Namespace, run.Name, uerr)
		}
		if before != run.Status.Phase {
			r.phaseChanged(&run)
		}
	}
	for _, e := range w.events {
		r.Recorder.Eventf(&run, nil, e.kind, e.reason, e.reason, "%s", e.note)
	}
	if err != nil {
		return reconcile.Result{}, err
	}
	return reconcile.Result{RequeueAfter: w.requeue}, nil
}

// phaseChanged records metrics when a run reached a final phase (the Events of the change are
// emitted by Reconcile).
func (r *RunReconciler) phaseChanged(run *forecastingv1alpha1.ForecastRun) {
	st := &run.Status
	if !runFinished(st) {
		return
	}
	result := "failed"
	if st.Phase == forecastingv1alpha1.PhaseSucceeded {
		result = "succeeded"
		if meta.IsStatusConditionTrue(st.Conditions, forecastingv1alpha1.RunDegraded) {
			result = "degraded"
		}
	}
	seconds := -1.0
	if st.StartTime != nil && st.CompletionTime != nil {
		seconds = st.CompletionTime.Sub(st.StartTime.Time).Seconds()
	}
	r.Metrics.runEnded(run, result, seconds)
}

// advance does the run's next steps; it mutates w.status and returns only API errors.
func (r *RunReconciler) advance(ctx context.Context, run *forecastingv1alpha1.ForecastRun, w *runWork) error {
	st := w.status
	now := r.Clock.Now()
	st.ObservedGeneration = run.Generation
	if st.StartTime == nil {
		st.StartTime = &metav1.Time{Time: now}
	}
	if by := run.Annotations[AnnotationReplacedBy]; by != "" {
		if err := r.deleteJobs(ctx, run); err != nil {
			return err
		}
		r.finish(run, w, false, forecastingv1alpha1.ReasonReplaced, fmt.Sprintf("replaced: %s is due (concurrencyPolicy Replace); the run's Jobs were deleted", by))
		return nil
	}
	if len(run.Name) > maxRunNameLength {
		r.finish(run, w, false, forecastingv1alpha1.ReasonNameTooLong,
			fmt.Sprintf("run name %q has %d characters; at most %d leave room for its Job names", run.Name, len(run.Name), maxRunNameLength))
		return nil
	}
	var fp forecastingv1alpha1.ForecastPortfolio
	if err := r.Get(ctx, types.NamespacedName{Namespace: run.Namespace, Name: run.Spec.PortfolioName}, &fp); err != nil {
		if !apierrors.IsNotFound(err) {
			return err
		}
		r.waiting(run, w, forecastingv1alpha1.ReasonPortfolioNotFound,
			fmt.Sprintf("spec.portfolioName: ForecastPortfolio %s/%s not found", run.Namespace, run.Spec.PortfolioName))
		return nil
	}
	if err := r.adopt(ctx, run, &fp); err != nil {
		return err
	}
	if msg := r.Images.problem(fp.Spec.Trainer.Image); msg != "" {
		// Whatever step the run is in, no more pods of this image: the install refuses it.
		if err := r.deleteJobs(ctx, run); err != nil {
			return err
		}
		r.finish(run, w, false, forecastingv1alpha1.ReasonImageNotAllowed, msg)
		return nil
	}
	if progressStep(st) != "" {
		if err := r.checkPodConfig(ctx, run, &fp, w); err != nil {
			return err
		}
	}
	switch progressStep(st) {
	case "":
		return r.start(ctx, run, &fp, w)
	case stepPlan:
		return r.plan(ctx, run, &fp, w)
	case stepTrain:
		return r.train(ctx, run, &fp, w)
	case stepReconcile:
		return r.reconcileStep(ctx, run, &fp, w)
	default:
		return r.publish(ctx, run, &fp, w)
	}
}

// adopt makes the portfolio the run's controller owner (manual runs are created without one),
// so deleting the portfolio deletes its runs and history limits apply to them.
func (r *RunReconciler) adopt(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio) error {
	if metav1.GetControllerOf(run) != nil {
		return nil
	}
	if err := controllerutil.SetControllerReference(fp, run, r.Scheme); err != nil {
		return err
	}
	if run.Labels == nil {
		run.Labels = map[string]string{}
	}
	run.Labels[LabelPortfolio] = fp.Name
	status := run.Status
	if err := r.Update(ctx, run); err != nil {
		return fmt.Errorf("adopt run %s/%s: %w", run.Namespace, run.Name, err)
	}
	run.Status = status
	return nil
}

// previousRun is the newest succeeded run of run's portfolio other than run, read from the
// runs themselves: the portfolio's status.lastSuccessfulRun can lag behind in the cache (a
// drift run created in the same reconcile that records the run before it saw the older name).
func (r *RunReconciler) previousRun(ctx context.Context, run *forecastingv1alpha1.ForecastRun) (string, error) {
	var list forecastingv1alpha1.ForecastRunList
	if err := r.List(ctx, &list, client.InNamespace(run.Namespace),
		client.MatchingFields{IndexRunPortfolio: run.Spec.PortfolioName}); err != nil {
		return "", fmt.Errorf("list runs of portfolio %s: %w", run.Spec.PortfolioName, err)
	}
	_, succeeded, _ := sortRuns(list.Items)
	for i := len(succeeded) - 1; i >= 0; i-- {
		if succeeded[i].Name != run.Name {
			return succeeded[i].Name, nil
		}
	}
	return "", nil
}

// start renders the ConfigMap and creates the plan Job (a missing credentials Secret shows on
// the plan pod: checkPodConfig).
func (r *RunReconciler) start(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	st := w.status
	var cm corev1.ConfigMap
	err := r.Get(ctx, types.NamespacedName{Namespace: run.Namespace, Name: configMapName(run.Name)}, &cm)
	switch {
	case apierrors.IsNotFound(err):
		previous, perr := r.previousRun(ctx, run)
		if perr != nil {
			return perr
		}
		cfg, rerr := render.RunConfig(fp, run, previous)
		if rerr != nil {
			r.finish(run, w, false, forecastingv1alpha1.ReasonInvalidConfig, rerr.Error())
			return nil
		}
		b, merr := runconfig.Encode(&cfg)
		if merr != nil {
			r.finish(run, w, false, forecastingv1alpha1.ReasonInvalidConfig, fmt.Sprintf("encode the run configuration: %v", merr))
			return nil
		}
		if err := r.createOwned(ctx, run, buildConfigMap(run, b)); err != nil {
			return err
		}
		st.PortfolioGeneration = fp.Generation
	case err != nil:
		return err
	}
	st.ConfigMapName = configMapName(run.Name)
	st.Output = strings.TrimSuffix(fp.Spec.Output.URI, "/") + "/runs/" + run.Name + "/"
	if err := r.createStep(ctx, run, fp, stepPlan, jobParams{}); err != nil {
		return err
	}
	r.progress(run, w, forecastingv1alpha1.ReasonPlanning, "planning: cutting the input into shards")
	return nil
}

// plan waits for the plan Job and, when it succeeded, creates the train Job with completions
// equal to the plan's shard count.
func (r *RunReconciler) plan(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	job, err := r.stepJob(ctx, run, fp, stepPlan, jobParams{})
	if err != nil || job == nil {
		return err
	}
	outcome, reason, message := jobResult(job)
	if outcome == jobRunning {
		return nil
	}
	s, ok, serr := r.readStep(ctx, run, stepPlan, summary.KindPlan)
	switch {
	case outcome == jobFailed:
		r.finish(run, w, false, forecastingv1alpha1.ReasonPlanFailed, stepFailure("plan", reason, message, s, serr))
		return nil
	case serr != nil || !ok:
		r.finish(run, w, false, forecastingv1alpha1.ReasonPlanFailed, fmt.Sprintf("plan succeeded but its summary is unusable: %v", orMissing(serr)))
		return nil
	case s.Shards < 1:
		r.finish(run, w, false, forecastingv1alpha1.ReasonPlanFailed, "plan cut no shards: the source holds no series")
		return nil
	}
	st := w.status
	st.Shards.Total = int32(s.Shards)
	st.Series.Planned = int64(s.Series)
	if s.Reconcile {
		st.Hierarchy = &forecastingv1alpha1.HierarchyStatus{ReconcileStep: true}
	}
	st.DroppedMembers, st.HeldMembers = s.DroppedMembers, s.HeldMembers
	share, err := r.rebalance(ctx, run, int32(s.Shards), fp)
	if err != nil {
		return err
	}
	st.Parallelism = share
	if err := r.createStep(ctx, run, fp, stepTrain, jobParams{Shards: int32(s.Shards), Parallelism: share}); err != nil {
		return err
	}
	r.progress(run, w, forecastingv1alpha1.ReasonTraining, fmt.Sprintf("training %d shards (%d units)%s", s.Shards, s.Units, droppedText(s.DroppedMembers)))
	r.Metrics.runProgress(run, st.Shards.Total, share)
	return nil
}

// train folds finished shards, keeps the parallelism at the run's share, and when the train
// Job has ended either starts the next step (failures within maxFailedShards: reconcile when
// the plan asked for it, else publish) or fails the run.
func (r *RunReconciler) train(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	st := w.status
	job, err := r.stepJob(ctx, run, fp, stepTrain, jobParams{Shards: st.Shards.Total, Parallelism: 0})
	if err != nil || job == nil {
		return err
	}
	outcome, reason, message := jobResult(job)
	if err := r.fold(ctx, run, job, w, outcome != jobRunning); err != nil {
		return err
	}
	st.Shards.Active = job.Status.Active
	share, err := r.rebalance(ctx, run, 0, nil)
	if err != nil {
		return err
	}
	st.Parallelism = share
	r.Metrics.runProgress(run, st.Shards.Total-st.Shards.Succeeded-st.Shards.Failed, share)
	if outcome == jobRunning {
		return r.trainProgress(ctx, run, fp, job, w)
	}
	r.trainEnded(run, job, w)
	st.Shards.Active, st.Parallelism = 0, 0
	allowed := ptr.Deref(job.Spec.MaxFailedIndexes, 0)
	switch {
	case outcome == jobFailed && reason == string(batchv1.JobReasonDeadlineExceeded):
		r.finish(run, w, false, forecastingv1alpha1.ReasonDeadlineExceeded, fmt.Sprintf("train Job %s: %s", job.Name, message))
		return nil
	case st.Shards.Failed > allowed || (outcome == jobFailed && st.Shards.Failed == 0):
		r.finish(run, w, false, forecastingv1alpha1.ReasonTooManyFailures,
			fmt.Sprintf("%d shards failed (indexes %s), more than maxFailedShards %d; train Job %s: %s %s",
				st.Shards.Failed, orNone(st.Shards.FailedIndexes), allowed, job.Name, reason, message))
		return nil
	}
	if st.Shards.Failed > 0 {
		setCondition(run, &st.Conditions, forecastingv1alpha1.RunDegraded, metav1.ConditionTrue, forecastingv1alpha1.ReasonShardsFailed,
			fmt.Sprintf("shards %s failed for good (%d of %d, allowed %d); publish carries their previous forecasts forward",
				st.Shards.FailedIndexes, st.Shards.Failed, st.Shards.Total, allowed), r.Clock.Now())
	} else {
		setCondition(run, &st.Conditions, forecastingv1alpha1.RunDegraded, metav1.ConditionFalse, forecastingv1alpha1.ReasonAllShardsTrained,
			fmt.Sprintf("all %d shards trained", st.Shards.Total), r.Clock.Now())
	}
	if st.Hierarchy != nil && st.Hierarchy.ReconcileStep {
		if err := r.createStep(ctx, run, fp, stepReconcile, jobParams{}); err != nil {
			return err
		}
		r.progress(run, w, forecastingv1alpha1.ReasonReconciling,
			"reconciling: making the hierarchy's nodes that span shards add up, from what the shards wrote")
		return nil
	}
	return r.startPublish(ctx, run, fp, w)
}

// startPublish creates the publish Job and marks the run Publishing.
func (r *RunReconciler) startPublish(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	if err := r.createStep(ctx, run, fp, stepPublish, jobParams{}); err != nil {
		return err
	}
	r.progress(run, w, forecastingv1alpha1.ReasonPublishing, "publishing: checking every unit and moving the latest pointer")
	return nil
}

// reconcileStep waits for the reconcile Job. When it failed, the run fails with the trainer's
// own error (nothing was published). When it succeeded, the step's levels (the nodes that span
// shards) are folded and the publish Job is created, in the same status write that moves the
// run to Publishing, so the levels count once however often this runs. A succeeded step whose
// summary is unusable loses only those levels (Warning Event): its results are written.
func (r *RunReconciler) reconcileStep(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	job, err := r.stepJob(ctx, run, fp, stepReconcile, jobParams{})
	if err != nil || job == nil {
		return err
	}
	outcome, reason, message := jobResult(job)
	if outcome == jobRunning {
		return nil
	}
	s, ok, serr := r.readStep(ctx, run, stepReconcile, summary.KindReconcile)
	if outcome == jobFailed {
		r.finish(run, w, false, forecastingv1alpha1.ReasonReconcileFailed, stepFailure("reconcile", reason, message, s, serr))
		return nil
	}
	st := w.status
	if st.Hierarchy == nil {
		st.Hierarchy = &forecastingv1alpha1.HierarchyStatus{ReconcileStep: true}
	}
	switch {
	case serr != nil || !ok:
		w.event(corev1.EventTypeWarning, forecastingv1alpha1.ReasonReconciled,
			"reconcile succeeded but its summary is unusable, its levels are not counted: %v", orMissing(serr))
	default:
		h, lerr := addLevels(st.Hierarchy, s.Levels)
		if lerr != nil {
			w.event(corev1.EventTypeWarning, forecastingv1alpha1.ReasonReconciled, "reconcile (job %s): levels not counted: %v", job.Name, lerr)
		} else {
			st.Hierarchy = h
			showLevels(st.Hierarchy, run.Name)
		}
		st.Hierarchy.MaxDeviation = formatDeviation(s.MaxDeviation)
		w.event(corev1.EventTypeNormal, forecastingv1alpha1.ReasonReconciled, "reconciled the nodes that span shards: %s; largest relative deviation %s",
			orNone(levelNames(s.Levels)), st.Hierarchy.MaxDeviation)
	}
	return r.startPublish(ctx, run, fp, w)
}

// fold folds the train Job's newly finished indexes, reading only their pods from the cache
// (through the per-index field index, so a reconcile costs O(new shards), not O(shards)). A pod
// the cache has not seen yet is waited for; once the Job has ended, the pods are listed from the
// API server and an index with no pod there either is folded as lost.
func (r *RunReconciler) fold(ctx context.Context, run *forecastingv1alpha1.ForecastRun, job *batchv1.Job, w *runWork, ended bool) error {
	fresh, err := unfoldedIndexes(w.status, job)
	if err != nil {
		return err
	}
	var pods []corev1.Pod
	for _, i := range fresh {
		var list corev1.PodList
		if err := r.List(ctx, &list, client.InNamespace(run.Namespace),
			client.MatchingFields{IndexPodShard: podShardKey(run.Name, stepTrain, i)}); err != nil {
			return err
		}
		pods = append(pods, list.Items...)
	}
	res, err := foldShards(w.status, job, pods, false)
	if err != nil {
		return err
	}
	if len(res.Waiting) > 0 && !ended {
		w.requeue = 250 * time.Millisecond
	}
	if len(res.Waiting) > 0 && ended {
		if pods, err = r.stepPods(ctx, r.APIReader, run, stepTrain); err != nil {
			return err
		}
		more, err := foldShards(w.status, job, pods, true)
		if err != nil {
			return err
		}
		res.Problems = append(res.Problems, more.Problems...)
	}
	if len(res.Problems) > 0 {
		w.event(corev1.EventTypeWarning, forecastingv1alpha1.ReasonShardsFailed, "%s", joinLimited(res.Problems, 1000))
	}
	w.status.Accuracy = accuracyStatus(w.status.AccuracySums, run.Name)
	withCalibration(w.status.Accuracy, w.status.CalibrationSums)
	withStability(w.status.Accuracy, w.status.StabilitySums)
	showLevels(w.status.Hierarchy, run.Name)
	return nil
}

// publish waits for the publish Job and ends the run.
func (r *RunReconciler) publish(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	job, err := r.stepJob(ctx, run, fp, stepPublish, jobParams{})
	if err != nil || job == nil {
		return err
	}
	outcome, reason, message := jobResult(job)
	if outcome == jobRunning {
		return nil
	}
	s, ok, serr := r.readStep(ctx, run, stepPublish, summary.KindPublish)
	if outcome == jobFailed {
		if ok && serr == nil && s.Refused {
			// The publish guard: nothing was published, the previous run stays.
			r.finish(run, w, false, forecastingv1alpha1.ReasonPublishRefused, s.Error)
			return nil
		}
		r.finish(run, w, false, forecastingv1alpha1.ReasonPublishFailed, stepFailure("publish", reason, message, s, serr))
		return nil
	}
	note := "published"
	if ok && serr == nil {
		w.status.Series.CarriedForward = int64(s.CarriedForward)
		if s.Manifest != "" {
			note = "published " + s.Manifest
		}
	} else {
		w.event(corev1.EventTypeWarning, forecastingv1alpha1.ReasonPublished, "publish succeeded but its summary is unusable: %v", orMissing(serr))
	}
	if c := w.status.Series.CarriedForward; c > 0 {
		note += fmt.Sprintf("; %d units carried forward", c)
	}
	if ok && serr == nil && s.Missing > 0 {
		// Units with neither a new nor a previous forecast: the manifest marks the run
		// incomplete, and so does the Degraded condition.
		msg := fmt.Sprintf("%d units have no forecast: their shards failed and no earlier run published them", s.Missing)
		if c := meta.FindStatusCondition(w.status.Conditions, forecastingv1alpha1.RunDegraded); c != nil && c.Status == metav1.ConditionTrue {
			msg = c.Message + "; " + msg
		}
		setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunDegraded, metav1.ConditionTrue, forecastingv1alpha1.ReasonShardsFailed, msg, r.Clock.Now())
		note += fmt.Sprintf("; %d units without a forecast", s.Missing)
	}
	if ok && serr == nil && s.Broken != "" {
		// Input objects the trainer could not read and went on without (issue 18 case 4).
		msg := s.Broken
		if c := meta.FindStatusCondition(w.status.Conditions, forecastingv1alpha1.RunDegraded); c != nil && c.Status == metav1.ConditionTrue {
			msg = c.Message + "; " + msg
		}
		setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunDegraded, metav1.ConditionTrue, forecastingv1alpha1.ReasonBrokenInput, msg, r.Clock.Now())
		note += "; " + s.Broken
	}
	r.finish(run, w, true, forecastingv1alpha1.ReasonPublished, note)
	return nil
}

// stepJob returns the Job of a step, creating it again if it is gone (a TTL deletion while the
// controller was down; the trainer steps are idempotent). It returns nil when just created.
func (r *RunReconciler) stepJob(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, s step, p jobParams) (*batchv1.Job, error) {
	var job batchv1.Job
	err := r.Get(ctx, types.NamespacedName{Namespace: run.Namespace, Name: jobName(run.Name, s)}, &job)
	if apierrors.IsNotFound(err) {
		return nil, r.createStep(ctx, run, fp, s, p)
	}
	if err != nil {
		return nil, err
	}
	if !metav1.IsControlledBy(&job, run) {
		return nil, fmt.Errorf("job %s/%s exists but is not controlled by run %s", job.Namespace, job.Name, run.Name)
	}
	return &job, nil
}

// createStep creates the Job of step s (buildJob with p), created at the reconciler's clock
// (jobParams.Created, whence the trainer's --step-deadline).
func (r *RunReconciler) createStep(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, s step, p jobParams) error {
	p.Created = r.Clock.Now()
	return r.createOwned(ctx, run, buildJob(fp, run, s, p))
}

// createOwned creates obj with run as its controller owner; AlreadyExists counts as done.
func (r *RunReconciler) createOwned(ctx context.Context, run *forecastingv1alpha1.ForecastRun, obj client.Object) error {
	if err := controllerutil.SetControllerReference(run, obj, r.Scheme); err != nil {
		return err
	}
	if err := r.Create(ctx, obj); err != nil && !apierrors.IsAlreadyExists(err) {
		return fmt.Errorf("create %T %s/%s: %w", obj, obj.GetNamespace(), obj.GetName(), err)
	}
	return nil
}

// stepPods lists the pods of one step of the run through reader (the cache or the API server).
func (r *RunReconciler) stepPods(ctx context.Context, reader client.Reader, run *forecastingv1alpha1.ForecastRun, s step) ([]corev1.Pod, error) {
	var pods corev1.PodList
	err := reader.List(ctx, &pods, client.InNamespace(run.Namespace), client.MatchingLabels{LabelRun: run.Name, LabelStep: string(s)})
	return pods.Items, err
}

// readStep reads a single-pod step's summary, from the cache and then the API server.
func (r *RunReconciler) readStep(ctx context.Context, run *forecastingv1alpha1.ForecastRun, s step, kind string) (summary.Summary, bool, error) {
	pods, err := r.stepPods(ctx, r.Client, run, s)
	if err != nil {
		return summary.Summary{}, false, err
	}
	sum, ok, serr := stepSummary(pods, kind)
	if ok {
		return sum, ok, serr
	}
	if pods, err = r.stepPods(ctx, r.APIReader, run, s); err != nil {
		return summary.Summary{}, false, err
	}
	return stepSummary(pods, kind)
}

// deleteJobs deletes the run's Jobs; background propagation lets the garbage collector remove
// their pods (the trainer's publish is atomic, so a stopped run leaves no half-published state).
func (r *RunReconciler) deleteJobs(ctx context.Context, run *forecastingv1alpha1.ForecastRun) error {
	for _, s := range steps {
		job := &batchv1.Job{ObjectMeta: metav1.ObjectMeta{Namespace: run.Namespace, Name: jobName(run.Name, s)}}
		if err := r.Delete(ctx, job, client.PropagationPolicy(metav1.DeletePropagationBackground)); err != nil && !apierrors.IsNotFound(err) {
			return fmt.Errorf("delete job %s/%s: %w", job.Namespace, job.Name, err)
		}
	}
	return nil
}

// rebalance shares the budget among the active train Jobs (fairShares), patches every Job
// whose parallelism differs from its share, and returns this run's share. newShards > 0 means
// this run's train Job is about to be created with that many shards (limits from fp).
func (r *RunReconciler) rebalance(ctx context.Context, run *forecastingv1alpha1.ForecastRun, newShards int32, fp *forecastingv1alpha1.ForecastPortfolio) (int32, error) {
	var jobs batchv1.JobList
	if err := r.List(ctx, &jobs, client.MatchingLabels{LabelStep: string(stepTrain)}); err != nil {
		return 0, err
	}
	self := run.Namespace + "/" + jobName(run.Name, stepTrain)
	reqs := trainDemands(jobs.Items)
	if newShards > 0 {
		// The Job may exist already (a reconcile whose status write conflicted created it):
		// count this run once.
		reqs = slices.DeleteFunc(reqs, func(q shareRequest) bool { return q.Key == self })
		reqs = append(reqs, shareRequest{
			Key:    self,
			Weight: max(1, fp.Spec.Sharding.ShareWeight),
			Demand: demand(max(1, fp.Spec.Sharding.MaxParallel), newShards),
		})
	}
	shares := fairShares(reqs, r.MaxConcurrentShards)
	for k := range jobs.Items {
		job := &jobs.Items[k]
		share, active := shares[job.Namespace+"/"+job.Name]
		if !active || ptr.Deref(job.Spec.Parallelism, -1) == share {
			continue
		}
		patch := client.MergeFrom(job.DeepCopy())
		job.Spec.Parallelism = ptr.To(share)
		if err := r.Patch(ctx, job, patch); err != nil && !apierrors.IsNotFound(err) {
			return 0, fmt.Errorf("set parallelism of job %s/%s: %w", job.Namespace, job.Name, err)
		}
		log.FromContext(ctx).V(1).Info("parallelism", "job", job.Namespace+"/"+job.Name, "share", share)
	}
	return shares[self], nil
}

// trainDemands turns the train Jobs that have not ended into share requests:
// demand = min(maxParallel, completions - completed - failed indexes).
func trainDemands(jobs []batchv1.Job) []shareRequest {
	var reqs []shareRequest
	for k := range jobs {
		job := &jobs[k]
		if outcome, _, _ := jobResult(job); outcome != jobRunning || job.DeletionTimestamp != nil {
			continue
		}
		maxParallel, weight := jobShareLimits(job)
		reqs = append(reqs, shareRequest{
			Key:    job.Namespace + "/" + job.Name,
			Weight: weight,
			Demand: demand(maxParallel, unfinishedShards(job)),
		})
	}
	return reqs
}

// unfinishedShards is completions minus the indexes the Job reports completed or failed.
func unfinishedShards(job *batchv1.Job) int32 {
	done := 0
	if set, err := parseIndexSet(job.Status.CompletedIndexes); err == nil {
		done += len(set)
	}
	if job.Status.FailedIndexes != nil {
		if set, err := parseIndexSet(*job.Status.FailedIndexes); err == nil {
			done += len(set)
		}
	}
	return ptr.Deref(job.Spec.Completions, 0) - int32(done)
}

// progress marks the run as working on a step and records the Event of a new step.
func (r *RunReconciler) progress(run *forecastingv1alpha1.ForecastRun, w *runWork, reason, message string) {
	now := r.Clock.Now()
	if c := meta.FindStatusCondition(w.status.Conditions, forecastingv1alpha1.RunProgressing); c == nil || c.Reason != reason {
		w.event(corev1.EventTypeNormal, reason, "%s", message)
	}
	setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunProgressing, metav1.ConditionTrue, reason, message, now)
	setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunSucceeded, metav1.ConditionUnknown, reason, "the run is in progress", now)
}

// waiting marks the run as unable to start for a reason the user can fix.
func (r *RunReconciler) waiting(run *forecastingv1alpha1.ForecastRun, w *runWork, reason, message string) {
	if c := meta.FindStatusCondition(w.status.Conditions, forecastingv1alpha1.RunProgressing); c == nil || c.Message != message {
		w.event(corev1.EventTypeWarning, reason, "%s", message)
	}
	setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunProgressing, metav1.ConditionFalse, reason, message, r.Clock.Now())
}

// finish ends the run: Succeeded True or False with the reason, Progressing False.
func (r *RunReconciler) finish(run *forecastingv1alpha1.ForecastRun, w *runWork, ok bool, reason, message string) {
	now := r.Clock.Now()
	status, kind := metav1.ConditionFalse, corev1.EventTypeWarning
	if ok {
		status, kind = metav1.ConditionTrue, corev1.EventTypeNormal
	}
	setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunSucceeded, status, reason, message, now)
	setCondition(run, &w.status.Conditions, forecastingv1alpha1.RunProgressing, metav1.ConditionFalse, reason, message, now)
	w.status.CompletionTime = &metav1.Time{Time: now}
	w.status.Shards.Active, w.status.Parallelism = 0, 0
	w.event(kind, reason, "%s", message)
}

// setCondition sets a condition with the object's generation as observedGeneration; the
// transition time changes only when the status does (meta.SetStatusCondition).
func setCondition(obj metav1.Object, conds *[]metav1.Condition, typ string, status metav1.ConditionStatus, reason, message string, now time.Time) {
	meta.SetStatusCondition(conds, metav1.Condition{
		Type: typ, Status: status, Reason: reason, Message: message,
		ObservedGeneration: obj.GetGeneration(), LastTransitionTime: metav1.Time{Time: now},
	})
}

// runFinished is true once the Succeeded condition is True or False.
func runFinished(st *forecastingv1alpha1.ForecastRunStatus) bool {
	c := meta.FindStatusCondition(st.Conditions, forecastingv1alpha1.RunSucceeded)
	return c != nil && c.Status != metav1.ConditionUnknown
}

// progressStep is the step the Progressing condition says the run is in ("" before planning).
func progressStep(st *forecastingv1alpha1.ForecastRunStatus) step {
	c := meta.FindStatusCondition(st.Conditions, forecastingv1alpha1.RunProgressing)
	if c == nil || c.Status != metav1.ConditionTrue {
		return ""
	}
	switch c.Reason {
	case forecastingv1alpha1.ReasonPlanning:
		return stepPlan
	case forecastingv1alpha1.ReasonTraining:
		return stepTrain
	case forecastingv1alpha1.ReasonReconciling:
		return stepReconcile
	case forecastingv1alpha1.ReasonPublishing:
		return stepPublish
	}
	return ""
}

// runPhase derives the one-word phase from the conditions (it is never read back).
func runPhase(st *forecastingv1alpha1.ForecastRunStatus) forecastingv1alpha1.RunPhase {
	if c := meta.FindStatusCondition(st.Conditions, forecastingv1alpha1.RunSucceeded); c != nil {
		switch c.Status {
		case metav1.ConditionTrue:
			return forecastingv1alpha1.PhaseSucceeded
		case metav1.ConditionFalse:
			return forecastingv1alpha1.PhaseFailed
		}
	}
	switch progressStep(st) {
	case stepPlan:
		return forecastingv1alpha1.PhasePlanning
	case stepTrain:
		return forecastingv1alpha1.PhaseTraining
	case stepReconcile:
		return forecastingv1alpha1.PhaseReconciling
	case stepPublish:
		return forecastingv1alpha1.PhasePublishing
	}
	return forecastingv1alpha1.PhasePending
}

// stepFailure explains why a single-pod step failed: the trainer's own error when its summary
// has one, else the Job condition.
func stepFailure(name, reason, message string, s summary.Summary, serr error) string {
	if serr == nil && s.Error != "" {
		return fmt.Sprintf("%s failed: %s", name, s.Error)
	}
	if serr != nil {
		return fmt.Sprintf("%s Job failed: %s: %s; %v", name, reason, message, serr)
	}
	return fmt.Sprintf("%s Job failed: %s: %s", name, reason, message)
}

func orMissing(err error) error {
	if err == nil {
		return fmt.Errorf("no finished pod found")
	}
	return err
}

func orNone(s string) string {
	if s == "" {
		return "none"
	}
	return s
}

// joinLimited joins lines with "; " and cuts the result to at most n bytes.
func joinLimited(lines []string, n int) string {
	s := strings.Join(lines, "; ")
	if len(s) > n {
		s = s[:n-3] + "..."
	}
	return s
}

// droppedText is the progress message's note of the members the plan's automatic design left
// out for cost (status.droppedMembers), "" when none.
func droppedText(members []string) string {
	if len(members) == 0 {
		return ""
	}
	return "; left out of the design for cost: " + strings.Join(members, ", ")
}
