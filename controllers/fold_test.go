package controllers

import (
	"encoding/json"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/summary"
)

// finishedPod is a train pod of index i that ended in phase with the given termination message.
func finishedPod(i int, phase corev1.PodPhase, message string, created time.Time) corev1.Pod {
	code := int32(0)
	if phase == corev1.PodFailed {
		code = 3
	}
	return corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{
			Name:              "run-train-" + strconv.Itoa(i) + "-" + strconv.FormatInt(created.Unix(), 10),
			Annotations:       map[string]string{completionIndexAnnotation: strconv.Itoa(i)},
			CreationTimestamp: metav1.Time{Time: created},
		},
		Status: corev1.PodStatus{Phase: phase, ContainerStatuses: []corev1.ContainerStatus{{
			Name:  trainerContainer,
			State: corev1.ContainerState{Terminated: &corev1.ContainerStateTerminated{ExitCode: code, Message: message}},
		}}},
	}
}

func trainMessage(t *testing.T, s summary.Summary) string {
	t.Helper()
	s.Kind = summary.KindTrain
	b, err := json.Marshal(s)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func trainJob(completed, failed string) *batchv1.Job {
	j := &batchv1.Job{ObjectMeta: metav1.ObjectMeta{Name: "run-train"}}
	j.Status.CompletedIndexes = completed
	if failed != "" {
		j.Status.FailedIndexes = ptr.To(failed)
	}
	return j
}

func TestFoldShardsCountsEachIndexOnce(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 3, 0, 0, 0, time.UTC)
	acc := func(exp, real float64) *summary.Accuracy {
		return &summary.Accuracy{Metric: "MASE", Evaluated: 10, EvaluatedPoints: 40, ExpectedSum: exp, RealizedSum: real, Drifted: 1}
	}
	pods := []corev1.Pod{
		finishedPod(0, corev1.PodSucceeded, trainMessage(t, summary.Summary{Shard: 0, Series: 12, Trained: 11, Rejected: 1,
			Models: map[string]int{"ETS": 7, "Naive": 4}, Designs: map[string]int{"ets-theta": 7, "per-series": 4}, DesignsByShard: map[string]int{"per-series": 3},
			Accuracy: acc(8.5, 9.25)}), t0),
		finishedPod(1, corev1.PodSucceeded, trainMessage(t, summary.Summary{Shard: 1, Series: 10, Trained: 10,
			Models: map[string]int{"ETS": 10}, Designs: map[string]int{"ets-theta": 10}, DesignsByShard: map[string]int{"ets-theta": 2}, Accuracy: acc(0.1, 0.2)}), t0),
		// Index 2 failed twice; the newer pod's summary is the one reported.
		finishedPod(2, corev1.PodFailed, `{"kind":"train","shard":2,"error":"old"}`, t0),
		finishedPod(2, corev1.PodFailed, `{"kind":"train","shard":2,"error":"units/0007: bad header at line 1"}`, t0.Add(time.Minute)),
	}
	var st forecastingv1alpha1.ForecastRunStatus
	res, err := foldShards(&st, trainJob("0", ""), pods, false)
	if err != nil {
		t.Fatal(err)
	}
	if diff := cmp.Diff([]int{0}, res.Folded); diff != "" {
		t.Errorf("first fold (-want,+got):\n%s", diff)
	}
	// The Job now reports more indexes finished; folding again must add only the new ones, and
	// a third call with nothing new must change nothing.
	for range 2 {
		if _, err := foldShards(&st, trainJob("0-1", "2"), pods, false); err != nil {
			t.Fatal(err)
		}
	}
	if st.Shards.Folded != "0-2" || st.Shards.FailedIndexes != "2" || st.Shards.Succeeded != 2 || st.Shards.Failed != 1 {
		t.Errorf("shards = %+v", st.Shards)
	}
	if diff := cmp.Diff(forecastingv1alpha1.SeriesCounts{Total: 22, Trained: 21, Rejected: 1}, st.Series); diff != "" {
		t.Errorf("series (-want,+got):\n%s", diff)
	}
	wantModels := []forecastingv1alpha1.ModelCount{{Model: "ETS", Series: 17}, {Model: "Naive", Series: 4}}
	if diff := cmp.Diff(wantModels, st.Models); diff != "" {
		t.Errorf("models (-want,+got):\n%s", diff)
	}
	// Of 21 series, 3 per-series and 2 ets-theta had their design chosen by their shard (a
	// segment the plan's sample did not hold); the rest the plan's.
	wantDesigns := []forecastingv1alpha1.DesignCount{{Design: "ets-theta", Series: 17, ChosenByShard: 2}, {Design: "per-series", Series: 4, ChosenByShard: 3}}
	if diff := cmp.Diff(wantDesigns, st.Designs); diff != "" {
		t.Errorf("designs (-want,+got):\n%s", diff)
	}
	// 8.5 + 0.1 and 9.25 + 0.2 as exact sums of the float64 values: 0.1 and 0.2 are not
	// decimal in binary, so the exact sums carry their binary expansions (see addAccuracy).
	if st.AccuracySums.Evaluated != 20 || st.AccuracySums.EvaluatedPoints != 80 || st.AccuracySums.Drifted != 2 {
		t.Errorf("accuracy sums counts = %+v", st.AccuracySums)
	}
	if !strings.HasPrefix(st.AccuracySums.ExpectedSum, "8.6000000000000000055511151231257827") {
		t.Errorf("expected sum = %s", st.AccuracySums.ExpectedSum)
	}
}

