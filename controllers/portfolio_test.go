package controllers

import (
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// runAt is a run of the Fenwick portfolio created at created; outcome "" is active, else
// "ok" or "failed", completed at done.
func runAt(name string, created time.Time, outcome string, done time.Time) forecastingv1alpha1.ForecastRun {
	r := forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: "planning", CreationTimestamp: metav1.Time{Time: created}},
		Spec:       forecastingv1alpha1.ForecastRunSpec{PortfolioName: "fenwick-weekly", Trigger: forecastingv1alpha1.TriggerManual},
	}
	switch outcome {
	case "ok", "failed":
		status := metav1.ConditionTrue
		if outcome == "failed" {
			status = metav1.ConditionFalse
		}
		r.Status.Conditions = []metav1.Condition{{Type: forecastingv1alpha1.RunSucceeded, Status: status, Reason: "X", Message: "m"}}
		r.Status.CompletionTime = &metav1.Time{Time: done}
	default:
		r.Status.Shards = forecastingv1alpha1.ShardCounts{Total: 10, Succeeded: 3, Failed: 1}
		r.Status.Series = forecastingv1alpha1.SeriesCounts{Planned: 2000, Total: 500}
	}
	return r
}

func eventReasons(p portfolioPlan) []string {
	var out []string
	for _, e := range p.Events {
		out = append(out, e.reason)
	}
	return out
}

