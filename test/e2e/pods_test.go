package e2e

import (
	"context"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/utils/ptr"
)

// holdFinalizer keeps a deleted pod readable so that its last status can be checked.
const holdFinalizer = "e2e.almanac.dev/hold"

// progPod returns a plain pod of the test program with the config ConfigMap at /etc/prog.
func progPod(name string, args ...string) *corev1.Pod {
	job := indexedJob(name, 1, args...)
	spec := job.Spec.Template.Spec
	spec.Containers[0].Env = nil
	return &corev1.Pod{ObjectMeta: metav1.ObjectMeta{Name: name}, Spec: spec}
}

// getPod reads a pod.
func getPod(ctx context.Context, ns, name string) func(Gomega) *corev1.Pod {
	return func(g Gomega) *corev1.Pod {
		p, err := cluster.Client.CoreV1().Pods(ns).Get(ctx, name, metav1.GetOptions{})
		g.Expect(err).NotTo(HaveOccurred())
		return p
	}
}

// expectWaiting waits up to 20 s until the pod is in phase with its one container waiting for
// reason, with a message containing message.
func expectWaiting(ctx context.Context, ns, name string, phase corev1.PodPhase, reason, message string) {
	GinkgoHelper()
	Eventually(func(g Gomega) {
		p := getPod(ctx, ns, name)(g)
		g.Expect(p.Status.Phase).To(Equal(phase))
		g.Expect(p.Status.ContainerStatuses).To(HaveLen(1))
		w := p.Status.ContainerStatuses[0].State.Waiting
		g.Expect(w).NotTo(BeNil())
		g.Expect(w.Reason).To(Equal(reason))
		g.Expect(w.Message).To(ContainSubstring(message))
	}).WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Succeed())
}

