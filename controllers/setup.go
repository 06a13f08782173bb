package controllers

import (
	"context"
	"fmt"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/labels"
	"k8s.io/apimachinery/pkg/selection"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/client-go/kubernetes"
	"k8s.io/utils/clock"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/builder"
	"sigs.k8s.io/controller-runtime/pkg/cache"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/controller"
	"sigs.k8s.io/controller-runtime/pkg/handler"
	"sigs.k8s.io/controller-runtime/pkg/manager"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// Cache field indexes.
const (
	// IndexRunPortfolio indexes ForecastRuns by spec.portfolioName.
	IndexRunPortfolio = "spec.portfolioName"
	// IndexPodShard indexes trainer pods by "<run>/<step>/<completion index>".
	IndexPodShard = "almanac.shard"
)

// Options configure the manager's two controllers.
type Options struct {
	// MaxConcurrentShards is the budget of train pods shared by all active runs (0: unlimited).
	MaxConcurrentShards int32
	// Clock is where the reconcilers get the time; nil means the real clock. Tests inject a
	// fake one to move schedules forward.
	Clock clock.PassiveClock
	// Metrics, when set, receive the run and accuracy series.
	Metrics *Metrics
	// RunWorkers is the number of concurrent run reconciles (default 2).
	RunWorkers int
	// Images is the install's allowlist of trainer images (--trainer-image-prefixes); empty
	// allows any image.
	Images ImageAllowlist
	// ProgressInterval is how often a training run reads its running pods' progress lines
	// (0: DefaultProgressInterval).
	ProgressInterval time.Duration
	// Logs reads them; nil: pods/log through a client built from the manager's config.
	Logs PodLogs
	// Wrap, when set, wraps each reconciler (named "forecastrun" or "forecastportfolio"), e.g.
	// to time reconciles in the benchmark.
	Wrap func(name string, r reconcile.Reconciler) reconcile.Reconciler
}

// CacheOptions restrict the manager's cache to what the controllers need: the given namespaces
// (none: all), and only the Jobs, pods and ConfigMaps that carry the run label, so that a
// cluster's other pods never fill the controller's memory.
func CacheOptions(namespaces []string) (cache.Options, error) {
	req, err := labels.NewRequirement(LabelRun, selection.Exists, nil)
	if err != nil {
		return cache.Options{}, err
	}
	owned := labels.NewSelector().Add(*req)
	opts := cache.Options{
		DefaultTransform: cache.TransformStripManagedFields(),
		ByObject: map[client.Object]cache.ByObject{
			&corev1.Pod{}:       {Label: owned, Transform: slimPod},
			&batchv1.Job{}:      {Label: owned},
			&corev1.ConfigMap{}: {Label: owned},
		},
	}
	if len(namespaces) > 0 {
		opts.DefaultNamespaces = map[string]cache.Config{}
		for _, ns := range namespaces {
			opts.DefaultNamespaces[ns] = cache.Config{}
		}
	}
	return opts, nil
}

// slimPod keeps only what the run controller reads from a trainer pod (metadata without
// managed fields, the phase, each container's running and terminated state and a
// CreateContainerConfigError waiting state), so a run of many shards costs the cache little
// memory per pod.
func slimPod(obj any) (any, error) {
	pod, ok := obj.(*corev1.Pod)
	if !ok {
		return obj, nil
	}
	slim := &corev1.Pod{TypeMeta: pod.TypeMeta, ObjectMeta: pod.ObjectMeta}
	slim.ManagedFields = nil
	slim.Status.Phase = pod.Status.Phase
	for _, cs := range pod.Status.ContainerStatuses {
		state := corev1.ContainerState{Terminated: cs.State.Terminated, Running: cs.State.Running}
		if w := cs.State.Waiting; w != nil && w.Reason == waitingConfigError {
			state.Waiting = w
		}
		slim.Status.ContainerStatuses = append(slim.Status.ContainerStatuses, corev1.ContainerStatus{Name: cs.Name, State: state})
	}
	return slim, nil
}

// SetupWithManager registers the field index and both controllers.
func SetupWithManager(ctx context.Context, mgr manager.Manager, o Options) error {
	if o.Clock == nil {
		o.Clock = clock.RealClock{}
	}
	if o.RunWorkers < 1 {
		o.RunWorkers = 2
	}
	if o.Wrap == nil {
		o.Wrap = func(_ string, r reconcile.Reconciler) reconcile.Reconciler { return r }
	}
	if err := mgr.GetFieldIndexer().IndexField(ctx, &forecastingv1alpha1.ForecastRun{}, IndexRunPortfolio,
		func(obj client.Object) []string {
			return []string{obj.(*forecastingv1alpha1.ForecastRun).Spec.PortfolioName}
		}); err != nil {
		return fmt.Errorf("index runs by portfolio: %w", err)
	}
	if err := mgr.GetFieldIndexer().IndexField(ctx, &corev1.Pod{}, IndexPodShard,
		func(obj client.Object) []string { return podShardKeys(obj.(*corev1.Pod)) }); err != nil {
		return fmt.Errorf("index pods by shard: %w", err)
	}
	if err := mgr.GetFieldIndexer().IndexField(ctx, &corev1.Pod{}, IndexPodConfigError,
		func(obj client.Object) []string { return podConfigErrorKeys(obj.(*corev1.Pod)) }); err != nil {
		return fmt.Errorf("index pods by configuration error: %w", err)
	}
	if o.Logs == nil {
		cs, err := kubernetes.NewForConfig(mgr.GetConfig())
		if err != nil {
			return fmt.Errorf("client for pod logs: %w", err)
		}
		o.Logs = NewPodLogs(cs)
	}
	runs := &RunReconciler{
		Client: mgr.GetClient(), APIReader: mgr.GetAPIReader(), Scheme: mgr.GetScheme(),
		Recorder: mgr.GetEventRecorder("almanac-run"), Clock: o.Clock, Metrics: o.Metrics,
		MaxConcurrentShards: o.MaxConcurrentShards, Images: o.Images, Logs: o.Logs, ProgressInterval: o.ProgressInterval,
	}
	// A portfolio change (created late, history limits, ...) wakes its unfinished runs.
	portfolioToRuns := handler.EnqueueRequestsFromMapFunc(func(ctx context.Context, obj client.Object) []reconcile.Request {
		var list forecastingv1alpha1.ForecastRunList
		if err := mgr.GetClient().List(ctx, &list, client.InNamespace(obj.GetNamespace()),
			client.MatchingFields{IndexRunPortfolio: obj.GetName()}); err != nil {
			return nil
		}
		var out []reconcile.Request
		for i := range list.Items {
			if !runFinished(&list.Items[i].Status) {
				out = append(out, reconcile.Request{NamespacedName: client.ObjectKeyFromObject(&list.Items[i])})
			}
		}
		return out
	})
	if err := ctrl.NewControllerManagedBy(mgr).
		For(&forecastingv1alpha1.ForecastRun{}).
		Owns(&batchv1.Job{}).
		// A trainer pod entering or leaving CreateContainerConfigError (a missing Secret)
		// changes no Job status, so the pods themselves wake the run.
		Watches(&corev1.Pod{}, handler.EnqueueRequestsFromMapFunc(podToRun), builder.WithPredicates(podConfigErrorChanged())).
		Watches(&forecastingv1alpha1.ForecastPortfolio{}, portfolioToRuns).
		WithOptions(controller.Options{MaxConcurrentReconciles: o.RunWorkers}).
		Named("forecastrun").
		Complete(o.Wrap("forecastrun", runs)); err != nil {
		return err
	}
	portfolios := &PortfolioReconciler{
		Client: mgr.GetClient(), Scheme: mgr.GetScheme(),
		Recorder: mgr.GetEventRecorder("almanac-portfolio"), Clock: o.Clock, Metrics: o.Metrics,
		Images: o.Images,
	}
	// Every run, manual ones included before they are adopted, wakes its portfolio.
	runToPortfolio := handler.EnqueueRequestsFromMapFunc(func(_ context.Context, obj client.Object) []reconcile.Request {
		run := obj.(*forecastingv1alpha1.ForecastRun)
		return []reconcile.Request{{NamespacedName: types.NamespacedName{Namespace: run.Namespace, Name: run.Spec.PortfolioName}}}
	})
	return ctrl.NewControllerManagedBy(mgr).
		For(&forecastingv1alpha1.ForecastPortfolio{}).
		Watches(&forecastingv1alpha1.ForecastRun{}, runToPortfolio).
		Named("forecastportfolio").
		Complete(o.Wrap("forecastportfolio", portfolios))
}