func TestPlanPortfolioSchedule(t *testing.T) {
	// Schedule "30 4 * * 1" in Europe/London: Mondays 04:30 GMT in winter. 2026-11-30 is a Monday.
	created := time.Date(2026, 11, 1, 0, 0, 0, 0, time.UTC)
	monday := time.Date(2026, 11, 30, 4, 30, 0, 0, time.UTC)
	tests := map[string]struct {
		// spec
		policy   forecastingv1alpha1.ConcurrencyPolicy
		suspend  bool
		deadline *int64
		// status
		lastSchedule *time.Time
		// environment
		runs []forecastingv1alpha1.ForecastRun
		now  time.Time
		// expectations
		wantCreate  string
		wantReplace []string
		wantEvents  []string
		wantNext    time.Time
		wantLast    *time.Time
		wantMissed  int // schedule times passed without a run (the metric's increment)
	}{
		"nothing due yet": {
			lastSchedule: ptr.To(monday), now: monday.Add(time.Hour),
			wantNext: monday.AddDate(0, 0, 7),
		},
		"due: one run named after the schedule time": {
			lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), now: monday.Add(time.Minute),
			wantCreate: "fenwick-weekly-29933550", wantEvents: []string{"RunCreated"}, wantNext: monday.AddDate(0, 0, 7),
		},
		"downtime: four missed, one catch-up run for the newest": {
			now: monday.Add(time.Minute), wantCreate: "fenwick-weekly-29933550",
			wantEvents: []string{"MissedSchedule", "RunCreated"}, wantNext: monday.AddDate(0, 0, 7), wantMissed: 4,
		},
		"past the starting deadline: skipped and reported": {
			lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), deadline: ptr.To[int64](600), now: monday.Add(11 * time.Minute),
			wantEvents: []string{"MissedSchedule"}, wantNext: monday.AddDate(0, 0, 7), wantMissed: 1,
		},
		"within the starting deadline": {
			lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), deadline: ptr.To[int64](600), now: monday.Add(9 * time.Minute),
			wantCreate: "fenwick-weekly-29933550", wantEvents: []string{"RunCreated"}, wantNext: monday.AddDate(0, 0, 7),
		},
		"forbid: active run, due time waits": {
			lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), now: monday.Add(time.Minute),
			runs:       []forecastingv1alpha1.ForecastRun{runAt("fenwick-weekly-manual", monday.Add(-time.Hour), "", time.Time{})},
			wantEvents: []string{"SkippedForbidden"}, wantNext: monday.AddDate(0, 0, 7),
		},
		"replace: active run is marked, new run waits for it to end": {
			policy: forecastingv1alpha1.ReplaceConcurrent, lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), now: monday.Add(time.Minute),
			runs:        []forecastingv1alpha1.ForecastRun{runAt("fenwick-weekly-manual", monday.Add(-time.Hour), "", time.Time{})},
			wantReplace: []string{"fenwick-weekly-manual"}, wantEvents: []string{"ReplacingRuns"}, wantNext: monday.AddDate(0, 0, 7),
		},
		"suspended: nothing starts": {
			suspend: true, lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), now: monday.Add(time.Minute),
		},
		"a run already exists for the due time (status write was lost)": {
			lastSchedule: ptr.To(monday.AddDate(0, 0, -7)), now: monday.Add(time.Minute),
			runs: func() []forecastingv1alpha1.ForecastRun {
				r := runAt("fenwick-weekly-29933550", monday, "ok", monday.Add(30*time.Minute))
				r.Spec.Trigger, r.Spec.ScheduledTime = forecastingv1alpha1.TriggerSchedule, &metav1.Time{Time: monday}
				return []forecastingv1alpha1.ForecastRun{r}
			}(),
			wantNext: monday.AddDate(0, 0, 7), wantLast: ptr.To(monday),
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			fp := fenwickPortfolio()
			fp.Spec.Source.CredentialsSecretRef = nil
			fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{}
			fp.CreationTimestamp = metav1.Time{Time: created}
			if tc.policy != "" {
				fp.Spec.ConcurrencyPolicy = tc.policy
			}
			fp.Spec.Suspend = ptr.To(tc.suspend)
			fp.Spec.StartingDeadlineSeconds = tc.deadline
			if tc.lastSchedule != nil {
				fp.Status.LastScheduleTime = &metav1.Time{Time: *tc.lastSchedule}
			}
			p := planPortfolio(fp, tc.runs, tc.now, stallCause{})
			gotCreate := ""
			if p.Create != nil {
				gotCreate = p.Create.Name
				if !p.Create.Spec.ScheduledTime.Equal(&metav1.Time{Time: monday}) || p.Create.Spec.Trigger != forecastingv1alpha1.TriggerSchedule {
					t.Errorf("created run spec = %+v", p.Create.Spec)
				}
				if !p.Status.LastScheduleTime.Equal(&metav1.Time{Time: monday}) {
					t.Errorf("lastScheduleTime = %v, want %v", p.Status.LastScheduleTime, monday)
				}
			}
			if tc.wantLast != nil && !p.Status.LastScheduleTime.Equal(&metav1.Time{Time: *tc.wantLast}) {
				t.Errorf("lastScheduleTime = %v, want %v (rebuilt from the run)", p.Status.LastScheduleTime, *tc.wantLast)
			}
			if gotCreate != tc.wantCreate {
				t.Errorf("create = %q, want %q", gotCreate, tc.wantCreate)
			}
			if p.Missed != tc.wantMissed || (p.Missed > 0 && !p.MissedDue.Equal(monday)) {
				t.Errorf("missed = %d at %v, want %d at %v", p.Missed, p.MissedDue, tc.wantMissed, monday)
			}
			if diff := cmp.Diff(tc.wantReplace, p.Replace); diff != "" {
				t.Errorf("replace (-want,+got):\n%s", diff)
			}
			if diff := cmp.Diff(tc.wantEvents, eventReasons(p)); diff != "" {
				t.Errorf("events (-want,+got):\n%s", diff)
			}
			var gotNext time.Time
			if p.Status.NextScheduleTime != nil {
				gotNext = p.Status.NextScheduleTime.Time
			}
			if !gotNext.Equal(tc.wantNext) {
				t.Errorf("next = %v, want %v", gotNext, tc.wantNext)
			}
			for _, c := range p.Status.Conditions {
				if c.ObservedGeneration != fp.Generation {
					t.Errorf("condition %s observedGeneration = %d, want %d", c.Type, c.ObservedGeneration, fp.Generation)
				}
			}
		})
	}
}

func TestPlanPortfolioForbidEventOncePerDueTime(t *testing.T) {
	monday := time.Date(2026, 11, 30, 4, 30, 0, 0, time.UTC)
	fp := fenwickPortfolio()
	fp.Spec.Source.CredentialsSecretRef = nil
	fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{LastScheduleTime: &metav1.Time{Time: monday.AddDate(0, 0, -7)}}
	runs := []forecastingv1alpha1.ForecastRun{runAt("fenwick-weekly-manual", monday.Add(-time.Hour), "", time.Time{})}
	first := planPortfolio(fp, runs, monday.Add(time.Minute), stallCause{})
	fp.Status = *first.Status
	second := planPortfolio(fp, runs, monday.Add(2*time.Minute), stallCause{})
	if got := eventReasons(second); len(got) != 0 {
		t.Errorf("second reconcile events = %v, want none", got)
	}
}