var _ = Describe("localnode pod handling", func() {
	It("fails a pod whose image is not in the map, with a waiting reason", func(ctx SpecContext) {
		ns := newNamespace(ctx, "image")
		pod := progPod("unknown-image")
		pod.Spec.Containers[0].Image = "fenwick-lane/unknown:1"
		_, err := cluster.Client.CoreV1().Pods(ns).Create(ctx, pod, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())
		expectWaiting(ctx, ns, "unknown-image", corev1.PodFailed, "ErrImagePull", `"fenwick-lane/unknown:1" is not in localnode's image map`)
	}, SpecTimeout(30*time.Second))

	It("leaves a pod no node fits Pending with PodScheduled=False", func(ctx SpecContext) {
		ns := newNamespace(ctx, "unschedulable")
		pod := progPod("no-node")
		pod.Spec.NodeSelector = map[string]string{"fenwick-lane.example/depot": "nowhere"}
		_, err := cluster.Client.CoreV1().Pods(ns).Create(ctx, pod, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())
		Eventually(func(g Gomega) {
			p := getPod(ctx, ns, "no-node")(g)
			g.Expect(p.Status.Conditions).To(ContainElement(And(
				HaveField("Type", corev1.PodScheduled), HaveField("Status", corev1.ConditionFalse),
				HaveField("Reason", corev1.PodReasonUnschedulable),
				HaveField("Message", ContainSubstring("node(s) didn't match Pod's node selector")))))
		}).WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Succeed())
		Consistently(func(g Gomega) {
			p := getPod(ctx, ns, "no-node")(g)
			g.Expect(p.Spec.NodeName).To(BeEmpty())
			g.Expect(p.Status.Phase).To(Equal(corev1.PodPending))
		}).WithTimeout(2 * time.Second).WithPolling(250 * time.Millisecond).Should(Succeed())
	}, SpecTimeout(30*time.Second))

	It("passes envFrom Secret and ConfigMap values and falls back to the log on error", func(ctx SpecContext) {
		ns := newNamespace(ctx, "env")
		createConfig(ctx, ns, progConfig{Depot: "Harlow Road"})
		_, err := cluster.Client.CoreV1().Secrets(ns).Create(ctx, &corev1.Secret{
			ObjectMeta: metav1.ObjectMeta{Name: "store"}, StringData: map[string]string{"ACCESS_KEY": "fl-key-7"},
		}, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())
		_, err = cluster.Client.CoreV1().ConfigMaps(ns).Create(ctx, &corev1.ConfigMap{
			ObjectMeta: metav1.ObjectMeta{Name: "region"}, Data: map[string]string{"REGION": "north-east"},
		}, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())

		ok := progPod("env-ok", "--report-env", "STORE_ACCESS_KEY,REGION,CONFIG_DIR")
		ok.Spec.Containers[0].EnvFrom = []corev1.EnvFromSource{
			{Prefix: "STORE_", SecretRef: &corev1.SecretEnvSource{LocalObjectReference: corev1.LocalObjectReference{Name: "store"}}},
			{ConfigMapRef: &corev1.ConfigMapEnvSource{LocalObjectReference: corev1.LocalObjectReference{Name: "region"}}},
		}
		ok.Spec.Containers[0].Env = []corev1.EnvVar{{Name: "CONFIG_DIR", Value: "/etc/prog"}}
		_, err = cluster.Client.CoreV1().Pods(ns).Create(ctx, ok, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())

		// No --termination-log: the message file stays empty and the log is used.
		bad := progPod("env-bad", "--config", "/etc/prog/absent.json")
		bad.Spec.Containers[0].Args = []string{"--config", "/etc/prog/absent.json"}
		bad.Spec.Containers[0].TerminationMessagePolicy = corev1.TerminationMessageFallbackToLogsOnError
		_, err = cluster.Client.CoreV1().Pods(ns).Create(ctx, bad, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())

		Eventually(func(g Gomega) {
			p := getPod(ctx, ns, "env-ok")(g)
			g.Expect(p.Status.Phase).To(Equal(corev1.PodSucceeded))
			msg := p.Status.ContainerStatuses[0].State.Terminated.Message
			g.Expect(msg).To(HavePrefix("index= depot=Harlow Road failures=0 exit=0 STORE_ACCESS_KEY=fl-key-7 REGION=north-east CONFIG_DIR="))
			// Env values are rewritten like args: the mount path became a local directory.
			g.Expect(msg).To(HaveSuffix("/volumes/config"))
			g.Expect(msg).To(ContainSubstring(suiteDir))
		}).WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Succeed())
		Eventually(func(g Gomega) {
			p := getPod(ctx, ns, "env-bad")(g)
			g.Expect(p.Status.Phase).To(Equal(corev1.PodFailed))
			t := p.Status.ContainerStatuses[0].State.Terminated
			g.Expect(t.ExitCode).To(Equal(int32(3)))
			g.Expect(t.Reason).To(Equal("Error"))
			g.Expect(t.Message).To(And(HavePrefix("prog: open "), HaveSuffix("/volumes/config/absent.json: no such file or directory")))
		}).WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Succeed())
	}, SpecTimeout(45*time.Second))

	It("kills a process that ignores SIGTERM after the grace period", func(ctx SpecContext) {
		ns := newNamespace(ctx, "grace")
		createConfig(ctx, ns, progConfig{Depot: "Mill Street"})
		pod := progPod("stubborn", "--sleep", "10m", "--ignore-sigterm")
		pod.Finalizers = []string{holdFinalizer}
		_, err := cluster.Client.CoreV1().Pods(ns).Create(ctx, pod, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())
		Eventually(func(g Gomega) corev1.PodPhase { return getPod(ctx, ns, "stubborn")(g).Status.Phase }).
			WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Equal(corev1.PodRunning))
		// The sleep starts after the flags are parsed; give the signal handler time to be set.
		time.Sleep(300 * time.Millisecond)

		deleted := time.Now()
		Expect(cluster.Client.CoreV1().Pods(ns).Delete(ctx, "stubborn", metav1.DeleteOptions{GracePeriodSeconds: ptr.To[int64](2)})).To(Succeed())
		var t *corev1.ContainerStateTerminated
		Eventually(func(g Gomega) {
			p := getPod(ctx, ns, "stubborn")(g)
			g.Expect(p.Status.Phase).To(Equal(corev1.PodFailed))
			// localnode removed it with grace 0 (only our finalizer holds it).
			g.Expect(p.DeletionGracePeriodSeconds).To(Equal(ptr.To[int64](0)))
			t = p.Status.ContainerStatuses[0].State.Terminated
		}).WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Succeed())
		// 137 = 128 + SIGKILL (9): the container-runtime convention for a signalled process.
		Expect(t.ExitCode).To(Equal(int32(137)))
		Expect(t.FinishedAt.Time).To(BeTemporally(">=", deleted.Add(2*time.Second).Truncate(time.Second)))

		patch := []byte(`{"metadata":{"finalizers":null}}`)
		_, err = cluster.Client.CoreV1().Pods(ns).Patch(ctx, "stubborn", types.MergePatchType, patch, metav1.PatchOptions{})
		Expect(err).NotTo(HaveOccurred())
	}, SpecTimeout(45*time.Second))

	It("restarts a failing container in place with restartPolicy OnFailure", func(ctx SpecContext) {
		ns := newNamespace(ctx, "restart")
		createConfig(ctx, ns, progConfig{Depot: "Quarry Lane", Exit: map[string]int{"": 4}})
		pod := progPod("flaky")
		pod.Spec.RestartPolicy = corev1.RestartPolicyOnFailure
		_, err := cluster.Client.CoreV1().Pods(ns).Create(ctx, pod, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())
		Eventually(func(g Gomega) {
			p := getPod(ctx, ns, "flaky")(g)
			cs := p.Status.ContainerStatuses
			g.Expect(cs).To(HaveLen(1))
			g.Expect(cs[0].RestartCount).To(BeNumerically(">=", 1))
			g.Expect(cs[0].LastTerminationState.Terminated).NotTo(BeNil())
			g.Expect(cs[0].LastTerminationState.Terminated.ExitCode).To(Equal(int32(4)))
			g.Expect(p.Status.Phase).NotTo(BeElementOf(corev1.PodSucceeded, corev1.PodFailed))
		}).WithTimeout(20 * time.Second).WithPolling(200 * time.Millisecond).Should(Succeed())
		Expect(cluster.Client.CoreV1().Pods(ns).Delete(ctx, "flaky", metav1.DeleteOptions{GracePeriodSeconds: ptr.To[int64](1)})).To(Succeed())
		Eventually(func() bool {
			_, err := cluster.Client.CoreV1().Pods(ns).Get(ctx, "flaky", metav1.GetOptions{})
			return err != nil
		}).WithTimeout(20 * time.Second).Should(BeTrue())
	}, SpecTimeout(45*time.Second))
})
