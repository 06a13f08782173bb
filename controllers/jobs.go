package controllers

import (
	"time"

	"strconv"

	batchv1 "k8s.io/api/batch/v1"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/runconfig"
)

// Labels and annotations the controller puts on what it creates.
const (
	// LabelRun names the ForecastRun on its ConfigMap, Jobs and pods.
	LabelRun = "forecasting.almanac.dev/run"
	// LabelPortfolio names the ForecastPortfolio on runs, ConfigMaps, Jobs and pods.
	LabelPortfolio = "forecasting.almanac.dev/portfolio"
	// LabelStep is plan, train, reconcile or publish on Jobs and pods.
	LabelStep = "forecasting.almanac.dev/step"
	// AnnotationReplacedBy on a run says which run replaces it (concurrencyPolicy Replace); the
	// run controller then deletes the run's Jobs and ends it Failed with reason Replaced.
	AnnotationReplacedBy = "forecasting.almanac.dev/replaced-by"
	// annotationMaxParallel and annotationShareWeight on a train Job record the portfolio's
	// sharding limits at the run's generation, so the budget can be shared from the Jobs alone.
	annotationMaxParallel = "forecasting.almanac.dev/max-parallel"
	annotationShareWeight = "forecasting.almanac.dev/share-weight"
	// completionIndexAnnotation is set by the Job controller on every pod of an Indexed Job.
	completionIndexAnnotation = batchv1.JobCompletionIndexAnnotation
)

// The trainer pod contract (PROJECT-NOTES.md, "Contracts between controller and trainer").
const (
	trainerContainer   = "trainer"
	configMountPath    = "/etc/almanac/run"
	configVolume       = "run-config"
	tmpVolume          = "tmp"
	terminationLogPath = "/dev/termination-log"
	// trainerUID is the non-root user of the trainer image (Dockerfile).
	trainerUID = 65532
)

// step is one of the run's Jobs: plan, train, reconcile (only when the plan asks for it) and
// publish. Its value is the trainer subcommand and the LabelStep value.
type step string

const (
	stepPlan      step = "plan"
	stepTrain     step = "train"
	stepReconcile step = "reconcile"
	stepPublish   step = "publish"
)

// steps are all the steps, in the order a run goes through them.
var steps = []step{stepPlan, stepTrain, stepReconcile, stepPublish}

// maxRunNameLength keeps "<run>-publish", the longest Job name, within the 63 characters the
// Job controller's job-name pod label allows.
const maxRunNameLength = 63 - len("-publish")

// jobName is "<run>-plan", "<run>-train", "<run>-recon" or "<run>-publish". The reconcile
// step's Job is "-recon", so that no Job name is longer than the publish one and the run and
// portfolio name limits stay as they were before the step existed.
func jobName(run string, s step) string {
	if s == stepReconcile {
		return run + "-recon"
	}
	return run + "-" + string(s)
}

// configMapName is "<run>-config".
func configMapName(run string) string { return run + "-config" }

// runLabels are the labels of everything a run owns.
func runLabels(run *forecastingv1alpha1.ForecastRun) map[string]string {
	return map[string]string{LabelRun: run.Name, LabelPortfolio: run.Spec.PortfolioName}
}

// buildConfigMap holds the rendered configuration under runconfig.FileName. It is immutable:
// the run is reproducible from it.
func buildConfigMap(run *forecastingv1alpha1.ForecastRun, configJSON []byte) *corev1.ConfigMap {
	return &corev1.ConfigMap{
		ObjectMeta: metav1.ObjectMeta{
			Name: configMapName(run.Name), Namespace: run.Namespace, Labels: runLabels(run),
		},
		Immutable: ptr.To(true),
		Data:      map[string]string{runconfig.FileName: string(configJSON)},
	}
}

// jobParams are the numbers a Job spec needs besides the portfolio and run.
type jobParams struct {
	// Shards is the train Job's completions (ignored for plan and publish).
	Shards int32
	// Parallelism is the train Job's initial parallelism (ignored for plan and publish).
	Parallelism int32
	// Created is when the Job is created (the reconciler's clock); the trainer gets
	// --step-deadline stepDeadline(Created, the Job's deadline). Zero passes none.
	Created time.Time
}