func TestPlanPortfolioStatusFromRuns(t *testing.T) {
	t0 := time.Date(2026, 11, 2, 5, 0, 0, 0, time.UTC)
	fp := fenwickPortfolio()
	fp.Spec.Source.CredentialsSecretRef = nil
	fp.Spec.SuccessfulRunsHistoryLimit = ptr.To[int32](2)
	fp.Spec.FailedRunsHistoryLimit = ptr.To[int32](0)
	fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{LastScheduleTime: &metav1.Time{Time: t0.AddDate(0, 1, 0)}}
	runs := []forecastingv1alpha1.ForecastRun{
		runAt("a", t0, "ok", t0.Add(time.Hour)),
		runAt("b", t0.AddDate(0, 0, 7), "ok", t0.AddDate(0, 0, 7).Add(time.Hour)),
		runAt("c", t0.AddDate(0, 0, 14), "failed", t0.AddDate(0, 0, 14).Add(time.Hour)),
		runAt("d", t0.AddDate(0, 0, 21), "ok", t0.AddDate(0, 0, 21).Add(time.Hour)),
		runAt("e", t0.AddDate(0, 0, 28), "", time.Time{}),
	}
	p := planPortfolio(fp, runs, t0.AddDate(0, 1, 0).Add(time.Minute), stallCause{})
	if diff := cmp.Diff([]string{"a", "c"}, p.Prune); diff != "" {
		t.Errorf("prune (-want,+got):\n%s", diff)
	}
	st := p.Status
	if st.LastSuccessfulRun != "d" || len(st.Active) != 1 || st.Active[0].Name != "e" {
		t.Errorf("last successful %q, active %v", st.LastSuccessfulRun, st.Active)
	}
	if diff := cmp.Diff(forecastingv1alpha1.Backlog{Shards: 6, Series: 1500}, st.Backlog); diff != "" {
		t.Errorf("backlog (-want,+got):\n%s", diff)
	}
	wantConds := map[string]string{
		forecastingv1alpha1.PortfolioReady:         "True/RunSucceeded",
		forecastingv1alpha1.PortfolioReconciling:   "True/RunActive",
		forecastingv1alpha1.PortfolioStalled:       "False/SpecValid",
		forecastingv1alpha1.PortfolioAccuracyDrift: "Unknown/NotEvaluated",
	}
	for typ, want := range wantConds {
		c := meta.FindStatusCondition(st.Conditions, typ)
		if c == nil || string(c.Status)+"/"+c.Reason != want {
			t.Errorf("condition %s = %+v, want %s", typ, c, want)
		}
	}
}

func TestPlanPortfolioStalled(t *testing.T) {
	tests := map[string]struct {
		mutate     func(*forecastingv1alpha1.ForecastPortfolio)
		blocked    stallCause
		wantReason string
		wantInMsg  string
	}{
		"bad cron": {
			mutate:     func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.Schedule = "61 4 * * 1" },
			wantReason: forecastingv1alpha1.ReasonInvalidSchedule, wantInMsg: `spec.schedule "61 4 * * 1"`,
		},
		"unknown zone": {
			mutate:     func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Spec.TimeZone = ptr.To("Europe/Fenwick") },
			wantReason: forecastingv1alpha1.ReasonInvalidTimeZone, wantInMsg: `spec.timeZone "Europe/Fenwick"`,
		},
		"missing secret": {
			blocked:    stallCause{forecastingv1alpha1.ReasonMissingSecret, "run fenwick-1: spec.source.credentialsSecretRef: Secret planning/fenwick-s3 not found"},
			wantReason: forecastingv1alpha1.ReasonMissingSecret, wantInMsg: "fenwick-s3 not found",
		},
		"image not allowed": {
			blocked:    stallCause{forecastingv1alpha1.ReasonImageNotAllowed, ImageAllowlist{"registry.fenwick.example/almanac/"}.problem("busybox:1")},
			wantReason: forecastingv1alpha1.ReasonImageNotAllowed, wantInMsg: `spec.trainer.image: "busybox:1"`,
		},
		"name too long for run names": {
			mutate:     func(fp *forecastingv1alpha1.ForecastPortfolio) { fp.Name = strings.Repeat("f", 47) },
			wantReason: forecastingv1alpha1.ReasonNameTooLong, wantInMsg: "at most 46",
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			fp := fenwickPortfolio()
			if tc.mutate != nil {
				tc.mutate(fp)
			}
			p := planPortfolio(fp, nil, time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC), tc.blocked)
			c := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioStalled)
			if c == nil || c.Status != metav1.ConditionTrue || c.Reason != tc.wantReason || !strings.Contains(c.Message, tc.wantInMsg) {
				t.Fatalf("Stalled = %+v, want True/%s containing %q", c, tc.wantReason, tc.wantInMsg)
			}
			if p.Create != nil || p.Status.NextScheduleTime != nil {
				t.Errorf("a stalled portfolio scheduled: create %v next %v", p.Create, p.Status.NextScheduleTime)
			}
			if diff := cmp.Diff([]string{tc.wantReason}, eventReasons(p)); diff != "" {
				t.Errorf("events (-want,+got):\n%s", diff)
			}
		})
	}
}

