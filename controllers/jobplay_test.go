package controllers

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"time"

	. "github.com/onsi/gomega"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// This file plays the Job controller and the kubelet for the envtest suite: it creates the pods
// of a Job from its template (labels, the completion-index annotation), moves them to a final
// phase with a termination message, and updates Job status the way the Job controller does
// (startTime; completedIndexes and failedIndexes; SuccessCriteriaMet then Complete, or
// FailureTarget then Failed, with completionTime), satisfying the apiserver's Job status
// validation.

// getJob waits for a step's Job to exist and returns it.
func getJob(ns, run string, s step) *batchv1.Job {
	var job batchv1.Job
	EventuallyWithOffset(1, func() error {
		return k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: jobName(run, s)}, &job)
	}, 20*time.Second, 100*time.Millisecond).Should(Succeed())
	return &job
}

// getRun reads a run.
func getRun(ns, name string) *forecastingv1alpha1.ForecastRun {
	var run forecastingv1alpha1.ForecastRun
	ExpectWithOffset(1, k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: name}, &run)).To(Succeed())
	return &run
}

// getPortfolio reads a portfolio.
func getPortfolio(ns, name string) *forecastingv1alpha1.ForecastPortfolio {
	var fp forecastingv1alpha1.ForecastPortfolio
	ExpectWithOffset(1, k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: name}, &fp)).To(Succeed())
	return &fp
}

// runPod creates the pod of index i of job and ends it with the exit code and termination
// message, as the kubelet would report them.
func runPod(job *batchv1.Job, i int, attempt int, exitCode int32, message string) {
	ExpectWithOffset(1, playPod(ctx(), k8sClient, job, i, attempt, exitCode, message)).To(Succeed())
}

// playPod is runPod returning its error (the benchmark uses it from several goroutines).
func playPod(ctx context.Context, c client.Client, job *batchv1.Job, i int, attempt int, exitCode int32, message string) error {
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{
			Name:        fmt.Sprintf("%s-%d-%d", job.Name, i, attempt),
			Namespace:   job.Namespace,
			Labels:      job.Spec.Template.Labels,
			Annotations: map[string]string{completionIndexAnnotation: strconv.Itoa(i)},
		},
		Spec: job.Spec.Template.Spec,
	}
	if err := c.Create(ctx, pod); err != nil {
		return err
	}
	phase, reason := corev1.PodSucceeded, "Completed"
	if exitCode != 0 {
		phase, reason = corev1.PodFailed, "Error"
	}
	now := metav1.Now()
	pod.Status = corev1.PodStatus{
		Phase: phase,
		ContainerStatuses: []corev1.ContainerStatus{{
			Name: trainerContainer, Image: pod.Spec.Containers[0].Image,
			State: corev1.ContainerState{Terminated: &corev1.ContainerStateTerminated{
				ExitCode: exitCode, Reason: reason, Message: message, StartedAt: now, FinishedAt: now,
			}},
		}},
	}
	return c.Status().Update(ctx, pod)
}

// updateJobStatus applies mutate to the Job's status, retrying on conflicts (the controller
// patches the Job's parallelism meanwhile).
func updateJobStatus(job *batchv1.Job, mutate func(*batchv1.JobStatus)) {
	ExpectWithOffset(1, playJobStatus(ctx(), k8sClient, job, mutate)).To(Succeed())
}

// playJobStatus is updateJobStatus returning its error; it sets startTime on the first update,
// as the Job controller does, and gives up after 100 conflicts.
func playJobStatus(ctx context.Context, c client.Client, job *batchv1.Job, mutate func(*batchv1.JobStatus)) error {
	var err error
	for range 100 {
		var cur batchv1.Job
		if err = c.Get(ctx, client.ObjectKeyFromObject(job), &cur); err != nil {
			return err
		}
		if cur.Status.StartTime == nil {
			cur.Status.StartTime = ptr.To(metav1.Now())
		}
		mutate(&cur.Status)
		if err = c.Status().Update(ctx, &cur); err == nil {
			*job = cur
			return nil
		}
		if !apierrors.IsConflict(err) {
			return err
		}
		time.Sleep(20 * time.Millisecond)
	}
	return err
}

func jobCondition(t batchv1.JobConditionType, reason string) batchv1.JobCondition {
	now := metav1.Now()
	return batchv1.JobCondition{Type: t, Status: corev1.ConditionTrue, Reason: reason, Message: "set by the test", LastProbeTime: now, LastTransitionTime: now}
}

// markComplete ends a Job status as Complete (SuccessCriteriaMet first, as the apiserver requires).
func markComplete(st *batchv1.JobStatus) {
	st.Active, st.Ready = 0, ptr.To[int32](0)
	st.Conditions = append(st.Conditions,
		jobCondition(batchv1.JobSuccessCriteriaMet, batchv1.JobReasonCompletionsReached),
		jobCondition(batchv1.JobComplete, batchv1.JobReasonCompletionsReached))
	st.CompletionTime = ptr.To(metav1.Now())
}