// buildJob returns the Job of one step of run, from the portfolio spec.
//
//   - plan, reconcile and publish: one pod, backoffLimit = retriesPerShard, and a pod failure policy that
//     fails the Job at once on the trainer's permanent exit codes (trainer/exitcode: 2
//     configuration, 3 data, 5 publish refused by the guard).
//   - train: an Indexed Job with completions = Shards and the given parallelism,
//     backoffLimitPerIndex = retriesPerShard, maxFailedIndexes = min(maxFailedShards, Shards),
//     and a policy that fails the index (not the Job) at once on those exit codes.
//
// Every Job ignores pod disruptions (a DisruptionTarget condition: preemption, eviction, node
// drain) so they do not use up retries, runs its pods under the restricted Pod Security Standard
// (non-root, read-only root filesystem, no privilege escalation, no capabilities, RuntimeDefault
// seccomp) with no service-account token, and is deleted ttlSecondsAfterFinished after it ends.
func buildJob(fp *forecastingv1alpha1.ForecastPortfolio, run *forecastingv1alpha1.ForecastRun, s step, p jobParams) *batchv1.Job {
	sh := fp.Spec.Sharding
	retries := ptr.Deref(sh.RetriesPerShard, 0)
	labels := runLabels(run)
	labels[LabelStep] = string(s)
	job := &batchv1.Job{
		ObjectMeta: metav1.ObjectMeta{Name: jobName(run.Name, s), Namespace: run.Namespace, Labels: labels},
		Spec: batchv1.JobSpec{
			ActiveDeadlineSeconds:   ptr.To(activeDeadline(sh, s, p)),
			TTLSecondsAfterFinished: fp.Spec.Trainer.TTLSecondsAfterFinished,
			Template: corev1.PodTemplateSpec{
				ObjectMeta: metav1.ObjectMeta{Labels: labels},
				Spec:       podSpec(fp, run, s),
			},
		},
	}
	if !p.Created.IsZero() {
		c := &job.Spec.Template.Spec.Containers[0]
		c.Args = append(c.Args, "--step-deadline", stepDeadline(p.Created, *job.Spec.ActiveDeadlineSeconds).Format(time.RFC3339))
	}
	permanent := batchv1.PodFailurePolicyActionFailJob
	if s == stepTrain {
		permanent = batchv1.PodFailurePolicyActionFailIndex
		maxFailed := min(ptr.Deref(sh.MaxFailedShards, 0), p.Shards)
		job.Annotations = map[string]string{
			annotationMaxParallel: strconv.Itoa(int(max(1, sh.MaxParallel))),
			annotationShareWeight: strconv.Itoa(int(max(1, sh.ShareWeight))),
		}
		job.Spec.CompletionMode = ptr.To(batchv1.IndexedCompletion)
		job.Spec.Completions = ptr.To(p.Shards)
		job.Spec.Parallelism = ptr.To(p.Parallelism)
		job.Spec.BackoffLimitPerIndex = ptr.To(retries)
		job.Spec.MaxFailedIndexes = ptr.To(maxFailed)
	} else {
		job.Spec.Completions = ptr.To[int32](1)
		job.Spec.Parallelism = ptr.To[int32](1)
		job.Spec.BackoffLimit = ptr.To(retries)
	}
	job.Spec.PodFailurePolicy = &batchv1.PodFailurePolicy{Rules: []batchv1.PodFailurePolicyRule{
		{
			Action: permanent,
			OnExitCodes: &batchv1.PodFailurePolicyOnExitCodesRequirement{
				ContainerName: ptr.To(trainerContainer),
				Operator:      batchv1.PodFailurePolicyOnExitCodesOpIn,
				Values:        append([]int32(nil), exitcode.Permanent...),
			},
		},
		{
			Action: batchv1.PodFailurePolicyActionIgnore,
			OnPodConditions: []batchv1.PodFailurePolicyOnPodConditionsPattern{
				{Type: corev1.DisruptionTarget, Status: corev1.ConditionTrue},
			},
		},
	}}
	return job
}

// Default step deadlines when spec.sharding.activeDeadlineSeconds is unset: a hung plan or
// publish pod (a storage endpoint that accepts and never answers) would otherwise hold the
// portfolio forever under concurrencyPolicy Forbid.
const (
	defaultPlanDeadline    = 2 * 3600 // plan reads every object once
	defaultPublishDeadline = 3600     // publish reads every unit's files once
	// defaultReconcileDeadline: reconcile reads what the shards wrote for the nodes that span
	// shards and their residual summaries once.
	defaultReconcileDeadline = 3600
	trainDeadlinePerWave     = 3600 // one wave of shards, maxParallel at once
)

// activeDeadline is the Job's activeDeadlineSeconds: the portfolio's, else the step's default;
// train's grows with the plan: one hour per wave of maxParallel shards, plus one.
func activeDeadline(sh forecastingv1alpha1.ShardingSpec, s step, p jobParams) int64 {
	if sh.ActiveDeadlineSeconds != nil {
		return *sh.ActiveDeadlineSeconds
	}
	switch s {
	case stepPlan:
		return defaultPlanDeadline
	case stepPublish:
		return defaultPublishDeadline
	case stepReconcile:
		return defaultReconcileDeadline
	}
	par := int64(max(1, sh.MaxParallel))
	waves := (int64(max(1, p.Shards)) + par - 1) / par
	return trainDeadlinePerWave * (waves + 1)
}