func TestPlanPortfolioDriftRun(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	drifting := func(done time.Time) forecastingv1alpha1.ForecastRun {
		r := runAt("fenwick-weekly-29933550", done.Add(-time.Hour), "ok", done)
		// Realized MASE 1.5 against 1.0 promised: ratio 1.5 > 1.25 (thresholdPercent 125).
		r.Status.AccuracySums = &forecastingv1alpha1.AccuracySums{Metric: "MASE", Evaluated: 100, EvaluatedPoints: 400,
			ExpectedSum: "100", RealizedSum: "150", Drifted: 40}
		r.Status.Accuracy = accuracyStatus(r.Status.AccuracySums, r.Name)
		return r
	}
	tests := map[string]struct {
		action    forecastingv1alpha1.DriftAction
		lastDrift *time.Time
		// driftRunAt, when set, adds a finished drift run created then (without accuracy).
		driftRunAt *time.Time
		runDone    time.Time
		now        time.Time
		wantRun    bool
	}{
		"retrain":                                     {action: forecastingv1alpha1.DriftRetrain, runDone: t0, now: t0.Add(time.Minute), wantRun: true},
		"report only":                                 {action: forecastingv1alpha1.DriftReport, runDone: t0, now: t0.Add(time.Minute)},
		"within cooldown":                             {action: forecastingv1alpha1.DriftRetrain, lastDrift: ptr.To(t0.Add(-time.Hour)), runDone: t0, now: t0.Add(time.Minute)},
		"after cooldown, newer evidence":              {action: forecastingv1alpha1.DriftRetrain, lastDrift: ptr.To(t0.Add(-7 * time.Hour)), runDone: t0, now: t0.Add(time.Minute), wantRun: true},
		"after cooldown, same evidence":               {action: forecastingv1alpha1.DriftRetrain, lastDrift: ptr.To(t0.Add(time.Hour)), runDone: t0, now: t0.Add(8 * time.Hour)},
		"drift run exists, its status write was lost": {action: forecastingv1alpha1.DriftRetrain, driftRunAt: ptr.To(t0.Add(30 * time.Minute)), runDone: t0, now: t0.Add(8 * time.Hour)},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			fp := fenwickPortfolio()
			fp.Spec.Source.CredentialsSecretRef = nil
			fp.Spec.Drift.Action = tc.action
			fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{LastScheduleTime: &metav1.Time{Time: tc.now}}
			if tc.lastDrift != nil {
				fp.Status.LastDriftRunTime = &metav1.Time{Time: *tc.lastDrift}
			}
			runs := []forecastingv1alpha1.ForecastRun{drifting(tc.runDone)}
			if tc.driftRunAt != nil {
				r := runAt("fenwick-weekly-drift", *tc.driftRunAt, "ok", *tc.driftRunAt)
				r.Spec.Trigger = forecastingv1alpha1.TriggerDrift
				runs = append(runs, r)
			}
			p := planPortfolio(fp, runs, tc.now, stallCause{})
			c := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
			if c == nil || c.Status != metav1.ConditionTrue {
				t.Fatalf("AccuracyDrift = %+v, want True", c)
			}
			if p.Status.Accuracy == nil || p.Status.Accuracy.Ratio != "1.500" {
				t.Errorf("accuracy = %+v", p.Status.Accuracy)
			}
			if got := p.Create != nil; got != tc.wantRun {
				t.Fatalf("drift run created = %v, want %v", got, tc.wantRun)
			}
			if tc.wantRun && (p.Create.Spec.Trigger != forecastingv1alpha1.TriggerDrift || !p.Status.LastDriftRunTime.Equal(&metav1.Time{Time: tc.now})) {
				t.Errorf("drift run %+v, lastDriftRunTime %v", p.Create.Spec, p.Status.LastDriftRunTime)
			}
		})
	}
}

