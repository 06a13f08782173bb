package localnode

import (
	"bytes"
	"io"
	"os"
	"strings"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// loopback is the pod and host IP of every pod: processes share the host network.
const loopback = "127.0.0.1"

// Limits of the termination message, from the doc comments of Container.TerminationMessagePath
// and Container.TerminationMessagePolicy in k8s.io/api v0.37.2 core/v1/types.go: the node
// truncates a message greater than 4096 bytes; FallbackToLogsOnError uses log output limited to
// 2048 bytes or 80 lines, whichever is smaller.
const (
	maxMessageBytes = 4096
	maxLogBytes     = 2048
	maxLogLines     = 80
)

// containerRun is what the agent knows about the pod's one container.
type containerRun struct {
	name         string
	image        string
	restartCount int32
	// waiting is set (with message) while the container has not started.
	waiting, waitingMessage string
	started                 metav1.Time // zero until the process started
	// terminated is the last exit; nil while running or before the first start.
	terminated *corev1.ContainerStateTerminated
	// lastTerminated is the exit before a restart.
	lastTerminated *corev1.ContainerStateTerminated
}

// podStatus returns status with phase, conditions and the container status derived from the
// run. Conditions of types this agent does not own (DisruptionTarget, ones set by others) are
// kept. terminal says the pod will not run again (its phase is Succeeded or Failed).
func podStatus(old corev1.PodStatus, cr containerRun, terminal bool, startTime metav1.Time, now metav1.Time) corev1.PodStatus {
	st := *old.DeepCopy()
	st.HostIP, st.PodIP = loopback, loopback
	st.HostIPs = []corev1.HostIP{{IP: loopback}}
	st.PodIPs = []corev1.PodIP{{IP: loopback}}
	if !startTime.IsZero() && st.StartTime == nil {
		st.StartTime = &startTime
	}
	cs := corev1.ContainerStatus{Name: cr.name, Image: cr.image, ImageID: "localnode://" + cr.image, RestartCount: cr.restartCount}
	running := false
	switch {
	case cr.terminated != nil:
		cs.State.Terminated = cr.terminated
	case !cr.started.IsZero():
		cs.State.Running = &corev1.ContainerStateRunning{StartedAt: cr.started}
		cs.Ready, running = true, true
		cs.Started = ptrTo(true)
	default:
		cs.State.Waiting = &corev1.ContainerStateWaiting{Reason: cr.waiting, Message: cr.waitingMessage}
	}
	if cr.lastTerminated != nil {
		cs.LastTerminationState.Terminated = cr.lastTerminated
	}
	if cs.Started == nil {
		cs.Started = ptrTo(false)
	}
	st.ContainerStatuses = []corev1.ContainerStatus{cs}

	switch {
	case !terminal && running:
		st.Phase = corev1.PodRunning
	case !terminal:
		st.Phase = corev1.PodPending
	case cr.terminated != nil && cr.terminated.ExitCode == 0:
		st.Phase = corev1.PodSucceeded
	default:
		st.Phase = corev1.PodFailed
	}
	ready, readyReason := corev1.ConditionFalse, "ContainersNotReady"
	if running && !terminal {
		ready, readyReason = corev1.ConditionTrue, ""
	} else if terminal {
		readyReason = "PodCompleted"
	}
	initialized := corev1.ConditionTrue
	set := func(t corev1.PodConditionType, s corev1.ConditionStatus, reason string) {
		st.Conditions = setCondition(st.Conditions, corev1.PodCondition{Type: t, Status: s, Reason: reason}, now)
	}
	set(corev1.PodScheduled, corev1.ConditionTrue, "")
	set(corev1.PodInitialized, initialized, "")
	set(corev1.PodReadyToStartContainers, boolCondition(!terminal || cr.terminated != nil), "")
	set(corev1.ContainersReady, ready, readyReason)
	set(corev1.PodReady, ready, readyReason)
	return st
}

// setCondition sets c in conds, keeping lastTransitionTime when the status did not change.
func setCondition(conds []corev1.PodCondition, c corev1.PodCondition, now metav1.Time) []corev1.PodCondition {
	c.LastProbeTime = metav1.Time{}
	for i := range conds {
		if conds[i].Type != c.Type {
			continue
		}
		c.LastTransitionTime = conds[i].LastTransitionTime
		if conds[i].Status != c.Status || c.LastTransitionTime.IsZero() {
			c.LastTransitionTime = now
		}
		conds[i] = c
		return conds
	}
	c.LastTransitionTime = now
	return append(conds, c)
}

func boolCondition(b bool) corev1.ConditionStatus {
	if b {
		return corev1.ConditionTrue
	}
	return corev1.ConditionFalse
}

// terminationMessage returns the message the kubelet would report: the message file's first
// maxMessageBytes bytes; with FallbackToLogsOnError and a non-zero exit and an empty file, the
// tail of the container log (maxLogLines lines, maxLogBytes bytes at most).
func terminationMessage(messageFile, logFile string, policy corev1.TerminationMessagePolicy, exitCode int32) string {
	msg := readCapped(messageFile, maxMessageBytes)
	if msg != "" || policy != corev1.TerminationMessageFallbackToLogsOnError || exitCode == 0 {
		return msg
	}
	b, err := os.ReadFile(logFile)
	if err != nil {
		return ""
	}
	return logTail(b)
}

// logTail returns the last maxLogLines lines of b, cut to its last maxLogBytes bytes.
func logTail(b []byte) string {
	b = bytes.TrimRight(b, "\n")
	lines := 0
	for i := len(b) - 1; i >= 0; i-- {
		if b[i] == '\n' {
			if lines++; lines == maxLogLines {
				b = b[i+1:]
				break
			}
		}
	}
	if len(b) > maxLogBytes {
		b = b[len(b)-maxLogBytes:]
	}
	return strings.TrimLeft(string(b), "\n")
}

// readCapped returns the first max bytes of the file, or "" when it cannot be read.
func readCapped(path string, max int) string {
	f, err := os.Open(path)
	if err != nil {
		return ""
	}
	defer f.Close()
	buf := make([]byte, max)
	n, _ := io.ReadFull(f, buf)
	return string(buf[:n])
}

func ptrTo[T any](v T) *T { return &v }
