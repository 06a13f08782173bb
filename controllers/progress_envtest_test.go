package controllers

import (
	"context"
	"fmt"
	"strconv"
	"sync"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	"github.com/prometheus/client_golang/prometheus/testutil"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// fakeLogs stands in for pods/log in the envtest suite (envtest has no node to ask): the log
// text per namespace/pod, empty when unset.
type fakeLogs struct {
	mu   sync.Mutex
	logs map[string]string
}

var suiteLogs = &fakeLogs{logs: map[string]string{}}

func (f *fakeLogs) Tail(_ context.Context, namespace, pod, _ string) ([]byte, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	return []byte(f.logs[namespace+"/"+pod]), nil
}

func (f *fakeLogs) set(namespace, pod string, lines ...summary.Progress) {
	f.mu.Lock()
	defer f.mu.Unlock()
	text := "train: shard starting\n"
	for _, p := range lines {
		text += p.Line() + "\n"
	}
	f.logs[namespace+"/"+pod] = text
}

// startPod creates the running pod of index i of a train Job, its container started at started.
func startPod(job *batchv1.Job, i int, started time.Time) string {
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{
			Name: fmt.Sprintf("%s-%d-run", job.Name, i), Namespace: job.Namespace,
			Labels: job.Spec.Template.Labels, Annotations: map[string]string{completionIndexAnnotation: strconv.Itoa(i)},
		},
		Spec: job.Spec.Template.Spec,
	}
	ExpectWithOffset(1, k8sClient.Create(ctx(), pod)).To(Succeed())
	pod.Status = corev1.PodStatus{Phase: corev1.PodRunning, ContainerStatuses: []corev1.ContainerStatus{{
		Name: trainerContainer, Image: pod.Spec.Containers[0].Image,
		State: corev1.ContainerState{Running: &corev1.ContainerStateRunning{StartedAt: metav1.Time{Time: started}}},
	}}}
	ExpectWithOffset(1, k8sClient.Status().Update(ctx(), pod)).To(Succeed())
	return pod.Name
}