// TestPlanPortfolioLevelDrift: a run whose input series are within the threshold but whose
// depot totals are above it (driftedTree) makes AccuracyDrift True with LevelAboveThreshold,
// names the level, emits the reason once, starts a drift run under Retrain, and shows every
// level's verdict in status.hierarchyLevels; the run's own drift still wins.
func TestPlanPortfolioLevelDrift(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	run, fp := hierarchyDriftCase(t0, driftedTree(t), forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 100, Action: forecastingv1alpha1.DriftRetrain})

	p := planPortfolio(fp, []forecastingv1alpha1.ForecastRun{run}, t0.Add(time.Minute), stallCause{})
	c := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
	if c == nil || c.Status != metav1.ConditionTrue || c.Reason != forecastingv1alpha1.ReasonLevelAboveThreshold {
		t.Fatalf("AccuracyDrift = %+v, want True/LevelAboveThreshold", c)
	}
	if !strings.HasPrefix(c.Message, "run fenwick-weekly-29933550: level depot: realized MASE geometric mean 3.0000 is 1.500 times") ||
		!strings.Contains(c.Message, "; input series: realized MASE geometric mean 1.0000 is 1.000 times the expected 1.0000") {
		t.Errorf("message %q", c.Message)
	}
	if got := eventReasons(p); !slices.Contains(got, forecastingv1alpha1.ReasonLevelAboveThreshold) || p.Create == nil || p.Create.Spec.Trigger != forecastingv1alpha1.TriggerDrift {
		t.Errorf("events %v, run %+v; want LevelAboveThreshold and a drift run", got, p.Create)
	}
	var verdicts []string
	for _, l := range p.Status.HierarchyLevels {
		verdicts = append(verdicts, l.Name+"="+l.Drift)
	}
	want := []string{"total=TooFewPoints", "category=NotEvaluated", "depot=AboveThreshold", "item=WithinThreshold", "item+depot=WithinThreshold"}
	if diff := cmp.Diff(want, verdicts); diff != "" {
		t.Errorf("hierarchyLevels (-want,+got):\n%s", diff)
	}
	if d := p.Status.HierarchyLevels[2]; d.Nodes != 20 || d.Accuracy.ExpectedGeometric != "2.0000" || d.Accuracy.RealizedGeometric != "3.0000" {
		t.Errorf("depot %+v", d)
	}

	// The condition already True: no second Event.
	fp.Status = *p.Status
	if again := planPortfolio(fp, []forecastingv1alpha1.ForecastRun{run}, t0.Add(2*time.Minute), stallCause{}); slices.Contains(eventReasons(again), forecastingv1alpha1.ReasonLevelAboveThreshold) {
		t.Errorf("LevelAboveThreshold emitted again: %v", eventReasons(again))
	}

	// The input series above the threshold too: the run's reason wins.
	worse := run.DeepCopy()
	worse.Status.AccuracySums.RealizedSum = "240"
	worse.Status.AccuracySums.RealizedLogSum = "120"
	fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{LastScheduleTime: &metav1.Time{Time: t0}}
	p = planPortfolio(fp, []forecastingv1alpha1.ForecastRun{*worse}, t0.Add(time.Minute), stallCause{})
	if c := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift); c.Reason != forecastingv1alpha1.ReasonAboveThreshold {
		t.Errorf("input series above the threshold: reason %s", c.Reason)
	}

	// A run without a hierarchy clears the levels.
	flat := runAt("fenwick-weekly-29933610", t0, "ok", t0.Add(time.Hour))
	flat.Status.AccuracySums = run.Status.AccuracySums.DeepCopy()
	flat.Status.Accuracy = accuracyStatus(flat.Status.AccuracySums, flat.Name)
	fp.Status = *p.Status
	p = planPortfolio(fp, []forecastingv1alpha1.ForecastRun{run, flat}, t0.Add(2*time.Hour), stallCause{})
	if p.Status.HierarchyLevels != nil || meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift).Status != metav1.ConditionFalse {
		t.Errorf("after a run without levels: %+v", p.Status.HierarchyLevels)
	}
}

