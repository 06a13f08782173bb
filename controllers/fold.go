package controllers

import (
	"fmt"
	"sort"
	"strconv"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// jobOutcome is where a Job stands.
type jobOutcome int

const (
	jobRunning jobOutcome = iota
	jobSucceeded
	jobFailed
)

// jobResult reads a Job's terminal condition. Only Complete and Failed count: the interim
// SuccessCriteriaMet and FailureTarget conditions are set while pods may still be running.
// For a failure it returns the Job condition's reason (e.g. DeadlineExceeded,
// BackoffLimitExceeded, PodFailurePolicy, FailedIndexes, MaxFailedIndexesExceeded) and message.
func jobResult(job *batchv1.Job) (outcome jobOutcome, reason, message string) {
	for _, c := range job.Status.Conditions {
		if c.Status != corev1.ConditionTrue {
			continue
		}
		switch c.Type {
		case batchv1.JobComplete:
			return jobSucceeded, c.Reason, c.Message
		case batchv1.JobFailed:
			return jobFailed, c.Reason, c.Message
		}
	}
	return jobRunning, "", ""
}

// terminationMessage is the trainer container's termination message of a pod that ended.
func terminationMessage(pod *corev1.Pod) (string, bool) {
	for _, cs := range pod.Status.ContainerStatuses {
		if cs.Name == trainerContainer && cs.State.Terminated != nil {
			return cs.State.Terminated.Message, true
		}
	}
	return "", false
}

// podIndex is the completion index the Job controller annotated a pod with, or -1.
func podIndex(pod *corev1.Pod) int {
	i, err := strconv.Atoi(pod.Annotations[completionIndexAnnotation])
	if err != nil || i < 0 {
		return -1
	}
	return i
}

// pickPods chooses the pod to read for each index: a Succeeded pod, else the newest Failed one
// (an index retried after failures has several). Pods without an index count as index 0 (the
// single pod of plan and publish).
func pickPods(pods []corev1.Pod) map[int]*corev1.Pod {
	out := map[int]*corev1.Pod{}
	for k := range pods {
		p := &pods[k]
		if p.Status.Phase != corev1.PodSucceeded && p.Status.Phase != corev1.PodFailed {
			continue
		}
		i := max(podIndex(p), 0)
		cur, ok := out[i]
		switch {
		case !ok, cur.Status.Phase != corev1.PodSucceeded && p.Status.Phase == corev1.PodSucceeded:
			out[i] = p
		case cur.Status.Phase == p.Status.Phase && cur.CreationTimestamp.Before(&p.CreationTimestamp):
			out[i] = p
		}
	}
	return out
}

// stepSummary reads the summary of a single-pod step (plan or publish) from its pods. ok is
// false when no finished pod is there yet; err describes a message that is not a summary of
// the expected kind, naming the pod.
func stepSummary(pods []corev1.Pod, kind string) (s summary.Summary, ok bool, err error) {
	p, found := pickPods(pods)[0]
	if !found {
		return s, false, nil
	}
	msg, _ := terminationMessage(p)
	s, err = summary.Decode([]byte(msg))
	if err == nil && s.Kind != kind {
		err = fmt.Errorf("summary kind %q, want %q", s.Kind, kind)
	}
	if err != nil {
		// With FallbackToLogsOnError a trainer that crashed before writing its summary (a
		// fatal runtime error) leaves the tail of its log here: keep its end for the reason.
		if len(msg) > 512 {
			msg = "..." + msg[len(msg)-512:]
		}
		return s, true, fmt.Errorf("pod %s: termination message %q: %w", p.Name, msg, err)
	}
	return s, true, nil
}

// unfoldedIndexes are the indexes the Job reports completed or failed that
// status.shards.folded does not hold yet, in increasing order.
func unfoldedIndexes(st *forecastingv1alpha1.ForecastRunStatus, job *batchv1.Job) ([]int, error) {
	folded, err := parseIndexSet(st.Shards.Folded)
	if err != nil {
		return nil, fmt.Errorf("status.shards.folded: %w", err)
	}
	done, err := parseIndexSet(job.Status.CompletedIndexes)
	if err != nil {
		return nil, fmt.Errorf("job %s status.completedIndexes: %w", job.Name, err)
	}
	if job.Status.FailedIndexes != nil {
		failed, err := parseIndexSet(*job.Status.FailedIndexes)
		if err != nil {
			return nil, fmt.Errorf("job %s status.failedIndexes: %w", job.Name, err)
		}
		for i := range failed {
			done[i] = struct{}{}
		}
	}
	var out []int
	for _, i := range done.sorted() {
		if !folded.has(i) {
			out = append(out, i)
		}
	}
	return out, nil
}

// podShardKey is the IndexPodShard value of the pods of one index of one step of a run.
func podShardKey(run string, s step, index int) string {
	return run + "/" + string(s) + "/" + strconv.Itoa(index)
}

// podShardKeys is the IndexPodShard extractor: the key of a pod that carries the run and step
// labels and the completion-index annotation, none otherwise.
func podShardKeys(pod *corev1.Pod) []string {
	run, s, i := pod.Labels[LabelRun], pod.Labels[LabelStep], podIndex(pod)
	if run == "" || s == "" || i < 0 {
		return nil
	}
	return []string{podShardKey(run, step(s), i)}
}

// foldResult reports what foldShards did.
type foldResult struct {
	// Folded are the indexes folded by this call.
	Folded []int
	// Waiting are finished indexes whose pod is not (yet) in the list; they are not folded
	// unless foldShards was told the list is final.
	Waiting []int
	// Problems are sentences for Warning Events: failed shards, unreadable summaries.
	Problems []string
}

// foldShards folds the summary of every index the train Job reports finished
// (status.completedIndexes and status.failedIndexes) and status.shards.folded does not hold yet
// into the run status, and adds it to folded, so each index counts exactly once however often
// this runs, including after a controller restart (the folded set is in the same status write as
// the sums).
//
// A succeeded index adds its series counts, model counts, accuracy sums (exact, see
// addAccuracy) and hierarchy levels (addLevels). A failed index adds to shards.failed and shards.failedIndexes. A summary that
// cannot be read is a Problem, not an error: that shard's counts are lost but the other shards'
// are kept. When lostOK is true (the caller re-listed pods from the API server), an index with
// no pod at all is folded as lost with a Problem; otherwise it is returned in Waiting.
func foldShards(st *forecastingv1alpha1.ForecastRunStatus, job *batchv1.Job, pods []corev1.Pod, lostOK bool) (foldResult, error) {
	var res foldResult
	folded, err := parseIndexSet(st.Shards.Folded)
	if err != nil {
		return res, fmt.Errorf("status.shards.folded: %w", err)
	}
	failedSet, err := parseIndexSet(st.Shards.FailedIndexes)
	if err != nil {
		return res, fmt.Errorf("status.shards.failedIndexes: %w", err)
	}
	completed, err := parseIndexSet(job.Status.CompletedIndexes)
	if err != nil {
		return res, fmt.Errorf("job %s status.completedIndexes: %w", job.Name, err)
	}
	var failed indexSet = indexSet{}
	if job.Status.FailedIndexes != nil {
		if failed, err = parseIndexSet(*job.Status.FailedIndexes); err != nil {
			return res, fmt.Errorf("job %s status.failedIndexes: %w", job.Name, err)
		}
	}
	byIndex := pickPods(pods)
	models, designs, byShard := map[string]int64{}, map[string]int64{}, map[string]int64{}
	for _, m := range st.Models {
		models[m.Model] = m.Series
	}
	for _, d := range st.Designs {
		designs[d.Design] = d.Series
		if d.ChosenByShard > 0 {
			byShard[d.Design] = d.ChosenByShard
		}
	}
	fold := func(i int, ok bool) {
		p := byIndex[i]
		if p == nil && !lostOK {
			res.Waiting = append(res.Waiting, i)
			return
		}
		folded[i] = struct{}{}
		res.Folded = append(res.Folded, i)
		if !ok {
			failedSet[i] = struct{}{}
			st.Shards.Failed++
			res.Problems = append(res.Problems, failedShardMessage(i, p))
			return
		}
		st.Shards.Succeeded++
		if p == nil {
			res.Problems = append(res.Problems, fmt.Sprintf("shard %d succeeded but its pod is gone; its counts are lost", i))
			return
		}
		if problem := foldTrain(st, models, designs, byShard, i, p); problem != "" {
			res.Problems = append(res.Problems, problem)
		}
	}
	for _, i := range completed.sorted() {
		if !folded.has(i) {
			fold(i, true)
		}
	}
	for _, i := range failed.sorted() {
		if !folded.has(i) && !completed.has(i) {
			fold(i, false)
		}
	}
	st.Shards.Folded = folded.String()
	st.Shards.FailedIndexes = failedSet.String()
	st.Models = modelCounts(models)
	st.Designs = designCounts(designs, byShard)
	return res, nil
}

// foldTrain adds one succeeded shard's summary to the status; it returns a Problem or "".
func foldTrain(st *forecastingv1alpha1.ForecastRunStatus, models, designs, byShard map[string]int64, i int, p *corev1.Pod) string {
	msg, _ := terminationMessage(p)
	s, err := summary.Decode([]byte(msg))
	if err == nil && s.Kind != summary.KindTrain {
		err = fmt.Errorf("summary kind %q, want %q", s.Kind, summary.KindTrain)
	}
	if err == nil && s.Shard != i {
		err = fmt.Errorf("summary is for shard %d", s.Shard)
	}
	if err != nil {
		return fmt.Sprintf("shard %d (pod %s): termination message not counted: %v", i, p.Name, err)
	}
	st.Series.Total += int64(s.Series)
	st.Series.Trained += int64(s.Trained)
	st.Series.Rejected += int64(s.Rejected)
	for m, n := range s.Models {
		models[m] += int64(n)
	}
	for d, n := range s.Designs {
		designs[d] += int64(n)
	}
	for d, n := range s.DesignsByShard {
		byShard[d] += int64(n)
	}
	if s.Accuracy != nil {
		sums, err := addAccuracy(st.AccuracySums, *s.Accuracy)
		if err != nil {
			return fmt.Sprintf("shard %d (pod %s): accuracy not counted: %v", i, p.Name, err)
		}
		st.AccuracySums = sums
	}
	if s.Calibration != nil {
		sums, err := addCalibration(st.CalibrationSums, *s.Calibration)
		if err != nil {
			return fmt.Sprintf("shard %d (pod %s): calibration not counted: %v", i, p.Name, err)
		}
		st.CalibrationSums = sums
	}
	if s.Stability != nil {
		sums, err := addStability(st.StabilitySums, *s.Stability)
		if err != nil {
			return fmt.Sprintf("shard %d (pod %s): stability not counted: %v", i, p.Name, err)
		}
		st.StabilitySums = sums
	}
	if len(s.Levels) > 0 {
		h, err := addLevels(st.Hierarchy, s.Levels)
		if err != nil {
			return fmt.Sprintf("shard %d (pod %s): levels not counted: %v", i, p.Name, err)
		}
		st.Hierarchy = h
	}
	return ""
}

// failedShardMessage says why a shard failed, from its last pod's summary when it has one.
func failedShardMessage(i int, p *corev1.Pod) string {
	if p == nil {
		return fmt.Sprintf("shard %d failed", i)
	}
	msg, _ := terminationMessage(p)
	if s, err := summary.Decode([]byte(msg)); err == nil && s.Error != "" {
		return fmt.Sprintf("shard %d failed (pod %s): %s", i, p.Name, s.Error)
	}
	return fmt.Sprintf("shard %d failed (pod %s, %s)", i, p.Name, exitSummary(p))
}

// exitSummary is the trainer container's exit code and reason, e.g. "exit code 3 (Error)".
func exitSummary(p *corev1.Pod) string {
	for _, cs := range p.Status.ContainerStatuses {
		if t := cs.State.Terminated; cs.Name == trainerContainer && t != nil {
			return fmt.Sprintf("exit code %d (%s)", t.ExitCode, t.Reason)
		}
	}
	return "no exit status"
}

// modelCounts lists the counts sorted by model name, so status writes are stable.
func modelCounts(m map[string]int64) []forecastingv1alpha1.ModelCount {
	out := make([]forecastingv1alpha1.ModelCount, 0, len(m))
	for k, v := range m {
		out = append(out, forecastingv1alpha1.ModelCount{Model: k, Series: v})
	}
	sort.Slice(out, func(a, b int) bool { return out[a].Model < out[b].Model })
	if len(out) == 0 {
		return nil
	}
	return out
}

// designCounts lists the counts sorted by design name, so status writes are stable.
func designCounts(m, byShard map[string]int64) []forecastingv1alpha1.DesignCount {
	if len(m) == 0 {
		return nil
	}
	out := make([]forecastingv1alpha1.DesignCount, 0, len(m))
	for k, v := range m {
		out = append(out, forecastingv1alpha1.DesignCount{Design: k, Series: v, ChosenByShard: byShard[k]})
	}
	sort.Slice(out, func(a, b int) bool { return out[a].Design < out[b].Design })
	return out
}
