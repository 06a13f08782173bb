package controllers

import (
	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// waitingStepPod creates the pod of a single-pod step's Job as the Job controller would and
// sets its container waiting with the kubelet's reason and message.
func waitingStepPod(job *batchv1.Job, reason, msg string) *corev1.Pod {
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{Name: job.Name + "-w", Namespace: job.Namespace, Labels: job.Spec.Template.Labels},
		Spec:       job.Spec.Template.Spec,
	}
	ExpectWithOffset(1, k8sClient.Create(ctx(), pod)).To(Succeed())
	pod.Status = corev1.PodStatus{Phase: corev1.PodPending, ContainerStatuses: []corev1.ContainerStatus{{
		Name: trainerContainer, Image: pod.Spec.Containers[0].Image,
		State: corev1.ContainerState{Waiting: &corev1.ContainerStateWaiting{Reason: reason, Message: msg}},
	}}}
	ExpectWithOffset(1, k8sClient.Status().Update(ctx(), pod)).To(Succeed())
	return pod
}

var _ = Describe("Least privilege", func() {
	It("learns a missing credentials Secret from the trainer pod: run and portfolio Stalled until the pod starts", func() {
		ns := newNamespace()
		fp := testPortfolio(ns, "fenwick-nosecret", yearly, nil)
		// The controller cannot read Secrets: nothing is known before a pod tries.
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioStalled)).Should(Equal("False/SpecValid"))
		manualRun(ns, "fenwick-nosecret-1", fp.Name)
		run := &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "fenwick-nosecret-1"}}
		job := getJob(ns, run.Name, stepPlan)
		pod := waitingStepPod(job, waitingConfigError, `secret "fenwick-s3" not found`)

		Eventually(conditionOf(run, forecastingv1alpha1.RunStalled)).Should(Equal("True/MissingSecret"))
		Expect(meta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunStalled).Message).
			To(HavePrefix("spec.source.credentialsSecretRef: Secret " + ns + "/fenwick-s3 not found (pod " + pod.Name))
		Expect(run.Status.Phase).To(Equal(forecastingv1alpha1.PhasePlanning))
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioStalled)).Should(Equal("True/MissingSecret"))
		Expect(meta.FindStatusCondition(fp.Status.Conditions, forecastingv1alpha1.PortfolioStalled).Message).
			To(HavePrefix("run fenwick-nosecret-1: spec.source.credentialsSecretRef: Secret " + ns + "/fenwick-s3 not found"))
		Expect(conditionOf(fp, forecastingv1alpha1.PortfolioReady)()).To(Equal("False/MissingSecret"))
		Eventually(eventReasonsFor(ns, run.Name)).Should(ContainElement(forecastingv1alpha1.ReasonMissingSecret))
		Eventually(eventReasonsFor(ns, fp.Name)).Should(ContainElement(forecastingv1alpha1.ReasonMissingSecret))

		// The Secret appears; the kubelet starts the container.
		createSecret(ns)
		Expect(k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: pod.Name}, pod)).To(Succeed())
		pod.Status.Phase = corev1.PodRunning
		pod.Status.ContainerStatuses[0].State = corev1.ContainerState{Running: &corev1.ContainerStateRunning{StartedAt: metav1.Now()}}
		Expect(k8sClient.Status().Update(ctx(), pod)).To(Succeed())
		Eventually(conditionOf(run, forecastingv1alpha1.RunStalled)).Should(Equal("absent"))
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioStalled)).Should(Equal("False/SpecValid"))
		Expect(conditionOf(run, forecastingv1alpha1.RunProgressing)()).To(Equal("True/Planning"))
	})

	It("refuses a trainer image outside the install's allowlist with a condition naming it", func() {
		ns := newNamespace()
		createSecret(ns)
		const image = "registry.example/almanac-trainer-fork:1"
		fp := testPortfolio(ns, "fenwick-fork", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Trainer.Image = image })
		Eventually(conditionOf(fp, forecastingv1alpha1.PortfolioStalled)).Should(Equal("True/ImageNotAllowed"))
		want := `spec.trainer.image: "` + image + `" is not in the install's allowed trainer images (registry.example/almanac-trainer)`
		Expect(meta.FindStatusCondition(fp.Status.Conditions, forecastingv1alpha1.PortfolioStalled).Message).To(Equal(want))

		manualRun(ns, "fenwick-fork-1", fp.Name)
		run := &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: "fenwick-fork-1"}}
		Eventually(conditionOf(run, forecastingv1alpha1.RunSucceeded)).Should(Equal("False/ImageNotAllowed"))
		Expect(meta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunSucceeded).Message).To(Equal(want))
		var job batchv1.Job
		Expect(apierrors.IsNotFound(k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: jobName(run.Name, stepPlan)}, &job))).
			To(BeTrue(), "no Job may run a refused image")
	})
})