func TestFoldShardsProblems(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 3, 0, 0, 0, time.UTC)
	pods := []corev1.Pod{
		finishedPod(0, corev1.PodSucceeded, "not json", t0),
		finishedPod(1, corev1.PodSucceeded, trainMessage(t, summary.Summary{Shard: 4, Trained: 3}), t0),
		finishedPod(2, corev1.PodSucceeded, trainMessage(t, summary.Summary{Shard: 2, Series: 5, Trained: 5}), t0),
		finishedPod(3, corev1.PodFailed, "", t0),
	}
	var st forecastingv1alpha1.ForecastRunStatus
	res, err := foldShards(&st, trainJob("0-2,5", "3"), pods, false)
	if err != nil {
		t.Fatal(err)
	}
	if diff := cmp.Diff([]int{5}, res.Waiting); diff != "" {
		t.Errorf("waiting (-want,+got):\n%s", diff)
	}
	if st.Shards.Folded != "0-3" {
		t.Errorf("folded = %q, want 0-3 (index 5 waits for its pod)", st.Shards.Folded)
	}
	// One unreadable summary does not lose the good shard's counts.
	if st.Series.Trained != 5 {
		t.Errorf("trained = %d, want 5", st.Series.Trained)
	}
	want := []string{"shard 0 (pod", "shard 1 (pod", "summary is for shard 4", "shard 3 failed (pod", "exit code 3"}
	joined := strings.Join(res.Problems, "\n")
	for _, w := range want {
		if !strings.Contains(joined, w) {
			t.Errorf("problems %q lack %q", joined, w)
		}
	}
	// Told the pod list is final, the waiting index is folded as lost.
	res, err = foldShards(&st, trainJob("0-2,5", "3"), pods, true)
	if err != nil {
		t.Fatal(err)
	}
	if st.Shards.Folded != "0-3,5" || st.Shards.Succeeded != 4 || len(res.Problems) != 1 {
		t.Errorf("after final fold: shards %+v, problems %q", st.Shards, res.Problems)
	}
}

func TestFoldShardsBadIndexSet(t *testing.T) {
	st := forecastingv1alpha1.ForecastRunStatus{Shards: forecastingv1alpha1.ShardCounts{Folded: "3-1"}}
	if _, err := foldShards(&st, trainJob("0", ""), nil, false); err == nil || !strings.Contains(err.Error(), "status.shards.folded") {
		t.Fatalf("err = %v, want one naming status.shards.folded", err)
	}
}

func TestStepSummary(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 3, 0, 0, 0, time.UTC)
	plan := finishedPod(0, corev1.PodSucceeded, `{"kind":"plan","shards":7,"units":9,"series":1300}`, t0)
	delete(plan.Annotations, completionIndexAnnotation)
	s, ok, err := stepSummary([]corev1.Pod{plan}, summary.KindPlan)
	if err != nil || !ok || s.Shards != 7 || s.Series != 1300 {
		t.Errorf("plan summary = %+v, %v, %v", s, ok, err)
	}
	if _, ok, _ := stepSummary(nil, summary.KindPlan); ok {
		t.Error("no pods: ok = true")
	}
	_, _, err = stepSummary([]corev1.Pod{plan}, summary.KindPublish)
	if err == nil || !strings.Contains(err.Error(), plan.Name) {
		t.Errorf("wrong kind: err = %v, want one naming the pod", err)
	}
}

func TestJobResult(t *testing.T) {
	tests := map[string]struct {
		conds []batchv1.JobCondition
		want  jobOutcome
	}{
		"running":          {want: jobRunning},
		"failure target":   {conds: []batchv1.JobCondition{{Type: batchv1.JobFailureTarget, Status: corev1.ConditionTrue}}, want: jobRunning},
		"success criteria": {conds: []batchv1.JobCondition{{Type: batchv1.JobSuccessCriteriaMet, Status: corev1.ConditionTrue}}, want: jobRunning},
		"complete":         {conds: []batchv1.JobCondition{{Type: batchv1.JobComplete, Status: corev1.ConditionTrue}}, want: jobSucceeded},
		"failed":           {conds: []batchv1.JobCondition{{Type: batchv1.JobFailed, Status: corev1.ConditionTrue, Reason: "DeadlineExceeded"}}, want: jobFailed},
		"failed is false":  {conds: []batchv1.JobCondition{{Type: batchv1.JobFailed, Status: corev1.ConditionFalse}}, want: jobRunning},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			j := &batchv1.Job{Status: batchv1.JobStatus{Conditions: tc.conds}}
			if got, _, _ := jobResult(j); got != tc.want {
				t.Errorf("outcome = %v, want %v", got, tc.want)
			}
		})
	}
}

func TestUnfoldedIndexes(t *testing.T) {
	st := forecastingv1alpha1.ForecastRunStatus{Shards: forecastingv1alpha1.ShardCounts{Folded: "0-2,5"}}
	got, err := unfoldedIndexes(&st, trainJob("0-4", "5-7"))
	if err != nil {
		t.Fatal(err)
	}
	if diff := cmp.Diff([]int{3, 4, 6, 7}, got); diff != "" {
		t.Errorf("unfolded (-want,+got):\n%s", diff)
	}
	if _, err := unfoldedIndexes(&st, trainJob("0-x", "")); err == nil || !strings.Contains(err.Error(), "completedIndexes") {
		t.Errorf("bad completedIndexes: err = %v", err)
	}
}

func TestPodShardKeys(t *testing.T) {
	pod := finishedPod(7, corev1.PodSucceeded, "", time.Time{})
	if got := podShardKeys(&pod); got != nil {
		t.Errorf("pod without run labels: keys %v", got)
	}
	pod.Labels = map[string]string{LabelRun: "fenwick-weekly-29933550", LabelStep: "train"}
	if diff := cmp.Diff([]string{"fenwick-weekly-29933550/train/7"}, podShardKeys(&pod)); diff != "" {
		t.Errorf("keys (-want,+got):\n%s", diff)
	}
}
