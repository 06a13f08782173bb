package controllers

import (
	"context"
	"fmt"
	"time"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/client-go/kubernetes"
	"k8s.io/utils/ptr"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/log"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// DefaultProgressInterval is how often the run reconciler reads the running train pods'
// progress while a run trains (--progress-interval), the trainer's own line interval.
const DefaultProgressInterval = summary.ProgressInterval

// Bounds of one log read: the last progressTailLines lines, at most progressTailBytes. A
// train pod prints little besides its progress lines (one line per phase and per failed
// unit), so the last progress line is within them.
const (
	progressTailLines = 40
	progressTailBytes = 32 << 10
)

// PodLogs reads the end of a container's log (pods/log, through the API server and the
// node). It is an interface so that tests can stand in for it.
type PodLogs interface {
	Tail(ctx context.Context, namespace, pod, container string) ([]byte, error)
}

// clientLogs reads logs with client-go.
type clientLogs struct{ cs kubernetes.Interface }

// NewPodLogs reads pod logs through cs.
func NewPodLogs(cs kubernetes.Interface) PodLogs { return clientLogs{cs} }

func (c clientLogs) Tail(ctx context.Context, namespace, pod, container string) ([]byte, error) {
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	return c.cs.CoreV1().Pods(namespace).GetLogs(pod, &corev1.PodLogOptions{
		Container: container, TailLines: ptr.To[int64](progressTailLines), LimitBytes: ptr.To[int64](progressTailBytes),
	}).DoRaw(ctx)
}

// readShards reads the last progress line of every running train pod of the run (from the
// cache's pods, then one log read each). A pod whose log cannot be read is marked Unread.
func (r *RunReconciler) readShards(ctx context.Context, run *forecastingv1alpha1.ForecastRun) ([]shardReading, error) {
	pods, err := r.stepPods(ctx, r.Client, run, stepTrain)
	if err != nil {
		return nil, err
	}
	var out []shardReading
	for i := range pods {
		pod := &pods[i]
		if pod.Status.Phase != corev1.PodRunning || pod.DeletionTimestamp != nil {
			continue
		}
		idx := podIndex(pod)
		if idx < 0 {
			continue
		}
		rd := shardReading{Shard: idx}
		for _, cs := range pod.Status.ContainerStatuses {
			if cs.Name == trainerContainer && cs.State.Running != nil {
				rd.Started = cs.State.Running.StartedAt.Time
			}
		}
		if r.Logs == nil {
			rd.Unread = true
		} else if b, err := r.Logs.Tail(ctx, pod.Namespace, pod.Name, trainerContainer); err != nil {
			log.FromContext(ctx).V(1).Info("progress: cannot read the log", "pod", client.ObjectKeyFromObject(pod), "error", err.Error())
			rd.Unread = true
		} else if p, ok := summary.LastProgress(b); ok {
			rd.Progress = &p
		}
		out = append(out, rd)
	}
	return out, nil
}

// trainProgress refreshes status.progress and the ShardsStalled condition from the running
// shards' progress lines, and requeues the run to read them again.
func (r *RunReconciler) trainProgress(ctx context.Context, run *forecastingv1alpha1.ForecastRun, fp *forecastingv1alpha1.ForecastPortfolio, job *batchv1.Job, w *runWork) error {
	st := w.status
	every := r.ProgressInterval
	if every <= 0 {
		every = DefaultProgressInterval
	}
	if w.requeue == 0 || w.requeue > every {
		w.requeue = every
	}
	now := r.Clock.Now()
	if st.Progress != nil && st.Progress.ObservedTime != nil && now.Sub(st.Progress.ObservedTime.Time) < every/2 {
		return nil // read recently: a burst of Job events need not read every log again
	}
	readings, err := r.readShards(ctx, run)
	if err != nil {
		return err
	}
	after := stallAfter(fp)
	p, stalled := nextProgress(st.Progress, st.Series.Total, st.Series.Planned, readings, jobStart(job), now, after)
	st.Progress = p
	r.Metrics.runSeries(run, p, len(stalled))
	switch {
	case len(stalled) > 0:
		setCondition(run, &st.Conditions, forecastingv1alpha1.RunShardsStalled, metav1.ConditionTrue, forecastingv1alpha1.ReasonNoProgress,
			fmt.Sprintf("shards %s of %d running made no progress for %s or more (spec.sharding.stallAfterSeconds %d); their pods: kubectl logs -n %s -l %s=%s,%s=%s",
				p.StalledShards, len(readings), after, int(after.Seconds()), run.Namespace, LabelRun, run.Name, LabelStep, stepTrain), now)
	case meta.FindStatusCondition(st.Conditions, forecastingv1alpha1.RunShardsStalled) != nil || len(readings) > 0:
		setCondition(run, &st.Conditions, forecastingv1alpha1.RunShardsStalled, metav1.ConditionFalse, forecastingv1alpha1.ReasonShardsProgressing,
			fmt.Sprintf("%d shards running, each moved within %s", len(readings), after), now)
	}
	return nil
}

// trainEnded writes the final status.progress once the train Job has ended and clears a
// ShardsStalled condition.
func (r *RunReconciler) trainEnded(run *forecastingv1alpha1.ForecastRun, job *batchv1.Job, w *runWork) {
	st := w.status
	now := r.Clock.Now()
	st.Progress = finalProgress(st.Progress, st.Series.Total, st.Series.Planned, jobStart(job), now)
	r.Metrics.runSeries(run, st.Progress, 0)
	if meta.FindStatusCondition(st.Conditions, forecastingv1alpha1.RunShardsStalled) != nil {
		setCondition(run, &st.Conditions, forecastingv1alpha1.RunShardsStalled, metav1.ConditionFalse, forecastingv1alpha1.ReasonTrainingEnded,
			"the train Job has ended", now)
	}
}

// jobStart is when the Job controller started the Job, else when it was created.
func jobStart(job *batchv1.Job) time.Time {
	if job.Status.StartTime != nil {
		return job.Status.StartTime.Time
	}
	return job.CreationTimestamp.Time
}