// TestPlanPortfolioLevelCalibration: a run whose input series cover their new actuals as
// promised and whose levels' accuracy is within the threshold, but whose depot and item
// quantiles are off (calibratedTree), makes AccuracyDrift True with LevelCalibrationOff,
// names both levels, starts a drift run under Retrain and shows each level's calibrationDrift;
// the input series' own calibration verdict comes first.
func TestPlanPortfolioLevelCalibration(t *testing.T) {
	t0 := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	run, fp := hierarchyDriftCase(t0, calibratedTree(t), forecastingv1alpha1.DriftSpec{ThresholdPercent: 130, MinEvaluatedPoints: 100,
		CalibrationFalseAlarmPercent: 1, Action: forecastingv1alpha1.DriftRetrain})

	p := planPortfolio(fp, []forecastingv1alpha1.ForecastRun{run}, t0.Add(time.Minute), stallCause{})
	c := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift)
	if c == nil || c.Status != metav1.ConditionTrue || c.Reason != forecastingv1alpha1.ReasonLevelCalibrationOff {
		t.Fatalf("AccuracyDrift = %+v, want True/LevelCalibrationOff", c)
	}
	if !strings.HasPrefix(c.Message, "run fenwick-weekly-29933550: level depot: calibration off") ||
		!strings.Contains(c.Message, "; level item: calibration off") || !strings.Contains(c.Message, "; input series: realized MASE") {
		t.Errorf("message %q", c.Message)
	}
	if got := eventReasons(p); !slices.Contains(got, forecastingv1alpha1.ReasonLevelCalibrationOff) || p.Create == nil || p.Create.Spec.Trigger != forecastingv1alpha1.TriggerDrift {
		t.Errorf("events %v, run %+v; want LevelCalibrationOff and a drift run", got, p.Create)
	}
	var verdicts []string
	for _, l := range p.Status.HierarchyLevels {
		verdicts = append(verdicts, l.Name+"="+l.Drift+"/"+l.CalibrationDrift)
	}
	want := []string{"total=NotEvaluated/", "depot=WithinThreshold/CalibrationOff", "item=WithinThreshold/CalibrationOff", "item+depot=WithinThreshold/CalibrationHeld"}
	if diff := cmp.Diff(want, verdicts); diff != "" {
		t.Errorf("hierarchyLevels (-want,+got):\n%s", diff)
	}

	// The input series' quantiles off too: their verdict wins.
	off := run.DeepCopy()
	off.Status.CalibrationSums = run.Status.Hierarchy.Levels[2].CalibrationSums.DeepCopy()
	fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{LastScheduleTime: &metav1.Time{Time: t0}}
	p = planPortfolio(fp, []forecastingv1alpha1.ForecastRun{*off}, t0.Add(time.Minute), stallCause{})
	if c := meta.FindStatusCondition(p.Status.Conditions, forecastingv1alpha1.PortfolioAccuracyDrift); c.Reason != forecastingv1alpha1.ReasonCalibrationOff {
		t.Errorf("input series off: reason %s", c.Reason)
	}
}

// hierarchyDriftCase is a finished run at t0 that evaluated tree, with the input series as
// its bottom level (the run's accuracy and calibration sums are that level's), and the Fenwick
// portfolio with the given drift rules, last scheduled at t0.
func hierarchyDriftCase(t0 time.Time, tree *forecastingv1alpha1.HierarchyStatus, drift forecastingv1alpha1.DriftSpec) (forecastingv1alpha1.ForecastRun, *forecastingv1alpha1.ForecastPortfolio) {
	run := runAt("fenwick-weekly-29933550", t0.Add(-time.Hour), "ok", t0)
	run.Status.Hierarchy = tree
	bottom := tree.Levels[len(tree.Levels)-1]
	run.Status.AccuracySums = bottom.AccuracySums.DeepCopy()
	run.Status.CalibrationSums = bottom.CalibrationSums.DeepCopy()
	run.Status.Accuracy = accuracyStatus(run.Status.AccuracySums, run.Name)
	fp := fenwickPortfolio()
	fp.Spec.Source.CredentialsSecretRef = nil
	fp.Spec.Drift = drift
	fp.Status = forecastingv1alpha1.ForecastPortfolioStatus{LastScheduleTime: &metav1.Time{Time: t0}}
	return run, fp
}
