package controllers

import (
	"strings"
	"testing"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"sigs.k8s.io/controller-runtime/pkg/event"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// waitingPod is a trainer pod of run fenwick-weekly-1 whose container waits with reason and
// message, as the kubelet reports it.
func waitingPod(reason, message string) *corev1.Pod {
	pod := &corev1.Pod{ObjectMeta: metav1.ObjectMeta{Name: "fenwick-weekly-1-plan-x7", Namespace: "planning",
		Labels: map[string]string{LabelRun: "fenwick-weekly-1", LabelStep: "plan"}}}
	pod.Status.Phase = corev1.PodPending
	pod.Status.ContainerStatuses = []corev1.ContainerStatus{{Name: trainerContainer,
		State: corev1.ContainerState{Waiting: &corev1.ContainerStateWaiting{Reason: reason, Message: message}}}}
	return pod
}

func TestConfigStall(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Namespace = "planning"
	tests := map[string]struct {
		pod                  *corev1.Pod
		wantReason, wantText string
	}{
		// The kubelet's message for an envFrom Secret it cannot find (kubelet_pods.go,
		// makeEnvironmentVariables: the Secret manager's NotFound error on resource "secret";
		// from memory of the kubelet source, not observed here: no kubelet runs in the tests).
		"kubelet, missing secret": {waitingPod(waitingConfigError, `secret "fenwick-s3" not found`),
			forecastingv1alpha1.ReasonMissingSecret, "spec.source.credentialsSecretRef: Secret planning/fenwick-s3 not found (pod fenwick-weekly-1-plan-x7: CreateContainerConfigError: secret \"fenwick-s3\" not found)"},
		// test/localnode quotes the apiserver's error instead.
		"localnode, missing secret": {waitingPod(waitingConfigError, `not found: secrets "fenwick-s3" not found`),
			forecastingv1alpha1.ReasonMissingSecret, "Secret planning/fenwick-s3 not found"},
		"another secret": {waitingPod(waitingConfigError, `secret "other" not found`),
			forecastingv1alpha1.ReasonPodConfigError, `pod fenwick-weekly-1-plan-x7: CreateContainerConfigError: secret "other" not found`},
		"root image": {waitingPod(waitingConfigError, "container has runAsNonRoot and image will run as root"),
			forecastingv1alpha1.ReasonPodConfigError, "runAsNonRoot"},
		"pulling":     {waitingPod("ErrImagePull", "not found"), "", ""},
		"no statuses": {&corev1.Pod{}, "", ""},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			reason, msg := configStall(fp, []corev1.Pod{*tc.pod})
			if reason != tc.wantReason || !strings.Contains(msg, tc.wantText) {
				t.Errorf("configStall = %q, %q; want %q containing %q", reason, msg, tc.wantReason, tc.wantText)
			}
			keys := podConfigErrorKeys(tc.pod)
			if (tc.wantReason != "") != (len(keys) == 1 && keys[0] == "fenwick-weekly-1") {
				t.Errorf("index keys %v for reason %q", keys, tc.wantReason)
			}
		})
	}
}

func TestSlimPodKeepsConfigError(t *testing.T) {
	out, err := slimPod(waitingPod(waitingConfigError, `secret "fenwick-s3" not found`))
	if err != nil {
		t.Fatal(err)
	}
	if msg, ok := podConfigError(out.(*corev1.Pod)); !ok || msg != `secret "fenwick-s3" not found` {
		t.Errorf("slim pod lost the configuration error: %q %v", msg, ok)
	}
	out, _ = slimPod(waitingPod("ContainerCreating", ""))
	if w := out.(*corev1.Pod).Status.ContainerStatuses[0].State.Waiting; w != nil {
		t.Errorf("slim pod keeps an ordinary waiting state %+v", w)
	}
}

func TestPodConfigErrorChanged(t *testing.T) {
	p := podConfigErrorChanged()
	bad := waitingPod(waitingConfigError, `secret "fenwick-s3" not found`)
	other := waitingPod(waitingConfigError, `couldn't find key AWS_REGION in Secret planning/fenwick-s3`)
	fine := waitingPod("ContainerCreating", "")
	for name, tc := range map[string]struct {
		old, new *corev1.Pod
		want     bool
	}{
		"enters": {fine, bad, true}, "leaves": {bad, fine, true}, "message": {bad, other, true},
		"same": {bad, bad, false}, "never": {fine, fine, false},
	} {
		if got := p.Update(event.UpdateEvent{ObjectOld: tc.old, ObjectNew: tc.new}); got != tc.want {
			t.Errorf("%s: Update = %v, want %v", name, got, tc.want)
		}
	}
	if !p.Create(event.CreateEvent{Object: bad}) || p.Create(event.CreateEvent{Object: fine}) {
		t.Error("Create passes only pods in the error")
	}
}

func TestActiveRunStall(t *testing.T) {
	stalled := fenwickRun("fenwick-weekly-2")
	stalled.Status.Conditions = []metav1.Condition{{Type: forecastingv1alpha1.RunStalled, Status: metav1.ConditionTrue,
		Reason: forecastingv1alpha1.ReasonMissingSecret, Message: "Secret planning/fenwick-s3 not found"}}
	done := stalled.DeepCopy()
	done.Name = "fenwick-weekly-1"
	done.Status.Conditions = append(done.Status.Conditions, metav1.Condition{Type: forecastingv1alpha1.RunSucceeded, Status: metav1.ConditionFalse, Reason: "DeadlineExceeded"})
	if r, m := activeRunStall([]forecastingv1alpha1.ForecastRun{*done}); r != "" {
		t.Errorf("a finished run stalls the portfolio: %q %q", r, m)
	}
	r, m := activeRunStall([]forecastingv1alpha1.ForecastRun{*done, *stalled})
	if r != forecastingv1alpha1.ReasonMissingSecret || m != "run fenwick-weekly-2: Secret planning/fenwick-s3 not found" {
		t.Errorf("activeRunStall = %q %q", r, m)
	}
}