// completeJob marks a Job Complete.
func completeJob(job *batchv1.Job) { updateJobStatus(job, markComplete) }

// failJob marks a Job Failed with the reason (FailureTarget first, as the apiserver requires).
func failJob(job *batchv1.Job, reason string) {
	updateJobStatus(job, func(st *batchv1.JobStatus) {
		st.Active, st.Ready = 0, ptr.To[int32](0)
		st.Conditions = append(st.Conditions, jobCondition(batchv1.JobFailureTarget, reason), jobCondition(batchv1.JobFailed, reason))
	})
}

// message encodes a summary as a trainer termination message.
func message(s summary.Summary) string {
	b, err := summary.Encode(s)
	Expect(err).NotTo(HaveOccurred())
	return string(b)
}

// succeedSingle plays a plan or publish Job that succeeds with the summary.
func succeedSingle(ns, run string, s step, sum summary.Summary) {
	job := getJob(ns, run, s)
	runPod(job, 0, 0, 0, message(sum))
	updateJobStatus(job, func(st *batchv1.JobStatus) { st.Succeeded = 1 })
	completeJob(job)
}

// finishShards ends the given train indexes: succeeded ones with a train summary from mk,
// failed ones with exit code 3 (broken input data) and an error summary. The Job status
// lists them in completedIndexes / failedIndexes; the Job stays running.
func finishShards(job *batchv1.Job, succeeded, failed []int, mk func(i int) summary.Summary) {
	for _, i := range succeeded {
		s := mk(i)
		s.Kind, s.Shard = summary.KindTrain, i
		runPod(job, i, 0, 0, message(s))
	}
	for _, i := range failed {
		runPod(job, i, 0, 3, message(summary.Summary{Kind: summary.KindTrain, Shard: i, Error: fmt.Sprintf("units/%04d.csv: line 1: no date column", i)}))
	}
	updateJobStatus(job, func(st *batchv1.JobStatus) {
		done, _ := parseIndexSet(st.CompletedIndexes)
		for _, i := range succeeded {
			done[i] = struct{}{}
		}
		st.CompletedIndexes, st.Succeeded = done.String(), int32(len(done))
		if len(failed) > 0 {
			bad := indexSet{}
			if st.FailedIndexes != nil {
				bad, _ = parseIndexSet(*st.FailedIndexes)
			}
			for _, i := range failed {
				bad[i] = struct{}{}
			}
			st.FailedIndexes, st.Failed = ptr.To(bad.String()), int32(len(bad))
		} else if st.FailedIndexes == nil {
			st.FailedIndexes = ptr.To("")
		}
	})
}

// shardSummary is the train summary the lifecycle tests give shard i: 100 + i series, all but
// one trained, and MASE sums expected 0.5*n and realized 0.6*n over n = 10 evaluated series
// (each series expected 0.5 and realized 0.6, so the log sums are n ln 0.5 and n ln 0.6), and
// calibration counts of a calibrated 80% band.
func shardSummary(i int) summary.Summary {
	return summary.Summary{
		Series: 100 + i, Trained: 99 + i, Rejected: 1,
		Models: map[string]int{"ETS": 60, "Theta": 39 + i},
		Accuracy: &summary.Accuracy{Metric: "MASE", Evaluated: 10, EvaluatedPoints: 50, ExpectedSum: 5, RealizedSum: 6, Drifted: 1,
			LogEvaluated: 10, ExpectedLogSum: 10 * math.Log(0.5), RealizedLogSum: 10 * math.Log(0.6)},
		// 50 actuals of 10 series, 5 each: 5 at or below the 0.1 quantile (one in each of 5
		// series: no pairs) and 45 at or below the 0.9 one (5 series with 5, 5 with 4: pairs
		// 5·20 + 5·12 = 160 of 10·20), an 80% band covering 80% as the levels promise (no
		// backtest record), scaled pinball sums 10 and 10, no bias.
		Calibration: &summary.Calibration{Levels: []float64{0.1, 0.9}, Series: 10, Points: 50, Below: []int{5, 45}, PinballSum: []float64{10, 10},
			Pairs: 200, BelowPairs: []int{0, 160}, Expected: []float64{5, 45}, ExpectedVar: []float64{0, 0}, ExpectedPinballSum: []float64{0, 0}},
	}
}

// configOf decodes the run's rendered configuration.
func configOf(ns, run string) map[string]any {
	var out map[string]any
	Expect(json.Unmarshal([]byte(configText(ns, run)), &out)).To(Succeed())
	return out
}

// configText is the run's config.json as the controller wrote it.
func configText(ns, run string) string {
	var cm corev1.ConfigMap
	Expect(k8sClient.Get(ctx(), types.NamespacedName{Namespace: ns, Name: configMapName(run)}, &cm)).To(Succeed())
	return cm.Data["config.json"]
}
