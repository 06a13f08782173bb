package controllers

import (
	"context"
	"fmt"
	"strings"

	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/event"
	"sigs.k8s.io/controller-runtime/pkg/predicate"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// The controller holds no right on Secrets. A credentials Secret that is missing is learned
// from the trainer pod instead: the kubelet cannot build the container's environment
// (envFrom), leaves the container waiting with reason CreateContainerConfigError and a message
// such as `secret "fenwick-s3" not found`, and retries until the Secret exists. The run is
// Stalled meanwhile (True, MissingSecret, or PodConfigError for any other such error, e.g. a
// missing key) and its portfolio shows the same; both clear once the container leaves that state.

// waitingConfigError is the kubelet's waiting reason for a container whose configuration
// (environment from Secrets and ConfigMaps, security context) cannot be built.
const waitingConfigError = "CreateContainerConfigError"

// IndexPodConfigError indexes trainer pods waiting in CreateContainerConfigError by run name,
// so a reconcile finds them without scanning a run's pods.
const IndexPodConfigError = "almanac.configError"

// podConfigError returns the kubelet's message when one of the pod's containers waits in
// CreateContainerConfigError.
func podConfigError(pod *corev1.Pod) (string, bool) {
	for _, cs := range pod.Status.ContainerStatuses {
		if w := cs.State.Waiting; w != nil && w.Reason == waitingConfigError {
			return w.Message, true
		}
	}
	return "", false
}

// podConfigErrorKeys is the IndexPodConfigError function.
func podConfigErrorKeys(pod *corev1.Pod) []string {
	if _, ok := podConfigError(pod); ok && pod.Labels[LabelRun] != "" {
		return []string{pod.Labels[LabelRun]}
	}
	return nil
}

// podConfigErrorChanged lets through the pod events that start or end a configuration error
// (or change its message), so the run is reconciled exactly when its Stalled state may change.
func podConfigErrorChanged() predicate.Predicate {
	has := func(obj client.Object) bool {
		pod, ok := obj.(*corev1.Pod)
		if !ok {
			return false
		}
		_, bad := podConfigError(pod)
		return bad
	}
	return predicate.Funcs{
		CreateFunc: func(e event.CreateEvent) bool { return has(e.Object) },
		DeleteFunc: func(e event.DeleteEvent) bool { return has(e.Object) },
		UpdateFunc: func(e event.UpdateEvent) bool {
			before, _ := e.ObjectOld.(*corev1.Pod)
			after, _ := e.ObjectNew.(*corev1.Pod)
			if before == nil || after == nil {
				return false
			}
			m1, b1 := podConfigError(before)
			m2, b2 := podConfigError(after)
			return b1 != b2 || m1 != m2
		},
		GenericFunc: func(event.GenericEvent) bool { return false },
	}
}

// podToRun maps a trainer pod to its run.
func podToRun(_ context.Context, obj client.Object) []reconcile.Request {
	name := obj.GetLabels()[LabelRun]
	if name == "" {
		return nil
	}
	return []reconcile.Request{{NamespacedName: client.ObjectKey{Namespace: obj.GetNamespace(), Name: name}}}
}

// configStall turns the waiting pods of a run into the Stalled condition's reason and message
// ("" when none waits). A message that names the portfolio's credentials Secret as not found
// (the kubelet writes `secret "NAME" not found`) is MissingSecret; anything else PodConfigError.
func configStall(fp *forecastingv1alpha1.ForecastPortfolio, pods []corev1.Pod) (reason, message string) {
	for i := range pods {
		msg, ok := podConfigError(&pods[i])
		if !ok {
			continue
		}
		if ref := fp.Spec.Source.CredentialsSecretRef; ref != nil {
			low := strings.ToLower(msg)
			if strings.Contains(low, "secret") && strings.Contains(msg, fmt.Sprintf("%q not found", ref.Name)) {
				return forecastingv1alpha1.ReasonMissingSecret, fmt.Sprintf(
					"spec.source.credentialsSecretRef: Secret %s/%s not found (pod %s: %s: %s); the pod starts once it exists",
					fp.Namespace, ref.Name, pods[i].Name, waitingConfigError, msg)
			}
		}
		return forecastingv1alpha1.ReasonPodConfigError, fmt.Sprintf("pod %s: %s: %s", pods[i].Name, waitingConfigError, msg)
	}
	return "", ""
}

// checkPodConfig sets or clears the run's Stalled condition from its pods waiting in
// CreateContainerConfigError (read from the cache through IndexPodConfigError).
func (r *RunReconciler) checkPodConfig(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, w *runWork) error {
	var pods corev1.PodList
	if err := r.List(ctx, &pods, client.InNamespace(run.Namespace), client.MatchingFields{IndexPodConfigError: run.Name}); err != nil {
		return err
	}
	reason, message := configStall(fp, pods.Items)
	conds := &w.status.Conditions
	if reason == "" {
		meta.RemoveStatusCondition(conds, forecastingv1alpha1.RunStalled)
		return nil
	}
	if c := meta.FindStatusCondition(*conds, forecastingv1alpha1.RunStalled); c == nil || c.Message != message {
		w.event(corev1.EventTypeWarning, reason, "%s", message)
	}
	setCondition(run, conds, forecastingv1alpha1.RunStalled, metav1.ConditionTrue, reason, message, r.Clock.Now())
	return nil
}

// activeRunStall is the Stalled condition of the first unfinished run that has one True: the
// portfolio shows it (a missing Secret is learned only through a run's pods).
func activeRunStall(runs []forecastingv1alpha1.ForecastRun) (reason, message string) {
	for i := range runs {
		if runFinished(&runs[i].Status) {
			continue
		}
		if c := meta.FindStatusCondition(runs[i].Status.Conditions, forecastingv1alpha1.RunStalled); c != nil && c.Status == metav1.ConditionTrue {
			return c.Reason, fmt.Sprintf("run %s: %s", runs[i].Name, c.Message)
		}
	}
	return "", ""
}