// stepDeadline is the time the trainer of a Job created at created with activeDeadlineSeconds
// deadline must have ended by: the Job's deadline less a margin of a quarter of it, at most
// maxStepMargin. The Job controller counts the deadline from the Job's start, which is not
// before its creation, and kills every pod at it with no summary; a trainer past its own
// deadline writes its summary and exits 4 (trainer/cmd: --step-deadline), which the run's
// failure reason then quotes. The margin covers the trainer's stepGrace (10 s) for a call
// that ignores cancellation, the summary's write and clock skew between controller and node.
// Every pod of the Job gets the same time, so a retried pod or a later wave of shards stops
// at it too (a --step-timeout would count from each pod's own start).
func stepDeadline(created time.Time, deadline int64) time.Time {
	d := time.Duration(deadline) * time.Second
	return created.UTC().Add(d - min(d/4, maxStepMargin)).Truncate(time.Second)
}

// maxStepMargin bounds stepDeadline's margin (our choice: NTP keeps clocks within well under
// a second; two minutes leaves room for a slow summary write and the grace).
const maxStepMargin = 2 * time.Minute

// podSpec is the trainer pod of one step: the image entrypoint with
// args [step, --config, /etc/almanac/run/config.json, --termination-log, /dev/termination-log]
// (buildJob adds --step-deadline),
// the run's ConfigMap read-only at /etc/almanac/run, an emptyDir at /tmp, the credentials
// Secret's keys as environment variables, and ALMANAC_RUN and ALMANAC_PORTFOLIO. Train pods
// take their shard from JOB_COMPLETION_INDEX, which the Job controller sets.
func podSpec(fp *forecastingv1alpha1.ForecastPortfolio, run *forecastingv1alpha1.ForecastRun, s step) corev1.PodSpec {
	t := fp.Spec.Trainer
	c := corev1.Container{
		Name:            trainerContainer,
		Image:           t.Image,
		ImagePullPolicy: t.ImagePullPolicy,
		Args: []string{string(s), "--config", configMountPath + "/" + runconfig.FileName,
			"--termination-log", terminationLogPath},
		Env: []corev1.EnvVar{
			{Name: "ALMANAC_RUN", Value: run.Name},
			{Name: "ALMANAC_PORTFOLIO", Value: fp.Name},
		},
		Resources: t.Resources,
		VolumeMounts: []corev1.VolumeMount{
			{Name: configVolume, MountPath: configMountPath, ReadOnly: true},
			{Name: tmpVolume, MountPath: "/tmp"},
		},
		TerminationMessagePath:   terminationLogPath,
		TerminationMessagePolicy: corev1.TerminationMessageFallbackToLogsOnError,
		SecurityContext: &corev1.SecurityContext{
			RunAsNonRoot:             ptr.To(true),
			ReadOnlyRootFilesystem:   ptr.To(true),
			AllowPrivilegeEscalation: ptr.To(false),
			Capabilities:             &corev1.Capabilities{Drop: []corev1.Capability{"ALL"}},
			SeccompProfile:           &corev1.SeccompProfile{Type: corev1.SeccompProfileTypeRuntimeDefault},
		},
	}
	if ref := fp.Spec.Source.CredentialsSecretRef; ref != nil {
		c.EnvFrom = []corev1.EnvFromSource{{SecretRef: &corev1.SecretEnvSource{
			LocalObjectReference: corev1.LocalObjectReference{Name: ref.Name},
		}}}
	}
	return corev1.PodSpec{
		RestartPolicy:                 corev1.RestartPolicyNever,
		ServiceAccountName:            t.ServiceAccountName,
		AutomountServiceAccountToken:  ptr.To(false),
		EnableServiceLinks:            ptr.To(false),
		NodeSelector:                  t.NodeSelector,
		Tolerations:                   t.Tolerations,
		PriorityClassName:             t.PriorityClassName,
		TerminationGracePeriodSeconds: ptr.To[int64](30),
		SecurityContext: &corev1.PodSecurityContext{
			RunAsNonRoot:   ptr.To(true),
			RunAsUser:      ptr.To[int64](trainerUID),
			RunAsGroup:     ptr.To[int64](trainerUID),
			FSGroup:        ptr.To[int64](trainerUID),
			SeccompProfile: &corev1.SeccompProfile{Type: corev1.SeccompProfileTypeRuntimeDefault},
		},
		Containers: []corev1.Container{c},
		Volumes: []corev1.Volume{
			{Name: configVolume, VolumeSource: corev1.VolumeSource{ConfigMap: &corev1.ConfigMapVolumeSource{
				LocalObjectReference: corev1.LocalObjectReference{Name: configMapName(run.Name)},
				DefaultMode:          ptr.To[int32](0o444),
			}}},
			{Name: tmpVolume, VolumeSource: corev1.VolumeSource{EmptyDir: &corev1.EmptyDirVolumeSource{}}},
		},
	}
}

// jobShareLimits reads the sharding limits a train Job was created with (see buildJob); values
// that are missing or malformed fall back to 1, the least either may be.
func jobShareLimits(job *batchv1.Job) (maxParallel, weight int32) {
	read := func(key string, def int32) int32 {
		v, err := strconv.Atoi(job.Annotations[key])
		if err != nil || v < 1 {
			return def
		}
		return int32(v)
	}
	return read(annotationMaxParallel, 1), read(annotationShareWeight, 1)
}
