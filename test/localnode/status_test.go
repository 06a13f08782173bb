package localnode

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

func condition(st corev1.PodStatus, t corev1.PodConditionType) corev1.PodCondition {
	for _, c := range st.Conditions {
		if c.Type == t {
			return c
		}
	}
	return corev1.PodCondition{}
}

func TestPodStatusLifecycle(t *testing.T) {
	t0 := metav1.NewTime(time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC))
	t1 := metav1.NewTime(t0.Add(time.Second))
	t2 := metav1.NewTime(t0.Add(2 * time.Second))
	// Conditions of other writers survive.
	old := corev1.PodStatus{Conditions: []corev1.PodCondition{{Type: corev1.DisruptionTarget, Status: corev1.ConditionTrue, Reason: "EvictionByEvictionAPI"}}}

	cr := containerRun{name: "train", image: "fenwick/prog:1", waiting: "ContainerCreating"}
	pending := podStatus(old, cr, false, t0, t0)
	if pending.Phase != corev1.PodPending || pending.ContainerStatuses[0].State.Waiting.Reason != "ContainerCreating" {
		t.Fatalf("pending: %+v", pending)
	}
	if c := condition(pending, corev1.PodReady); c.Status != corev1.ConditionFalse {
		t.Errorf("pending Ready = %v", c.Status)
	}

	cr.started, cr.waiting = t1, ""
	running := podStatus(pending, cr, false, t0, t1)
	if running.Phase != corev1.PodRunning || running.StartTime == nil || !running.StartTime.Equal(&t0) {
		t.Fatalf("running: phase %s startTime %v", running.Phase, running.StartTime)
	}
	cs := running.ContainerStatuses[0]
	if cs.State.Running == nil || !cs.Ready || !*cs.Started || running.PodIP != loopback {
		t.Errorf("running container status: %+v", cs)
	}
	for _, ct := range []corev1.PodConditionType{corev1.PodScheduled, corev1.PodInitialized, corev1.ContainersReady, corev1.PodReady} {
		if c := condition(running, ct); c.Status != corev1.ConditionTrue {
			t.Errorf("running %s = %v", ct, c.Status)
		}
	}
	if c := condition(running, corev1.PodReady); !c.LastTransitionTime.Equal(&t1) {
		t.Errorf("Ready transition %v, want %v", c.LastTransitionTime, t1)
	}
	if c := condition(running, corev1.PodScheduled); !c.LastTransitionTime.Equal(&t0) {
		t.Errorf("PodScheduled transition moved to %v", c.LastTransitionTime)
	}

	for _, tc := range []struct {
		code  int32
		phase corev1.PodPhase
	}{{0, corev1.PodSucceeded}, {2, corev1.PodFailed}, {143, corev1.PodFailed}} {
		done := cr
		done.terminated = &corev1.ContainerStateTerminated{ExitCode: tc.code, Reason: "Error", Message: "m"}
		st := podStatus(running, done, true, t0, t2)
		if st.Phase != tc.phase {
			t.Errorf("exit %d: phase %s, want %s", tc.code, st.Phase, tc.phase)
		}
		if got := st.ContainerStatuses[0].State.Terminated; got == nil || got.ExitCode != tc.code || got.Message != "m" {
			t.Errorf("exit %d: terminated %+v", tc.code, got)
		}
		if c := condition(st, corev1.PodReady); c.Status != corev1.ConditionFalse || c.Reason != "PodCompleted" {
			t.Errorf("exit %d: Ready %v %s", tc.code, c.Status, c.Reason)
		}
		if c := condition(st, corev1.DisruptionTarget); c.Status != corev1.ConditionTrue {
			t.Errorf("exit %d: DisruptionTarget lost", tc.code)
		}
	}

	// An image that is not in the map: terminal, Failed, with the waiting reason kept.
	missing := containerRun{name: "train", image: "other:1", waiting: "ErrImagePull", waitingMessage: "not in map"}
	st := podStatus(old, missing, true, t0, t0)
	if st.Phase != corev1.PodFailed || st.ContainerStatuses[0].State.Waiting.Reason != "ErrImagePull" {
		t.Errorf("unknown image: %+v", st)
	}
}

func TestTerminationMessage(t *testing.T) {
	dir := t.TempDir()
	msg, logf := filepath.Join(dir, "msg"), filepath.Join(dir, "log")
	var lines []string
	for i := range 100 {
		lines = append(lines, fmt.Sprintf("line %03d", i))
	}
	if err := os.WriteFile(logf, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	write := func(s string) {
		if err := os.WriteFile(msg, []byte(s), 0o644); err != nil {
			t.Fatal(err)
		}
	}

	write("index=2 depot=Harlow Road")
	if got := terminationMessage(msg, logf, corev1.TerminationMessageReadFile, 1); got != "index=2 depot=Harlow Road" {
		t.Errorf("file message = %q", got)
	}
	write(strings.Repeat("x", 5000))
	if got := terminationMessage(msg, logf, corev1.TerminationMessageReadFile, 1); len(got) != 4096 {
		t.Errorf("message length %d, want the 4096-byte cap", len(got))
	}
	write("")
	if got := terminationMessage(msg, logf, corev1.TerminationMessageReadFile, 1); got != "" {
		t.Errorf("File policy with empty file = %q", got)
	}
	if got := terminationMessage(msg, logf, corev1.TerminationMessageFallbackToLogsOnError, 0); got != "" {
		t.Errorf("fallback on success = %q, want empty", got)
	}
	// 80 lines of 9 bytes less the last newline: 719 bytes, under the 2048-byte cap.
	got := terminationMessage(msg, logf, corev1.TerminationMessageFallbackToLogsOnError, 1)
	if want := strings.Join(lines[20:], "\n"); got != want {
		t.Errorf("fallback = %d lines from %q, want the last 80 from line 020", strings.Count(got, "\n")+1, got[:8])
	}
	long := strings.Repeat("y", 3000) + "\n"
	if got := logTail([]byte(long)); len(got) != 2048 {
		t.Errorf("logTail of one long line: %d bytes, want 2048", len(got))
	}
	if got := terminationMessage(filepath.Join(dir, "absent"), filepath.Join(dir, "absent"), corev1.TerminationMessageFallbackToLogsOnError, 1); got != "" {
		t.Errorf("missing files = %q", got)
	}
}
