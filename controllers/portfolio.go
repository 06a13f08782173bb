package controllers

import (
	"fmt"
	"sort"
	"time"

	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// maxPortfolioNameLength leaves room for "-<unix minutes>" (8 digits until the year 2160) in
// run names, which must fit maxRunNameLength.
const maxPortfolioNameLength = maxRunNameLength - 1 - 8

// portfolioPlan is what planPortfolio decided; the reconciler applies it.
type portfolioPlan struct {
	// Status is the new status (a deep copy; the input is not changed).
	Status *forecastingv1alpha1.ForecastPortfolioStatus
	// Create is a run to create (scheduled or drift), nil for none.
	Create *forecastingv1alpha1.ForecastRun
	// Replace are active runs to mark replaced (concurrencyPolicy Replace), and ReplacedBy the
	// annotation value saying what replaces them.
	Replace    []string
	ReplacedBy string
	// Prune are finished runs beyond the history limits, oldest first.
	Prune []string
	// Events to emit after the status write.
	Events []runEvent
	// RequeueAfter is when the schedule or a cooldown needs the portfolio again (0: never).
	RequeueAfter time.Duration
	// Missed counts schedule times that passed without a run: all of them when the most recent
	// one, MissedDue, is past its starting deadline, the older ones when a run starts for it.
	// Repeated reconciles report the same MissedDue again; the metric counts it once.
	Missed    int
	MissedDue time.Time
}

// stallCause is a reason and message for the portfolio's Stalled condition found outside its
// schedule and name (see planPortfolio).
type stallCause struct{ Reason, Message string }

// planPortfolio computes a portfolio's status and next actions from its runs at now.
// blocked, when its reason is set, stalls the portfolio with that reason and message: an
// image the install does not allow, or an active run's Stalled condition (a missing
// credentials Secret seen on its pod). It makes no client calls.
//
// It returns in the plan:
//   - the status: active runs, backlog (unfinished shards; planned minus seen series), last
//     successful run, accuracy of the newest run that evaluated any (per hierarchy level too,
//     each judged by levelDrift), and the conditions Ready, Reconciling, Stalled and
//     AccuracyDrift, each with observedGeneration; AccuracyDrift is judged on the input series
//     first, then on each hierarchy level (LevelAboveThreshold), then on the input series'
//     calibration and bias, then on each level's (levelCalibration: LevelCalibrationOff,
//     LevelBiased);
//   - Create: a scheduled run when the most recent schedule time since the last one is due,
//     within startingDeadlineSeconds, the portfolio is not suspended and no run is active
//     (at most one catch-up run, however many times were missed); else a drift run when the
//     newest evaluation is above the threshold, the action is Retrain, it finished after the last
//     drift run, and cooldownSeconds have passed since that one;
//   - Replace: the active runs to stop when a run is due and concurrencyPolicy is Replace; the due
//     run is created once they have ended (a later reconcile);
//   - Prune: succeeded and failed runs beyond their history limits, oldest first;
//   - Events: MissedSchedule, SkippedForbidden (once per due time), ReplacingRuns, RunCreated,
//     the AccuracyDrift reasons when it turns True, and the Stalled reasons (once per message);
//   - RequeueAfter: until the next schedule time (or the drift cooldown's end).
func planPortfolio(fp *forecastingv1alpha1.ForecastPortfolio, runs []forecastingv1alpha1.ForecastRun, now time.Time, blocked stallCause) portfolioPlan {
	st := fp.Status.DeepCopy()
	p := portfolioPlan{Status: st}
	st.ObservedGeneration = fp.Generation
	set := func(typ string, status metav1.ConditionStatus, reason, message string) {
		setCondition(fp, &st.Conditions, typ, status, reason, message, now)
	}
	event := func(kind, reason, format string, args ...any) {
		p.Events = append(p.Events, runEvent{kind, reason, fmt.Sprintf(format, args...)})
	}

	active, succeeded, failed := sortRuns(runs)
	st.Active, st.Backlog = nil, forecastingv1alpha1.Backlog{}
	for _, r := range active {
		st.Active = append(st.Active, corev1.LocalObjectReference{Name: r.Name})
		st.Backlog.Shards += max(0, r.Status.Shards.Total-r.Status.Shards.Succeeded-r.Status.Shards.Failed)
		st.Backlog.Series += max(0, r.Status.Series.Planned-r.Status.Series.Total)
	}
	if len(succeeded) > 0 {
		last := succeeded[len(succeeded)-1]
		st.LastSuccessfulRun, st.LastSuccessfulTime = last.Name, last.Status.CompletionTime
	}
	p.Prune = append(p.Prune, pruneNames(succeeded, fp.Spec.SuccessfulRunsHistoryLimit)...)
	p.Prune = append(p.Prune, pruneNames(failed, fp.Spec.FailedRunsHistoryLimit)...)

	// Accuracy and drift come from the newest finished run that evaluated any series.
	finished := append(append([]*forecastingv1alpha1.ForecastRun{}, succeeded...), failed...)
	sort.SliceStable(finished, func(a, b int) bool { return finishedAt(finished[a]).Before(finishedAt(finished[b])) })
	var evaluated *forecastingv1alpha1.ForecastRun
	for _, r := range finished {
		if r.Status.Accuracy != nil {
			evaluated = r
		}
	}
	driftStatus, driftReason, driftMessage := metav1.ConditionUnknown, forecastingv1alpha1.ReasonNotEvaluated, "no run has evaluated accuracy yet"
	if evaluated != nil {
		st.Accuracy = evaluated.Status.Accuracy.DeepCopy()
		driftStatus, driftReason, driftMessage = driftVerdict(evaluated.Status.AccuracySums, fp.Spec.Drift)
		var levelsAbove string
		st.HierarchyLevels, levelsAbove = levelDrift(evaluated.Status.Hierarchy, fp.Spec.Drift)
		if driftStatus != metav1.ConditionTrue && levelsAbove != "" {
			driftStatus, driftReason, driftMessage = metav1.ConditionTrue, forecastingv1alpha1.ReasonLevelAboveThreshold,
				fmt.Sprintf("%s; input series: %s", levelsAbove, driftMessage)
		}
		if driftStatus != metav1.ConditionTrue {
			if fired, reason, message := calibrationVerdict(evaluated.Status.CalibrationSums, fp.Spec.Drift, 1); fired {
				driftStatus, driftReason, driftMessage = metav1.ConditionTrue, reason, message
			}
		}
		levelReason, levelsOff := levelCalibration(evaluated.Status.Hierarchy, fp.Spec.Drift, st.HierarchyLevels)
		if driftStatus != metav1.ConditionTrue && levelReason != "" {
			driftStatus, driftReason, driftMessage = metav1.ConditionTrue, levelReason,
				fmt.Sprintf("%s; input series: %s", levelsOff, driftMessage)
		}
		driftMessage = fmt.Sprintf("run %s: %s", evaluated.Name, driftMessage)
	}
	if driftStatus == metav1.ConditionTrue && !meta.IsStatusConditionTrue(st.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift) {
		event(corev1.EventTypeWarning, driftReason, "%s", driftMessage)
	}
	set(forecastingv1alpha1.PortfolioAccuracyDrift, driftStatus, driftReason, driftMessage)

	suspended := ptr.Deref(fp.Spec.Suspend, false)
	switch {
	case len(active) > 0:
		set(forecastingv1alpha1.PortfolioReconciling, metav1.ConditionTrue, forecastingv1alpha1.ReasonRunActive,
			fmt.Sprintf("run %s is active; %d shards to go", active[0].Name, st.Backlog.Shards))
	case suspended:
		set(forecastingv1alpha1.PortfolioReconciling, metav1.ConditionFalse, forecastingv1alpha1.ReasonSuspended, "spec.suspend is true: no new runs start")
	default:
		set(forecastingv1alpha1.PortfolioReconciling, metav1.ConditionFalse, forecastingv1alpha1.ReasonIdle, "no run is active")
	}

	// A spec the user must fix stops scheduling: Stalled, Ready False, a Warning Event.
	sched, reason, message := scheduleParse(fp.Spec.Schedule, fp.Spec.TimeZone)
	if reason == "" && len(fp.Name) > maxPortfolioNameLength {
		reason = forecastingv1alpha1.ReasonNameTooLong
		message = fmt.Sprintf("metadata.name %q has %d characters; at most %d leave room for run and Job names", fp.Name, len(fp.Name), maxPortfolioNameLength)
	}
	if reason == "" && blocked.Reason != "" {
		reason, message = blocked.Reason, blocked.Message
	}
	if reason != "" {
		if c := meta.FindStatusCondition(st.Conditions, forecastingv1alpha1.PortfolioStalled); c == nil || c.Message != message || c.Status != metav1.ConditionTrue {
			event(corev1.EventTypeWarning, reason, "%s", message)
		}
		set(forecastingv1alpha1.PortfolioStalled, metav1.ConditionTrue, reason, message)
		set(forecastingv1alpha1.PortfolioReady, metav1.ConditionFalse, reason, message)
		st.NextScheduleTime = nil
		return p
	}
	set(forecastingv1alpha1.PortfolioStalled, metav1.ConditionFalse, forecastingv1alpha1.ReasonSpecValid, "the spec is valid")
	setReady(fp, st, finished, now)

	if suspended {
		st.NextScheduleTime = nil
		return p
	}
	earliest := fp.CreationTimestamp.Time
	if st.LastScheduleTime != nil && st.LastScheduleTime.After(earliest) {
		earliest = st.LastScheduleTime.Time
	}
	for i := range runs {
		// The newest scheduled run is the record of the last schedule time even when the status
		// write that should have recorded it was lost.
		if t := runs[i].Spec.ScheduledTime; runs[i].Spec.Trigger == forecastingv1alpha1.TriggerSchedule && t != nil && t.After(earliest) {
			earliest = t.Time
			st.LastScheduleTime = t.DeepCopy()
		}
	}
	due := mostRecentScheduleTime(sched, earliest, now, fp.Spec.StartingDeadlineSeconds)
	st.NextScheduleTime = &metav1.Time{Time: due.Next}
	p.RequeueAfter = requeueAfter(due.Next, now)
	if !due.Due.IsZero() {
		when := due.Due.UTC().Format(time.RFC3339)
		switch {
		case due.TooLate:
			p.Missed, p.MissedDue = due.Missed, due.Due
			event(corev1.EventTypeWarning, forecastingv1alpha1.ReasonMissedSchedule,
				"missed schedule time %s: more than startingDeadlineSeconds (%d) ago", when, *fp.Spec.StartingDeadlineSeconds)
		case len(active) > 0 && fp.Spec.ConcurrencyPolicy == forecastingv1alpha1.ReplaceConcurrent:
			for _, r := range active {
				if r.Annotations[AnnotationReplacedBy] == "" {
					p.Replace = append(p.Replace, r.Name)
				}
			}
			p.ReplacedBy = "schedule time " + when
			msg := fmt.Sprintf("schedule time %s is due: stopping run %s (concurrencyPolicy Replace)", when, active[0].Name)
			if len(p.Replace) > 0 {
				event(corev1.EventTypeNormal, forecastingv1alpha1.ReasonRunsReplaced, "%s", msg)
			}
			set(forecastingv1alpha1.PortfolioReconciling, metav1.ConditionTrue, forecastingv1alpha1.ReasonRunsReplaced, msg)
		case len(active) > 0:
			msg := fmt.Sprintf("run %s is active; schedule time %s waits (concurrencyPolicy Forbid)", active[0].Name, when)
			if c := meta.FindStatusCondition(fp.Status.Conditions, forecastingv1alpha1.PortfolioReconciling); c == nil || c.Message != msg {
				event(corev1.EventTypeNormal, forecastingv1alpha1.ReasonSkippedForbidden, "%s", msg)
			}
			set(forecastingv1alpha1.PortfolioReconciling, metav1.ConditionTrue, forecastingv1alpha1.ReasonSkippedForbidden, msg)
		default:
			if due.Missed > 1 {
				p.Missed, p.MissedDue = due.Missed-1, due.Due
				event(corev1.EventTypeWarning, forecastingv1alpha1.ReasonMissedSchedule,
					"%d schedule times passed since %s; starting one run for the most recent, %s",
					due.Missed, earliest.UTC().Format(time.RFC3339), when)
			}
			p.Create = newRun(fp, forecastingv1alpha1.TriggerSchedule, due.Due)
			st.LastScheduleTime = &metav1.Time{Time: due.Due}
			event(corev1.EventTypeNormal, forecastingv1alpha1.ReasonRunCreated, "started run %s for schedule time %s", p.Create.Name, when)
			return p
		}
	}
	for i := range runs {
		// As for schedule times, the newest drift run is the record even if a status write was lost.
		if r := &runs[i]; r.Spec.Trigger == forecastingv1alpha1.TriggerDrift && (st.LastDriftRunTime == nil || st.LastDriftRunTime.Before(&r.CreationTimestamp)) {
			st.LastDriftRunTime = r.CreationTimestamp.DeepCopy()
		}
	}
	if len(active) == 0 && driftStatus == metav1.ConditionTrue && fp.Spec.Drift.Action == forecastingv1alpha1.DriftRetrain {
		cooldown := time.Duration(ptr.Deref(fp.Spec.Drift.CooldownSeconds, 0)) * time.Second
		last := st.LastDriftRunTime
		switch {
		case last != nil && !finishedAt(evaluated).After(last.Time):
			// The evidence predates the last drift run: wait for a newer evaluation.
		case last != nil && now.Before(last.Add(cooldown)):
			p.RequeueAfter = minPositive(p.RequeueAfter, requeueAfter(last.Add(cooldown), now))
		default:
			p.Create = newRun(fp, forecastingv1alpha1.TriggerDrift, now)
			st.LastDriftRunTime = &metav1.Time{Time: now}
			event(corev1.EventTypeNormal, forecastingv1alpha1.ReasonRunCreated, "started drift run %s: %s", p.Create.Name, driftMessage)
		}
	}
	return p
}

// setReady sets Ready from the newest finished run.
func setReady(fp *forecastingv1alpha1.ForecastPortfolio, st *forecastingv1alpha1.ForecastPortfolioStatus, finished []*forecastingv1alpha1.ForecastRun, now time.Time) {
	if len(finished) == 0 {
		setCondition(fp, &st.Conditions, forecastingv1alpha1.PortfolioReady, metav1.ConditionUnknown, forecastingv1alpha1.ReasonNoRunYet, "no run has finished yet", now)
		return
	}
	last := finished[len(finished)-1]
	c := meta.FindStatusCondition(last.Status.Conditions, forecastingv1alpha1.RunSucceeded)
	if c.Status == metav1.ConditionTrue {
		setCondition(fp, &st.Conditions, forecastingv1alpha1.PortfolioReady, metav1.ConditionTrue, forecastingv1alpha1.ReasonRunSucceeded,
			fmt.Sprintf("run %s published: %s", last.Name, c.Message), now)
		return
	}
	setCondition(fp, &st.Conditions, forecastingv1alpha1.PortfolioReady, metav1.ConditionFalse, forecastingv1alpha1.ReasonRunFailed,
		fmt.Sprintf("run %s failed (%s): %s", last.Name, c.Reason, c.Message), now)
}

// newRun is a scheduled or drift run named "<portfolio>-<unix minutes of t>".
func newRun(fp *forecastingv1alpha1.ForecastPortfolio, trigger forecastingv1alpha1.RunTrigger, t time.Time) *forecastingv1alpha1.ForecastRun {
	run := &forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{
			Name:      fmt.Sprintf("%s-%d", fp.Name, t.Unix()/60),
			Namespace: fp.Namespace,
			Labels:    map[string]string{LabelPortfolio: fp.Name},
		},
		Spec: forecastingv1alpha1.ForecastRunSpec{PortfolioName: fp.Name, Trigger: trigger},
	}
	if trigger == forecastingv1alpha1.TriggerSchedule {
		run.Spec.ScheduledTime = &metav1.Time{Time: t}
	}
	return run
}

