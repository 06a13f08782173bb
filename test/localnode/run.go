package localnode

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"sync"
	"syscall"
	"time"

	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/api/equality"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/client-go/util/retry"

	"almanac.dev/almanac/test/sandbox"
)

// podRun runs one pod's container as a host process and reports its status.
type podRun struct {
	a        *Agent
	pod      *corev1.Pod // as first seen; status writes re-read the pod
	uid      types.UID
	dir      string
	stopOnce sync.Once
	stopCh   chan struct{} // closed when the pod is being deleted
	grace    time.Duration // valid once stopCh is closed
	done     chan struct{} // closed when run returns
}

func newPodRun(a *Agent, pod *corev1.Pod, dir string) *podRun {
	return &podRun{a: a, pod: pod.DeepCopy(), uid: pod.UID, dir: dir, stopCh: make(chan struct{}), done: make(chan struct{})}
}

// stop asks the run to end the process: SIGTERM, then SIGKILL after grace.
func (r *podRun) stop(grace time.Duration) {
	r.stopOnce.Do(func() {
		r.grace = grace
		close(r.stopCh)
	})
}

// finished reports whether run has returned.
func (r *podRun) finished() bool {
	select {
	case <-r.done:
		return true
	default:
		return false
	}
}

func (r *podRun) stopping() bool {
	select {
	case <-r.stopCh:
		return true
	default:
		return false
	}
}

// process is a prepared container process.
type process struct {
	cmd         *exec.Cmd // not started; exec sets its output and process group
	argv        []string  // the container's command line, for the log
	logFile     string
	messageFile string
}

// run drives the pod from Pending to a terminal phase and, when the pod is being deleted,
// removes it once the process has ended.
// When ctx ends (the agent stops), the process is killed and no status is written.
func (r *podRun) run(ctx context.Context) {
	defer close(r.done)
	pod := r.pod
	cr := containerRun{waiting: "ContainerCreating"}
	start := metav1.Now()
	terminal := r.runContainer(ctx, pod, &cr, start)
	if ctx.Err() != nil {
		return
	}
	if err := r.writeStatus(ctx, cr, terminal, start); err != nil {
		r.a.log.Error(err, "write status", "pod", pod.Namespace+"/"+pod.Name)
	}
	if r.stopping() {
		r.a.queue.Add(pod.Namespace + "/" + pod.Name) // sync removes the pod now that run is done
		return
	}
	select {
	case <-ctx.Done():
	case <-r.stopCh:
		r.a.queue.Add(pod.Namespace + "/" + pod.Name)
	}
}

// runContainer prepares and runs the container (restarting it as its restartPolicy says) and
// returns whether the pod has reached a terminal phase; cr holds the last container state.
func (r *podRun) runContainer(ctx context.Context, pod *corev1.Pod, cr *containerRun, start metav1.Time) bool {
	if len(pod.Spec.Containers) != 1 || len(pod.Spec.InitContainers) != 0 {
		cr.name = pod.Spec.Containers[0].Name
		cr.waiting, cr.waitingMessage = "CreateContainerConfigError", "localnode runs pods with exactly one container and no init containers"
		return true
	}
	c := &pod.Spec.Containers[0]
	cr.name, cr.image = c.Name, c.Image
	prepare := func() (process, error) { return r.prepareHost(ctx, pod, c, r.a.opts.Images[c.Image]) }
	if img, ok := r.a.opts.Sandboxed[c.Image]; ok {
		prepare = func() (process, error) { return r.prepareSandbox(ctx, pod, c, img) }
	} else if _, ok := r.a.opts.Images[c.Image]; !ok {
		cr.waiting, cr.waitingMessage = "ErrImagePull", fmt.Sprintf("image %q is not in localnode's image map", c.Image)
		return true
	}
	for backoff := time.Second; ; backoff = min(2*backoff, 10*time.Second) {
		p, err := prepare()
		for err != nil {
			if errors.Is(err, errStart) {
				now := metav1.Now()
				cr.terminated = &corev1.ContainerStateTerminated{ExitCode: 128, Reason: "StartError", Message: err.Error(), StartedAt: now, FinishedAt: now}
				return true
			}
			cr.waiting, cr.waitingMessage = "CreateContainerConfigError", err.Error()
			if werr := r.writeStatus(ctx, *cr, false, start); werr != nil && ctx.Err() == nil {
				r.a.log.Error(werr, "write status", "pod", pod.Namespace+"/"+pod.Name)
			}
			select {
			case <-ctx.Done():
				return false
			case <-r.stopCh:
				return true
			case <-time.After(2 * time.Second):
			}
			p, err = prepare()
		}
		cr.terminated = r.exec(ctx, pod, cr, p, start)
		if ctx.Err() != nil {
			return false
		}
		policy := pod.Spec.RestartPolicy
		again := policy == corev1.RestartPolicyAlways || (policy == corev1.RestartPolicyOnFailure && cr.terminated.ExitCode != 0)
		if !again || r.stopping() {
			return true
		}
		cr.lastTerminated, cr.terminated, cr.started = cr.terminated, nil, metav1.Time{}
		cr.restartCount++
		cr.waiting, cr.waitingMessage = "CrashLoopBackOff", fmt.Sprintf("back-off %s restarting container %s", backoff, c.Name)
		if err := r.writeStatus(ctx, *cr, false, start); err != nil && ctx.Err() == nil {
			r.a.log.Error(err, "write status", "pod", pod.Namespace+"/"+pod.Name)
		}
		select {
		case <-ctx.Done():
			return false
		case <-r.stopCh:
			return true
		case <-time.After(backoff):
		}
	}
}