var _ = Describe("Training progress", func() {
	It("shows series done, names a shard whose progress stopped in ShardsStalled, and clears it when it moves", func() {
		ns := newNamespace()
		createSecret(ns)
		testPortfolio(ns, "fenwick-progress", yearly, func(fp *forecastingv1alpha1.ForecastPortfolio) {
			fp.Spec.Sharding.StallAfterSeconds = 120
		})
		name := "fenwick-progress-1"
		manualRun(ns, name, "fenwick-progress")
		succeedSingle(ns, name, stepPlan, summary.Summary{Kind: summary.KindPlan, Shards: 2, Series: 200})
		train := getJob(ns, name, stepTrain)
		// Whole seconds: status times (metav1.Time) keep seconds only, and the rate is taken
		// between two of them.
		t0 := fakeClock.Now().Truncate(time.Second)
		fakeClock.SetTime(t0)
		pod0 := startPod(train, 0, t0.Add(-10*time.Minute))
		pod1 := startPod(train, 1, t0.Add(-10*time.Minute))
		// Shard 0 keeps printing but has not moved for 300 s (> 120); shard 1 moved 1 s ago.
		suiteLogs.set(ns, pod0, summary.Progress{Shard: 0, Phase: summary.PhaseFitting, Time: t0, Planned: 100, Done: 60, IdleSeconds: 300})
		suiteLogs.set(ns, pod1, summary.Progress{Shard: 1, Phase: summary.PhaseFitting, Time: t0, Planned: 100, Done: 40, IdleSeconds: 1})
		run := &forecastingv1alpha1.ForecastRun{ObjectMeta: metav1.ObjectMeta{Namespace: ns, Name: name}}
		// readAt moves the fake clock to t, which makes the next requeue read the logs again,
		// and waits for the status of that read.
		readAt := func(t time.Time) *forecastingv1alpha1.RunProgress {
			GinkgoHelper()
			fakeClock.SetTime(t)
			var p *forecastingv1alpha1.RunProgress
			Eventually(func(g Gomega) {
				p = getRun(ns, name).Status.Progress
				g.Expect(p).NotTo(BeNil())
				g.Expect(p.ObservedTime).NotTo(BeNil())
				g.Expect(p.ObservedTime.Time).To(BeTemporally("==", t))
			}).Should(Succeed())
			return p
		}
		// Until the cache holds both running pods.
		var p *forecastingv1alpha1.RunProgress
		for k := 1; k <= 10; k++ {
			if p = readAt(t0.Add(time.Duration(k) * time.Second)); p.RunningShards == 2 {
				break
			}
		}
		Expect(conditionOf(run, forecastingv1alpha1.RunShardsStalled)()).To(Equal("True/NoProgress"))
		run = getRun(ns, name)
		Expect(meta.FindStatusCondition(run.Status.Conditions, forecastingv1alpha1.RunShardsStalled).Message).To(
			ContainSubstring("shards 0 of 2 running made no progress for 2m0s or more (spec.sharding.stallAfterSeconds 120)"))
		Expect(p.SeriesDone).To(Equal(int64(100)))
		Expect(p.SeriesPlanned).To(Equal(int64(200)))
		Expect(p.Percent).To(Equal(int32(50)))
		Expect(p.RunningShards).To(Equal(int32(2)))
		Expect(p.StalledShards).To(Equal("0"))
		// Whether earlier reads gave a rate depends on when the pods' lines appeared: none
		// ("") is a rate of 0.
		rate1, _ := strconv.ParseFloat(p.SeriesPerSecond, 64)
		labels := []string{ns, "fenwick-progress", name}
		Expect(testutil.ToFloat64(suiteMetrics.stalled.WithLabelValues(labels...))).To(Equal(1.0))
		Expect(testutil.ToFloat64(suiteMetrics.seriesDone.WithLabelValues(labels...))).To(Equal(100.0))

		By("shard 0 moves again: 60 more series in the next minute")
		prev := p.ObservedTime.Time
		t1 := prev.Add(time.Minute)
		suiteLogs.set(ns, pod0, summary.Progress{Shard: 0, Phase: summary.PhaseFitting, Time: t1, Planned: 100, Done: 100})
		suiteLogs.set(ns, pod1, summary.Progress{Shard: 1, Phase: summary.PhaseFitting, Time: t1, Planned: 100, Done: 60})
		p = readAt(t1)
		Expect(conditionOf(run, forecastingv1alpha1.RunShardsStalled)()).To(Equal("False/ShardsProgressing"))
		// 60 series over the 60 s between the two reads (1 per second), smoothed with weight 0.5
		// against the rate before; 40 series left at that rate.
		Expect(p.SeriesDone).To(Equal(int64(160)))
		rate2 := 0.5*1 + 0.5*rate1
		if rate1 == 0 {
			rate2 = 1 // the first rate is the change itself
		}
		Expect(p.SeriesPerSecond).To(Equal(formatRate(rate2)))
		end := t1.Add(time.Duration(40 / rate2 * float64(time.Second)))
		Expect(p.EstimatedEnd.Time).To(BeTemporally("~", end, time.Second))
		Expect(p.StalledShards).To(BeEmpty())
		Expect(testutil.ToFloat64(suiteMetrics.stalled.WithLabelValues(labels...))).To(Equal(0.0))
		Expect(testutil.ToFloat64(suiteMetrics.remaining.WithLabelValues(labels...))).To(BeNumerically("~", 40/rate2, 1))

		By("the train Job ends (here past its deadline): the condition is cleared and the run stops holding shard budget")
		failJob(train, batchv1.JobReasonDeadlineExceeded)
		Eventually(conditionOf(run, forecastingv1alpha1.RunShardsStalled)).Should(Equal("False/TrainingEnded"))
		Eventually(phaseOf(ns, name)).Should(Equal(forecastingv1alpha1.PhaseFailed))
		Expect(getRun(ns, name).Status.Progress.Percent).To(Equal(int32(100)))
	})
})