// sortRuns splits runs into active, succeeded and failed; finished ones oldest first by
// completion time, active ones by name.
func sortRuns(runs []forecastingv1alpha1.ForecastRun) (active, succeeded, failed []*forecastingv1alpha1.ForecastRun) {
	for i := range runs {
		r := &runs[i]
		if r.DeletionTimestamp != nil {
			continue
		}
		c := meta.FindStatusCondition(r.Status.Conditions, forecastingv1alpha1.RunSucceeded)
		switch {
		case c == nil || c.Status == metav1.ConditionUnknown:
			active = append(active, r)
		case c.Status == metav1.ConditionTrue:
			succeeded = append(succeeded, r)
		default:
			failed = append(failed, r)
		}
	}
	sort.Slice(active, func(a, b int) bool { return active[a].Name < active[b].Name })
	for _, list := range [][]*forecastingv1alpha1.ForecastRun{succeeded, failed} {
		sort.SliceStable(list, func(a, b int) bool {
			ta, tb := finishedAt(list[a]), finishedAt(list[b])
			if ta.Equal(tb) {
				return list[a].Name < list[b].Name
			}
			return ta.Before(tb)
		})
	}
	return active, succeeded, failed
}

// finishedAt is the run's completion time, or its creation when it has none.
func finishedAt(r *forecastingv1alpha1.ForecastRun) time.Time {
	if r == nil {
		return time.Time{}
	}
	if r.Status.CompletionTime != nil {
		return r.Status.CompletionTime.Time
	}
	return r.CreationTimestamp.Time
}

// pruneNames are the oldest runs beyond limit (runs sorted oldest first). A nil limit (an
// object the apiserver did not default, which it always does) prunes nothing.
func pruneNames(runs []*forecastingv1alpha1.ForecastRun, limit *int32) []string {
	if limit == nil {
		return nil
	}
	var out []string
	for i := 0; i < len(runs)-int(max(0, *limit)); i++ {
		out = append(out, runs[i].Name)
	}
	return out
}

func minPositive(a, b time.Duration) time.Duration {
	if a <= 0 {
		return b
	}
	return min(a, b)
}