// files makes the pod's volumes and the container's log and termination message files; it
// returns the mounts, the process with its file names and the resolved environment.
func (r *podRun) files(ctx context.Context, pod *corev1.Pod, c *corev1.Container) ([]volumeMount, process, []envVar, error) {
	src := apiData{r.a.opts.Client}
	mounts, err := materialize(ctx, pod, c, r.dir, src)
	if err != nil {
		return nil, process{}, nil, err
	}
	p := process{
		logFile:     filepath.Join(r.dir, c.Name+".log"),
		messageFile: filepath.Join(r.dir, c.Name+".termination-log"),
	}
	msgPath := c.TerminationMessagePath
	if msgPath == "" {
		msgPath = corev1.TerminationMessagePathDefault
	}
	// Empty and writable by any user, as the kubelet makes it (mode 0666, from memory of its
	// source).
	if err := os.WriteFile(p.messageFile, nil, 0o666); err != nil {
		return nil, process{}, nil, err
	}
	if err := os.Chmod(p.messageFile, 0o666); err != nil {
		return nil, process{}, nil, err
	}
	mounts = append(mounts, volumeMount{path: msgPath, host: p.messageFile})
	env, err := resolveEnv(ctx, pod, c, src)
	if err != nil {
		return nil, process{}, nil, err
	}
	return mounts, p, env, nil
}

// prepareHost prepares the container as a host process of binary: every mount path is
// rewritten to its host path in the args and env values (see the package comment).
func (r *podRun) prepareHost(ctx context.Context, pod *corev1.Pod, c *corev1.Container, binary string) (process, error) {
	mounts, p, env, err := r.files(ctx, pod, c)
	if err != nil {
		return process{}, err
	}
	pairs := map[string]string{}
	for _, m := range mounts {
		pairs[m.path] = m.host
	}
	paths := newPathMap(pairs)
	workDir := filepath.Join(r.dir, "work")
	vals := map[string]string{}
	envList := []string{"PATH=/usr/local/sbin:/usr/local/bin:/usr/sbin:/usr/bin:/sbin:/bin", "HOME=" + workDir, "HOSTNAME=" + pod.Name}
	for _, e := range env {
		vals[e.name] = e.value
		envList = append(envList, e.name+"="+paths.rewrite(e.value))
	}
	argv := []string{binary}
	if len(c.Command) > 0 {
		if filepath.Base(c.Command[0]) != filepath.Base(binary) {
			return process{}, fmt.Errorf("%w: command %q: localnode runs only the image's entrypoint %s", errStart, c.Command[0], filepath.Base(binary))
		}
		argv = append(argv, c.Command[1:]...)
	}
	argv = append(argv, c.Args...)
	for i := 1; i < len(argv); i++ {
		argv[i] = paths.rewrite(expand(argv[i], vals))
	}
	if c.WorkingDir != "" {
		if w := paths.rewrite(c.WorkingDir); w != c.WorkingDir {
			workDir = w
		}
	}
	if err := os.MkdirAll(workDir, 0o755); err != nil {
		return process{}, err
	}
	p.argv = argv
	p.cmd = exec.Command(argv[0], argv[1:]...)
	p.cmd.Env, p.cmd.Dir = envList, workDir
	// SIGKILL if the agent's process dies first.
	p.cmd.SysProcAttr = &syscall.SysProcAttr{Pdeathsig: syscall.SIGKILL}
	return p, nil
}

