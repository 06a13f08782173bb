package e2e

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"syscall"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"
)

// progConfig is the test program's config file (see test/localnode/testdata/prog).
type progConfig struct {
	Depot        string         `json:"depot"`
	Exit         map[string]int `json:"exit,omitempty"`
	FirstAttempt map[string]int `json:"firstAttempt,omitempty"`
}

// createConfig stores cfg as config.json in ConfigMap "prog-config".
func createConfig(ctx context.Context, ns string, cfg progConfig) {
	b, err := json.Marshal(cfg)
	Expect(err).NotTo(HaveOccurred())
	_, err = cluster.Client.CoreV1().ConfigMaps(ns).Create(ctx, &corev1.ConfigMap{
		ObjectMeta: metav1.ObjectMeta{Name: "prog-config"},
		Data:       map[string]string{"config.json": string(b)},
	}, metav1.CreateOptions{})
	Expect(err).NotTo(HaveOccurred())
}

// indexedJob returns an Indexed Job of the test program with the config mounted at
// /etc/prog, an emptyDir at /tmp, the termination message at /dev/termination-log and the
// per-index failure count in INDEX_FAILURES.
func indexedJob(name string, completions int32, extraArgs ...string) *batchv1.Job {
	return &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{Name: name},
		Spec: batchv1.JobSpec{
			CompletionMode: ptr.To(batchv1.IndexedCompletion),
			Completions:    ptr.To(completions),
			Parallelism:    ptr.To(completions),
			Template: corev1.PodTemplateSpec{Spec: corev1.PodSpec{
				RestartPolicy:                 corev1.RestartPolicyNever,
				TerminationGracePeriodSeconds: ptr.To[int64](5),
				Containers: []corev1.Container{{
					Name:  "prog",
					Image: progImage,
					Args: append([]string{"--config", "/etc/prog/config.json", "--termination-log", "/dev/termination-log",
						"--scratch", "/tmp"}, extraArgs...),
					Env: []corev1.EnvVar{
						{Name: "INDEX_FAILURES", ValueFrom: &corev1.EnvVarSource{FieldRef: &corev1.ObjectFieldSelector{
							FieldPath: "metadata.annotations['" + batchv1.JobIndexFailureCountAnnotation + "']"}}},
						{Name: "POD_NAME", ValueFrom: &corev1.EnvVarSource{FieldRef: &corev1.ObjectFieldSelector{FieldPath: "metadata.name"}}},
					},
					VolumeMounts: []corev1.VolumeMount{
						{Name: "config", MountPath: "/etc/prog", ReadOnly: true},
						{Name: "scratch", MountPath: "/tmp"},
					},
					TerminationMessagePath:   "/dev/termination-log",
					TerminationMessagePolicy: corev1.TerminationMessageReadFile,
				}},
				Volumes: []corev1.Volume{
					{Name: "config", VolumeSource: corev1.VolumeSource{ConfigMap: &corev1.ConfigMapVolumeSource{
						LocalObjectReference: corev1.LocalObjectReference{Name: "prog-config"}}}},
					{Name: "scratch", VolumeSource: corev1.VolumeSource{EmptyDir: &corev1.EmptyDirVolumeSource{}}},
				},
			}},
		},
	}
}

// jobPods lists the Job's pods sorted by completion index, then creation time.
func jobPods(ctx context.Context, ns, job string) []corev1.Pod {
	list, err := cluster.Client.CoreV1().Pods(ns).List(ctx, metav1.ListOptions{LabelSelector: batchv1.JobNameLabel + "=" + job})
	Expect(err).NotTo(HaveOccurred())
	pods := list.Items
	sort.Slice(pods, func(i, j int) bool {
		a, b := pods[i].Annotations[batchv1.JobCompletionIndexAnnotation], pods[j].Annotations[batchv1.JobCompletionIndexAnnotation]
		if a != b {
			return a < b
		}
		return pods[i].CreationTimestamp.Before(&pods[j].CreationTimestamp)
	})
	return pods
}

// jobCondition returns the Job's condition of type t, or nil.
func jobCondition(ctx context.Context, ns, name string, t batchv1.JobConditionType) func(Gomega) *batchv1.JobCondition {
	return func(g Gomega) *batchv1.JobCondition {
		job, err := cluster.Client.BatchV1().Jobs(ns).Get(ctx, name, metav1.GetOptions{})
		g.Expect(err).NotTo(HaveOccurred())
		for i := range job.Status.Conditions {
			if c := job.Status.Conditions[i]; c.Type == t && c.Status == corev1.ConditionTrue {
				return &c
			}
		}
		return nil
	}
}

