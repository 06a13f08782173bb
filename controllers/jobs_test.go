package controllers

import (
	"time"

	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/resource"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

func TestBuildTrainJob(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Sharding.MaxFailedShards = ptr.To[int32](5)
	fp.Spec.Sharding.RetriesPerShard = ptr.To[int32](3)
	fp.Spec.Sharding.MaxParallel = 6
	fp.Spec.Trainer.PriorityClassName = "batch-low"
	fp.Spec.Trainer.NodeSelector = map[string]string{"pool": "forecast"}
	fp.Spec.Trainer.Resources.Requests = corev1.ResourceList{corev1.ResourceCPU: resource.MustParse("500m")}
	run := fenwickRun("fenwick-weekly-29407950")
	job := buildJob(fp, run, stepTrain, jobParams{Shards: 3, Parallelism: 2})

	if job.Name != "fenwick-weekly-29407950-train" {
		t.Errorf("name = %q", job.Name)
	}
	checks := map[string]struct{ got, want any }{
		"completion mode":    {*job.Spec.CompletionMode, batchv1.IndexedCompletion},
		"completions":        {*job.Spec.Completions, int32(3)},
		"parallelism":        {*job.Spec.Parallelism, int32(2)},
		"backoff per index":  {*job.Spec.BackoffLimitPerIndex, int32(3)},
		"max failed indexes": {*job.Spec.MaxFailedIndexes, int32(3)}, // capped at completions
		"no job backoff":     {job.Spec.BackoffLimit, (*int32)(nil)},
		"ttl":                {*job.Spec.TTLSecondsAfterFinished, int32(86400)},
		"run label":          {job.Spec.Template.Labels[LabelRun], run.Name},
		"step label":         {job.Spec.Template.Labels[LabelStep], "train"},
		"max parallel note":  {job.Annotations[annotationMaxParallel], "6"},
		"permanent action":   {job.Spec.PodFailurePolicy.Rules[0].Action, batchv1.PodFailurePolicyActionFailIndex},
		"permanent codes":    {job.Spec.PodFailurePolicy.Rules[0].OnExitCodes.Values, []int32{2, 3, 5}},
		"disruption ignored": {job.Spec.PodFailurePolicy.Rules[1].Action, batchv1.PodFailurePolicyActionIgnore},
		"disruption type":    {job.Spec.PodFailurePolicy.Rules[1].OnPodConditions[0].Type, corev1.DisruptionTarget},
	}
	for name, c := range checks {
		if diff := cmp.Diff(c.want, c.got); diff != "" {
			t.Errorf("%s (-want,+got):\n%s", name, diff)
		}
	}
	maxParallel, weight := jobShareLimits(job)
	if maxParallel != 6 || weight != 1 {
		t.Errorf("jobShareLimits = %d, %d; want 6, 1", maxParallel, weight)
	}
}

func TestBuildPlanJobAndPod(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Trainer.PriorityClassName = "batch-low"
	fp.Spec.Trainer.NodeSelector = map[string]string{"pool": "forecast"}
	run := fenwickRun("fenwick-weekly-29407950")
	job := buildJob(fp, run, stepPlan, jobParams{Created: time.Date(2026, 12, 7, 4, 30, 0, 0, time.UTC)})
	if job.Spec.CompletionMode != nil || *job.Spec.Completions != 1 || *job.Spec.BackoffLimit != 2 {
		t.Errorf("plan job spec: mode %v completions %d backoff %d", job.Spec.CompletionMode, *job.Spec.Completions, *job.Spec.BackoffLimit)
	}
	if a := job.Spec.PodFailurePolicy.Rules[0].Action; a != batchv1.PodFailurePolicyActionFailJob {
		t.Errorf("permanent exit codes action = %s, want FailJob", a)
	}
	pod := job.Spec.Template.Spec
	c := pod.Containers[0]
	// The plan Job's default deadline is 7200 s: the trainer must end 2 minutes before it.
	wantArgs := []string{"plan", "--config", "/etc/almanac/run/config.json", "--termination-log", "/dev/termination-log",
		"--step-deadline", "2026-12-07T06:28:00Z"}
	if diff := cmp.Diff(wantArgs, c.Args); diff != "" {
		t.Errorf("args (-want,+got):\n%s", diff)
	}
	if c.Command != nil {
		t.Errorf("command = %v, want the image entrypoint", c.Command)
	}
	// Restricted Pod Security Standard (Kubernetes docs, "Pod Security Standards", restricted
	// profile): non-root, no privilege escalation, all capabilities dropped, RuntimeDefault seccomp.
	sc := c.SecurityContext
	checks := map[string]struct{ got, want any }{
		"restart":          {pod.RestartPolicy, corev1.RestartPolicyNever},
		"no token":         {*pod.AutomountServiceAccountToken, false},
		"non-root pod":     {*pod.SecurityContext.RunAsNonRoot, true},
		"pod seccomp":      {pod.SecurityContext.SeccompProfile.Type, corev1.SeccompProfileTypeRuntimeDefault},
		"non-root":         {*sc.RunAsNonRoot, true},
		"read-only root":   {*sc.ReadOnlyRootFilesystem, true},
		"no escalation":    {*sc.AllowPrivilegeEscalation, false},
		"caps dropped":     {sc.Capabilities.Drop, []corev1.Capability{"ALL"}},
		"termination path": {c.TerminationMessagePath, "/dev/termination-log"},
		"message policy":   {c.TerminationMessagePolicy, corev1.TerminationMessageFallbackToLogsOnError},
		"env from secret":  {c.EnvFrom[0].SecretRef.Name, "fenwick-s3"},
		"env run":          {c.Env[0], corev1.EnvVar{Name: "ALMANAC_RUN", Value: run.Name}},
		"env portfolio":    {c.Env[1], corev1.EnvVar{Name: "ALMANAC_PORTFOLIO", Value: "fenwick-weekly"}},
		"config mount":     {c.VolumeMounts[0], corev1.VolumeMount{Name: configVolume, MountPath: "/etc/almanac/run", ReadOnly: true}},
		"tmp mount":        {c.VolumeMounts[1].MountPath, "/tmp"},
		"config volume":    {pod.Volumes[0].ConfigMap.Name, "fenwick-weekly-29407950-config"},
		"tmp volume":       {pod.Volumes[1].EmptyDir != nil, true},
		"node selector":    {pod.NodeSelector, map[string]string{"pool": "forecast"}},
		"priority":         {pod.PriorityClassName, "batch-low"},
		"pull policy":      {c.ImagePullPolicy, corev1.PullIfNotPresent},
	}
	for name, ch := range checks {
		if diff := cmp.Diff(ch.want, ch.got); diff != "" {
			t.Errorf("%s (-want,+got):\n%s", name, diff)
		}
	}
}

func TestBuildJobWithoutSecret(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Source.CredentialsSecretRef = nil
	job := buildJob(fp, fenwickRun("r"), stepPublish, jobParams{})
	if got := job.Spec.Template.Spec.Containers[0].EnvFrom; got != nil {
		t.Errorf("envFrom = %v, want none", got)
	}
	if got := job.Spec.Template.Spec.Containers[0].Args[0]; got != "publish" {
		t.Errorf("first arg = %q, want publish", got)
	}
}

func TestJobShareLimitsFallBack(t *testing.T) {
	job := &batchv1.Job{}
	job.Annotations = map[string]string{annotationMaxParallel: "zero", annotationShareWeight: "-3"}
	if p, w := jobShareLimits(job); p != 1 || w != 1 {
		t.Errorf("jobShareLimits = %d, %d; want 1 and 1, the least either may be", p, w)
	}
}

// Issue 18 case 2: every step Job has a deadline, so a hung pod cannot hold the portfolio
// forever; the portfolio's own value wins.
func TestJobDeadlines(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Sharding.MaxParallel = 4
	run := fenwickRun("fenwick-weekly-29407950")
	for _, c := range []struct {
		s    step
		p    jobParams
		want int64
	}{
		{stepPlan, jobParams{}, 7200},
		{stepPublish, jobParams{}, 3600},
		{stepTrain, jobParams{Shards: 3, Parallelism: 2}, 2 * 3600},     // one wave, plus one
		{stepTrain, jobParams{Shards: 9, Parallelism: 4}, 4 * 3600},     // three waves of 4, plus one
		{stepTrain, jobParams{Shards: 400, Parallelism: 4}, 101 * 3600}, // grows with the plan
	} {
		if got := buildJob(fp, run, c.s, c.p).Spec.ActiveDeadlineSeconds; got == nil || *got != c.want {
			t.Errorf("%s %+v: activeDeadlineSeconds %v, want %d", c.s, c.p, got, c.want)
		}
	}
	fp.Spec.Sharding.ActiveDeadlineSeconds = ptr.To[int64](900)
	if got := buildJob(fp, run, stepTrain, jobParams{Shards: 400}).Spec.ActiveDeadlineSeconds; *got != 900 {
		t.Errorf("declared 900: got %d", *got)
	}
}

// Issue 18 case 2: every step's trainer gets --step-deadline, its Job's activeDeadlineSeconds
// from the Job's creation less a margin (a quarter of the deadline, at most 2 minutes), so a
// stalled pod writes its summary and exits 4 before the Job controller kills it. Every pod of
// a Job gets the same time (a retry, a later wave of shards). Without it a stalled step ended
// only at the Job's deadline, DeadlineExceeded with no summary.
func TestStepDeadlineBelowTheJobDeadline(t *testing.T) {
	fp := fenwickPortfolio()
	fp.Spec.Sharding.MaxParallel = 4
	run := fenwickRun("fenwick-weekly-29407950")
	created := time.Date(2026, 12, 7, 4, 30, 0, 0, time.UTC)
	deadlineArg := func(job *batchv1.Job) string {
		args := job.Spec.Template.Spec.Containers[0].Args
		for i, a := range args {
			if a == "--step-deadline" && i+1 < len(args) {
				return args[i+1]
			}
		}
		return ""
	}
	for _, c := range []struct {
		s        step
		p        jobParams
		declared int64
		want     string
	}{
		{stepPlan, jobParams{}, 0, "2026-12-07T06:28:00Z"},                             // 7200 s - 120 s
		{stepReconcile, jobParams{}, 0, "2026-12-07T05:28:00Z"},                        // 3600 s - 120 s
		{stepPublish, jobParams{}, 0, "2026-12-07T05:28:00Z"},                          // 3600 s - 120 s
		{stepTrain, jobParams{Shards: 9, Parallelism: 4}, 0, "2026-12-07T08:28:00Z"},   // 4 x 3600 s - 120 s
		{stepTrain, jobParams{Shards: 9, Parallelism: 4}, 900, "2026-12-07T04:43:00Z"}, // declared 900 s - 120 s
		{stepPublish, jobParams{}, 60, "2026-12-07T04:30:45Z"},                         // 60 s - 15 s (a quarter)
		{stepTrain, jobParams{Shards: 1, Parallelism: 1}, 1, "2026-12-07T04:30:00Z"},   // 1 s - 0.25 s, to the second
	} {
		fp.Spec.Sharding.ActiveDeadlineSeconds = nil
		if c.declared > 0 {
			fp.Spec.Sharding.ActiveDeadlineSeconds = ptr.To(c.declared)
		}
		c.p.Created = created
		job := buildJob(fp, run, c.s, c.p)
		got := deadlineArg(job)
		if got != c.want {
			t.Errorf("%s %+v declared %d: --step-deadline %q, want %q", c.s, c.p, c.declared, got, c.want)
			continue
		}
		at, _ := time.Parse(time.RFC3339, got)
		if end := created.Add(time.Duration(*job.Spec.ActiveDeadlineSeconds) * time.Second); !at.Before(end) && *job.Spec.ActiveDeadlineSeconds > 1 {
			t.Errorf("%s: --step-deadline %s is not before the Job's deadline %s", c.s, got, end)
		}
	}
	// The trainer parses what the controller writes (the trainer's own flag test holds the
	// parsing; here the layout): RFC 3339 in UTC.
	if _, err := time.Parse(time.RFC3339, deadlineArg(buildJob(fp, run, stepPlan, jobParams{Created: created.In(time.FixedZone("", 3600))}))); err != nil {
		t.Error(err)
	}
}

// The reconcile step's Job is built like publish's (one pod, the Job fails at once on the
// permanent exit codes, the same pod contract), runs `almanac-trainer reconcile`, and its name
// is no longer than the publish Job's, so the run name limit stays 55.
func TestBuildReconcileJob(t *testing.T) {
	fp := fenwickPortfolio()
	run := fenwickRun("fenwick-weekly-29407950")
	rec, pub := buildJob(fp, run, stepReconcile, jobParams{}), buildJob(fp, run, stepPublish, jobParams{})
	checks := map[string]struct{ got, want any }{
		"name":             {rec.Name, "fenwick-weekly-29407950-recon"},
		"name length":      {len(rec.Name) <= len(pub.Name), true},
		"step label":       {rec.Spec.Template.Labels[LabelStep], "reconcile"},
		"args":             {rec.Spec.Template.Spec.Containers[0].Args, []string{"reconcile", "--config", "/etc/almanac/run/config.json", "--termination-log", "/dev/termination-log"}},
		"deadline":         {*rec.Spec.ActiveDeadlineSeconds, int64(3600)},
		"completions":      {*rec.Spec.Completions, int32(1)},
		"not indexed":      {rec.Spec.CompletionMode, (*batchv1.CompletionMode)(nil)},
		"backoff":          {*rec.Spec.BackoffLimit, *pub.Spec.BackoffLimit},
		"failure policy":   {rec.Spec.PodFailurePolicy, pub.Spec.PodFailurePolicy},
		"permanent action": {rec.Spec.PodFailurePolicy.Rules[0].Action, batchv1.PodFailurePolicyActionFailJob},
	}
	for name, c := range checks {
		if diff := cmp.Diff(c.want, c.got); diff != "" {
			t.Errorf("%s (-want,+got):\n%s", name, diff)
		}
	}
	// The pod is publish's but for its step: same security, volumes, message policy.
	recPod, pubPod := rec.Spec.Template.Spec.DeepCopy(), pub.Spec.Template.Spec.DeepCopy()
	recPod.Containers[0].Args, pubPod.Containers[0].Args = nil, nil
	if diff := cmp.Diff(pubPod, recPod); diff != "" {
		t.Errorf("reconcile pod differs from publish pod beyond args (-publish,+reconcile):\n%s", diff)
	}
	for _, s := range steps {
		if n := len(jobName(strings.Repeat("r", maxRunNameLength), s)); n > 63 {
			t.Errorf("%s: a %d-character run gives a %d-character Job name", s, maxRunNameLength, n)
		}
	}
}

// TestRunPhaseOfEachStep: the phase kubectl shows follows the Progressing reason, and the
// reconcile step has its own.
func TestRunPhaseOfEachStep(t *testing.T) {
	for reason, want := range map[string]forecastingv1alpha1.RunPhase{
		forecastingv1alpha1.ReasonPlanning:    forecastingv1alpha1.PhasePlanning,
		forecastingv1alpha1.ReasonTraining:    forecastingv1alpha1.PhaseTraining,
		forecastingv1alpha1.ReasonReconciling: forecastingv1alpha1.PhaseReconciling,
		forecastingv1alpha1.ReasonPublishing:  forecastingv1alpha1.PhasePublishing,
	} {
		st := &forecastingv1alpha1.ForecastRunStatus{Conditions: []metav1.Condition{{Type: forecastingv1alpha1.RunProgressing, Status: metav1.ConditionTrue, Reason: reason}}}
		if got := runPhase(st); got != want {
			t.Errorf("reason %s: phase %s, want %s", reason, got, want)
		}
	}
}