// errStart marks a container that cannot be started (the runtime's StartError).
var errStart = errors.New("cannot start container")

// exec runs the process until it exits, the pod is deleted (SIGTERM, grace, SIGKILL) or ctx
// ends (SIGKILL), and returns the terminated state. While it runs, the pod is Running.
func (r *podRun) exec(ctx context.Context, pod *corev1.Pod, cr *containerRun, p process, start metav1.Time) *corev1.ContainerStateTerminated {
	c := &pod.Spec.Containers[0]
	started := metav1.Now()
	failed := func(err error) *corev1.ContainerStateTerminated {
		return &corev1.ContainerStateTerminated{ExitCode: 128, Reason: "StartError", Message: err.Error(), StartedAt: started, FinishedAt: metav1.Now()}
	}
	log, err := os.OpenFile(p.logFile, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o644)
	if err != nil {
		return failed(err)
	}
	defer log.Close()
	cmd := p.cmd
	cmd.Stdout, cmd.Stderr = log, log
	// Own process group so that the whole tree can be signalled.
	cmd.SysProcAttr.Setpgid = true
	if err := cmd.Start(); err != nil {
		return failed(err)
	}
	pgid := cmd.Process.Pid
	exited := make(chan struct{}) // closed when the process has ended; its status is cmd.ProcessState
	go func() { _ = cmd.Wait(); close(exited) }()
	cr.started, cr.waiting, cr.waitingMessage = started, "", ""
	if err := r.writeStatus(ctx, *cr, false, start); err != nil && ctx.Err() == nil {
		r.a.log.Error(err, "write status", "pod", pod.Namespace+"/"+pod.Name)
	}
	r.a.log.V(1).Info("started", "pod", pod.Namespace+"/"+pod.Name, "pid", pgid, "argv", p.argv)
	select {
	case <-exited:
	case <-ctx.Done():
		_ = syscall.Kill(-pgid, syscall.SIGKILL)
		<-exited
	case <-r.stopCh:
		_ = syscall.Kill(-pgid, syscall.SIGTERM)
		select {
		case <-exited:
		case <-time.After(r.grace):
			_ = syscall.Kill(-pgid, syscall.SIGKILL)
			<-exited
		case <-ctx.Done():
			_ = syscall.Kill(-pgid, syscall.SIGKILL)
			<-exited
		}
	}
	_ = syscall.Kill(-pgid, syscall.SIGKILL) // whatever the process left behind in its group
	code := int32(sandbox.ExitStatus(cmd.ProcessState))
	t := &corev1.ContainerStateTerminated{ExitCode: code, Reason: "Completed", StartedAt: started, FinishedAt: metav1.Now(), ContainerID: fmt.Sprintf("localnode://%d", pgid)}
	if code != 0 {
		t.Reason = "Error"
	}
	t.Message = terminationMessage(p.messageFile, p.logFile, c.TerminationMessagePolicy, code)
	r.a.log.V(1).Info("exited", "pod", pod.Namespace+"/"+pod.Name, "pid", pgid, "exitCode", code)
	return t
}

// writeStatus writes the pod status for the container state, re-reading the pod on conflict.
func (r *podRun) writeStatus(ctx context.Context, cr containerRun, terminal bool, start metav1.Time) error {
	pods := r.a.opts.Client.CoreV1().Pods(r.pod.Namespace)
	err := retry.RetryOnConflict(retry.DefaultBackoff, func() error {
		cur, err := pods.Get(ctx, r.pod.Name, metav1.GetOptions{})
		if err != nil {
			return err
		}
		if cur.UID != r.uid {
			return nil
		}
		st := podStatus(cur.Status, cr, terminal, start, metav1.Now())
		if equality.Semantic.DeepEqual(st, cur.Status) {
			return nil
		}
		cur.Status = st
		_, err = pods.UpdateStatus(ctx, cur, metav1.UpdateOptions{})
		return err
	})
	if apierrors.IsNotFound(err) {
		return nil
	}
	return err
}