// terminated returns the pod's container termination state, or nil.
func terminated(p corev1.Pod) *corev1.ContainerStateTerminated {
	if len(p.Status.ContainerStatuses) == 0 {
		return nil
	}
	return p.Status.ContainerStatuses[0].State.Terminated
}

var _ = Describe("Indexed Jobs through localnode and the real Job controller", func() {
	It("completes every index and reports each termination message", func(ctx SpecContext) {
		start := time.Now()
		ns := newNamespace(ctx, "complete")
		createConfig(ctx, ns, progConfig{Depot: "Harlow Road"})
		_, err := cluster.Client.BatchV1().Jobs(ns).Create(ctx, indexedJob("weekly-dairy", 3), metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())

		Eventually(jobCondition(ctx, ns, "weekly-dairy", batchv1.JobComplete)).WithTimeout(60 * time.Second).
			WithPolling(250 * time.Millisecond).ShouldNot(BeNil())
		pods := jobPods(ctx, ns, "weekly-dairy")
		Expect(pods).To(HaveLen(3), "one pod per index, none retried")
		for i, p := range pods {
			Expect(p.Annotations[batchv1.JobCompletionIndexAnnotation]).To(Equal(strconv.Itoa(i)))
			Expect(p.Status.Phase).To(Equal(corev1.PodSucceeded))
			t := terminated(p)
			Expect(t).NotTo(BeNil())
			Expect(t.ExitCode).To(BeZero())
			Expect(t.Reason).To(Equal("Completed"))
			// The index comes from JOB_COMPLETION_INDEX, which the Job controller injects as a
			// fieldRef to the completion index annotation; the depot from the mounted ConfigMap.
			Expect(t.Message).To(Equal(fmt.Sprintf("index=%d depot=Harlow Road failures=0 exit=0", i)))
			// /tmp was rewritten to the pod's emptyDir directory.
			scratch, err := filepath.Glob(filepath.Join(suiteDir, "pods", ns, p.Name+"-*", "volumes", "scratch", "index-"+strconv.Itoa(i)))
			Expect(err).NotTo(HaveOccurred())
			Expect(scratch).To(HaveLen(1))
		}
		job, err := cluster.Client.BatchV1().Jobs(ns).Get(ctx, "weekly-dairy", metav1.GetOptions{})
		Expect(err).NotTo(HaveOccurred())
		Expect(job.Status.CompletedIndexes).To(Equal("0-2"))
		Expect(job.Status.Succeeded).To(Equal(int32(3)))
		GinkgoWriter.Printf("3 indexes completed in %s\n", time.Since(start).Round(time.Millisecond))
	}, SpecTimeout(90*time.Second))

	// Semantics from the Kubernetes documentation, "Jobs" page, sections "Backoff limit per
	// index" and "Pod failure policy" (kubernetes.io/docs/concepts/workloads/controllers/job/):
	// FailIndex fails the index at once without using its backoff; other failures are retried
	// up to backoffLimitPerIndex; the Job fails with reason FailedIndexes
	// (batchv1.JobReasonFailedIndexes, k8s.io/api v0.37.2) when all indexes are done and one failed.
	It("fails an index at once on exit code 2 and retries a transient exit 1", func(ctx SpecContext) {
		start := time.Now()
		ns := newNamespace(ctx, "policy")
		createConfig(ctx, ns, progConfig{Depot: "Quarry Lane", Exit: map[string]int{"1": 2}, FirstAttempt: map[string]int{"2": 1}})
		job := indexedJob("weekly-bakery", 3)
		job.Spec.BackoffLimitPerIndex = ptr.To[int32](1)
		job.Spec.PodFailurePolicy = &batchv1.PodFailurePolicy{Rules: []batchv1.PodFailurePolicyRule{{
			Action:      batchv1.PodFailurePolicyActionFailIndex,
			OnExitCodes: &batchv1.PodFailurePolicyOnExitCodesRequirement{Operator: batchv1.PodFailurePolicyOnExitCodesOpIn, Values: []int32{2}},
		}}}
		_, err := cluster.Client.BatchV1().Jobs(ns).Create(ctx, job, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())

		var failed *batchv1.JobCondition
		Eventually(func(g Gomega) {
			failed = jobCondition(ctx, ns, "weekly-bakery", batchv1.JobFailed)(g)
			g.Expect(failed).NotTo(BeNil())
		}).WithTimeout(75 * time.Second).WithPolling(250 * time.Millisecond).Should(Succeed())
		Expect(failed.Reason).To(Equal(batchv1.JobReasonFailedIndexes))
		got, err := cluster.Client.BatchV1().Jobs(ns).Get(ctx, "weekly-bakery", metav1.GetOptions{})
		Expect(err).NotTo(HaveOccurred())
		Expect(ptr.Deref(got.Status.FailedIndexes, "")).To(Equal("1"))
		Expect(got.Status.CompletedIndexes).To(Equal("0,2"))

		byIndex := map[string][]corev1.Pod{}
		for _, p := range jobPods(ctx, ns, "weekly-bakery") {
			i := p.Annotations[batchv1.JobCompletionIndexAnnotation]
			byIndex[i] = append(byIndex[i], p)
		}
		Expect(byIndex["0"]).To(HaveLen(1))
		Expect(byIndex["1"]).To(HaveLen(1), "FailIndex: no retry of index 1")
		Expect(terminated(byIndex["1"][0]).ExitCode).To(Equal(int32(2)))
		Expect(terminated(byIndex["1"][0]).Reason).To(Equal("Error"))
		Expect(terminated(byIndex["1"][0]).Message).To(Equal("index=1 depot=Quarry Lane failures=0 exit=2"))
		Expect(byIndex["2"]).To(HaveLen(2), "exit 1 is retried once")
		Expect(terminated(byIndex["2"][0]).ExitCode).To(Equal(int32(1)))
		Expect(byIndex["2"][1].Status.Phase).To(Equal(corev1.PodSucceeded))
		// The replacement pod carries the failure count the Job controller annotated.
		Expect(terminated(byIndex["2"][1]).Message).To(Equal("index=2 depot=Quarry Lane failures=1 exit=0"))
		GinkgoWriter.Printf("failure policy scenario took %s\n", time.Since(start).Round(time.Millisecond))
	}, SpecTimeout(100*time.Second))

	It("deletes the pods of a deleted Job and ends their processes", func(ctx SpecContext) {
		start := time.Now()
		ns := newNamespace(ctx, "delete")
		createConfig(ctx, ns, progConfig{Depot: "Mill Street"})
		pidDir := filepath.Join(suiteDir, "pids-"+ns)
		Expect(os.MkdirAll(pidDir, 0o755)).To(Succeed())
		job := indexedJob("weekly-produce", 2, "--pid-dir", "/var/run/prog", "--sleep", "10m")
		spec := &job.Spec.Template.Spec
		spec.Volumes = append(spec.Volumes, corev1.Volume{Name: "pids", VolumeSource: corev1.VolumeSource{HostPath: &corev1.HostPathVolumeSource{Path: pidDir}}})
		spec.Containers[0].VolumeMounts = append(spec.Containers[0].VolumeMounts, corev1.VolumeMount{Name: "pids", MountPath: "/var/run/prog"})
		_, err := cluster.Client.BatchV1().Jobs(ns).Create(ctx, job, metav1.CreateOptions{})
		Expect(err).NotTo(HaveOccurred())

		var pids []int
		Eventually(func(g Gomega) {
			pods := jobPods(ctx, ns, "weekly-produce")
			g.Expect(pods).To(HaveLen(2))
			pids = nil
			for _, p := range pods {
				g.Expect(p.Status.Phase).To(Equal(corev1.PodRunning))
				g.Expect(p.Status.StartTime).NotTo(BeNil())
				g.Expect(p.Status.ContainerStatuses[0].State.Running).NotTo(BeNil())
				b, err := os.ReadFile(filepath.Join(pidDir, p.Name+".pid"))
				g.Expect(err).NotTo(HaveOccurred())
				pid, err := strconv.Atoi(string(b))
				g.Expect(err).NotTo(HaveOccurred())
				pids = append(pids, pid)
			}
		}).WithTimeout(30 * time.Second).WithPolling(250 * time.Millisecond).Should(Succeed())
		for _, pid := range pids {
			Expect(syscall.Kill(pid, 0)).To(Succeed(), "process %d runs", pid)
		}

		Expect(cluster.Client.BatchV1().Jobs(ns).Delete(ctx, "weekly-produce",
			metav1.DeleteOptions{PropagationPolicy: ptr.To(metav1.DeletePropagationBackground)})).To(Succeed())
		Eventually(func(g Gomega) {
			g.Expect(jobPods(ctx, ns, "weekly-produce")).To(BeEmpty())
		}).WithTimeout(45 * time.Second).WithPolling(250 * time.Millisecond).Should(Succeed())
		for _, pid := range pids {
			Expect(errors.Is(syscall.Kill(pid, 0), syscall.ESRCH)).To(BeTrue(), "process %d is gone", pid)
		}
		GinkgoWriter.Printf("deletion scenario took %s\n", time.Since(start).Round(time.Millisecond))
	}, SpecTimeout(90*time.Second))
})
