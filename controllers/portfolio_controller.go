package controllers

import (
	"context"
	"fmt"

	"k8s.io/apimachinery/pkg/api/equality"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/utils/clock"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/controller/controllerutil"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"
	"sigs.k8s.io/controller-runtime/pkg/recorder"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// PortfolioReconciler keeps a ForecastPortfolio's runs going: it starts scheduled and drift
// runs, applies the concurrency policy and history limits, and keeps the portfolio status current
// from its runs. The decisions are made by planPortfolio; this type only reads and writes.
type PortfolioReconciler struct {
	client.Client
	Scheme   *runtime.Scheme
	Recorder recorder.EventRecorder
	Clock    clock.PassiveClock
	Metrics  *Metrics
	// Images is the install's allowlist of trainer images (empty: any).
	Images ImageAllowlist
}

// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastportfolios,verbs=get;list;watch
// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastportfolios/status,verbs=get;update;patch
// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastportfolios/finalizers,verbs=update
// +kubebuilder:rbac:groups=forecasting.almanac.dev,resources=forecastruns,verbs=create;delete

// Reconcile plans the portfolio at the clock's now and applies the plan.
func (r *PortfolioReconciler) Reconcile(ctx context.Context, req reconcile.Request) (reconcile.Result, error) {
	var fp forecastingv1alpha1.ForecastPortfolio
	if err := r.Get(ctx, req.NamespacedName, &fp); err != nil {
		if apierrors.IsNotFound(err) {
			r.Metrics.accuracy(req.Namespace, req.Name, nil)
			r.Metrics.levels(req.Namespace, req.Name, nil)
			r.Metrics.portfolioGone(req.Namespace, req.Name)
		}
		return reconcile.Result{}, client.IgnoreNotFound(err)
	}
	var runs forecastingv1alpha1.ForecastRunList
	if err := r.List(ctx, &runs, client.InNamespace(fp.Namespace), client.MatchingFields{IndexRunPortfolio: fp.Name}); err != nil {
		return reconcile.Result{}, err
	}
	now := r.Clock.Now()
	var blocked stallCause
	if msg := r.Images.problem(fp.Spec.Trainer.Image); msg != "" {
		blocked = stallCause{forecastingv1alpha1.ReasonImageNotAllowed, msg}
	} else {
		blocked.Reason, blocked.Message = activeRunStall(runs.Items)
	}
	p := planPortfolio(&fp, runs.Items, now, blocked)
	if err := r.apply(ctx, &fp, p); err != nil {
		return reconcile.Result{}, err
	}
	if !equality.Semantic.DeepEqual(&fp.Status, p.Status) {
		fp.Status = *p.Status
		if err := r.Status().Update(ctx, &fp); err != nil {
			return reconcile.Result{}, fmt.Errorf("update status of portfolio %s/%s: %w", fp.Namespace, fp.Name, err)
		}
	}
	for _, e := range p.Events {
		r.Recorder.Eventf(&fp, nil, e.kind, e.reason, e.reason, "%s", e.note)
	}
	r.Metrics.accuracy(fp.Namespace, fp.Name, fp.Status.Accuracy)
	r.Metrics.levels(fp.Namespace, fp.Name, fp.Status.HierarchyLevels)
	r.Metrics.portfolioState(fp.Namespace, fp.Name, fp.Status.Conditions, p.Missed, p.MissedDue)
	return reconcile.Result{RequeueAfter: p.RequeueAfter}, nil
}

// apply marks replaced runs, creates the planned run and prunes history.
func (r *PortfolioReconciler) apply(ctx context.Context, fp *forecastingv1alpha1.ForecastPortfolio, p portfolioPlan) error {
	for _, name := range p.Replace {
		run := &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Namespace: fp.Namespace, Name: name}}
		patch := client.RawPatch(types.MergePatchType,
			[]byte(fmt.Sprintf(`{"metadata":{"annotations":{%q:%q}}}`, AnnotationReplacedBy, p.ReplacedBy)))
		if err := r.Patch(ctx, run, patch); err != nil && !apierrors.IsNotFound(err) {
			return fmt.Errorf("mark run %s/%s replaced: %w", fp.Namespace, name, err)
		}
	}
	if run := p.Create; run != nil {
		if err := controllerutil.SetControllerReference(fp, run, r.Scheme); err != nil {
			return err
		}
		if err := r.Create(ctx, run); err != nil {
			if !apierrors.IsAlreadyExists(err) {
				return fmt.Errorf("create run %s/%s: %w", run.Namespace, run.Name, err)
			}
			var existing forecastingv1alpha1.ForecastRun
			if err := r.Get(ctx, client.ObjectKeyFromObject(run), &existing); err != nil {
				return err
			}
			if !metav1.IsControlledBy(&existing, fp) && existing.Spec.PortfolioName != fp.Name {
				return fmt.Errorf("run %s/%s exists and belongs to another portfolio", run.Namespace, run.Name)
			}
		}
	}
	for _, name := range p.Prune {
		run := &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Namespace: fp.Namespace, Name: name}}
		if err := r.Delete(ctx, run, client.PropagationPolicy(metav1.DeletePropagationBackground)); err != nil && !apierrors.IsNotFound(err) {
			return fmt.Errorf("prune run %s/%s: %w", fp.Namespace, name, err)
		}
	}
	return nil
}
