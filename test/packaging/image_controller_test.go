package packaging

import (
	"bytes"
	"context"
	"fmt"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/util/wait"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
)

// TestControllerImageRuns starts the controller binary of the image in the image's read-only
// root, as uid 65532 (the sandbox of TestTrainerImageRuns), against a real kube-apiserver, and
// has it schedule the sample portfolio: its schedule is in Europe/Berlin, so the next schedule
// time it writes, Monday 04:30 Berlin time, shows the controller found the image's zoneinfo
// (without it the portfolio would be Stalled with reason InvalidTimeZone).
func TestControllerImageRuns(t *testing.T) {
	dir := imagesDir(t)
	if os.Getenv("KUBEBUILDER_ASSETS") == "" {
		t.Skip("KUBEBUILDER_ASSETS is not set: run `make controlplane` and `make test` (CI always sets it)")
	}
	img, work := unpackForSandbox(t, dir, "almanac-controller")

	env, cfg := startEnvtest(t, &envtest.Environment{CRDDirectoryPaths: []string{filepath.Join(repoRoot, "config", "crd", "bases")}, ErrorIfCRDPathMissing: true})
	user, err := env.AddUser(envtest.User{Name: "almanac-image-test", Groups: []string{"system:masters"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	kubeconfig, err := user.KubeConfig()
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(work, "kubeconfig"), kubeconfig, 0o644); err != nil {
		t.Fatal(err)
	}
	probe := freePort(t)
	cmd := sandboxCommand(t, img, work, []string{"KUBECONFIG=/tmp/kubeconfig"},
		"--metrics-bind-address=0", "--health-probe-bind-address=127.0.0.1:"+probe)
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	cmd.WaitDelay = 5 * time.Second
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	exited := make(chan struct{}) // closed when the sandbox has ended; waitErr is then set
	var waitErr error
	go func() { waitErr = cmd.Wait(); close(exited) }()
	t.Cleanup(func() {
		// A clean stop first: SIGTERM to the controller (the sandbox's leaf process); killing
		// unshare then ends whatever is left (test/sandbox: its PID namespace goes with it).
		if pid, err := leafPID(cmd.Process.Pid); err == nil && pid != cmd.Process.Pid {
			_ = syscall.Kill(pid, syscall.SIGTERM)
			select {
			case <-exited:
			case <-time.After(20 * time.Second):
				_ = syscall.Kill(pid, syscall.SIGKILL)
			}
		}
		_ = cmd.Process.Kill()
		<-exited
		if t.Failed() {
			t.Logf("controller output:\n%s", out.String())
		}
	})

	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	err = wait.PollUntilContextCancel(ctx, 250*time.Millisecond, true, func(ctx context.Context) (bool, error) {
		select {
		case <-exited:
			return false, fmt.Errorf("the controller exited: %v", waitErr)
		default:
		}
		resp, err := http.Get("http://127.0.0.1:" + probe + "/readyz")
		if err != nil {
			return false, nil
		}
		resp.Body.Close()
		return resp.StatusCode == http.StatusOK, nil
	})
	if err != nil {
		t.Fatalf("controller from the image not ready: %v\n%s", err, out.String())
	}

	// It runs as 65532: the process at the end of unshare's chain (unshare, sh, then the
	// controller, which env and chroot exec).
	if uid, err := childUID(cmd.Process.Pid); err != nil || uid != nonRootUID {
		t.Errorf("controller process uid %d (err %v), want %d", uid, err, nonRootUID)
	}

	c := newCluster(t, cfg)
	const ns = "fenwick-image"
	if _, err := c.apply(ctx, restrictedNamespace(ns), "test-setup", false); err != nil {
		t.Fatal(err)
	}
	secret := &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "v1", "kind": "Secret",
		"metadata": map[string]any{"name": "fenwick-planning-s3", "namespace": ns},
	}}
	if _, err := c.apply(ctx, secret, "test-setup", false); err != nil {
		t.Fatal(err)
	}
	sample := readObjects(t, filepath.Join("config", "samples", "forecasting_v1alpha1_forecastportfolio.yaml"))[0]
	sample.SetNamespace(ns)
	if tz, _, _ := unstructured.NestedString(sample.Object, "spec", "timeZone"); tz != "Europe/Berlin" {
		t.Fatalf("the sample's timeZone is %q; this test reads Europe/Berlin", tz)
	}
	if _, err := c.apply(ctx, sample, "test-setup", false); err != nil {
		t.Fatal(err)
	}
	r, _, err := c.resource(sample)
	if err != nil {
		t.Fatal(err)
	}
	var next, stalled string
	err = wait.PollUntilContextCancel(ctx, 250*time.Millisecond, true, func(ctx context.Context) (bool, error) {
		got, err := r.Get(ctx, sample.GetName(), metav1.GetOptions{})
		if err != nil {
			return false, err
		}
		next, _, _ = unstructured.NestedString(got.Object, "status", "nextScheduleTime")
		conds, _, _ := unstructured.NestedSlice(got.Object, "status", "conditions")
		for _, cond := range conds {
			if m, _ := cond.(map[string]any); m["type"] == "Stalled" {
				stalled = fmt.Sprintf("%v/%v: %v", m["status"], m["reason"], m["message"])
			}
		}
		return next != "" && stalled != "", nil
	})
	if err != nil {
		t.Fatalf("portfolio not scheduled: next %q, Stalled %q: %v\n%s", next, stalled, err, out.String())
	}
	if !strings.HasPrefix(stalled, "False/") {
		t.Errorf("portfolio Stalled %s", stalled)
	}
	when, err := time.Parse(time.RFC3339, next)
	if err != nil {
		t.Fatal(err)
	}
	berlin, err := time.LoadLocation("Europe/Berlin") // this machine's tzdata, the same package
	if err != nil {
		t.Fatal(err)
	}
	if local := when.In(berlin); local.Weekday() != time.Monday || local.Hour() != 4 || local.Minute() != 30 {
		t.Errorf("nextScheduleTime %s is %s in Berlin, want a Monday 04:30 (schedule \"30 4 * * 1\", timeZone Europe/Berlin)", next, local)
	}
}

// freePort returns a loopback TCP port nothing listens on now.
func freePort(t *testing.T) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return strconv.Itoa(l.Addr().(*net.TCPAddr).Port)
}

// leafPID follows the first child of each process from pid down to one without children.
func leafPID(pid int) (int, error) {
	for {
		children, err := os.ReadFile(fmt.Sprintf("/proc/%d/task/%d/children", pid, pid))
		if err != nil {
			return -1, err
		}
		f := strings.Fields(string(children))
		if len(f) == 0 {
			return pid, nil
		}
		if pid, err = strconv.Atoi(f[0]); err != nil {
			return -1, err
		}
	}
}

// childUID returns the real uid (from /proc) of leafPID(pid).
func childUID(pid int) (int, error) {
	pid, err := leafPID(pid)
	if err != nil {
		return -1, err
	}
	status, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return -1, err
	}
	for _, line := range strings.Split(string(status), "\n") {
		if v, ok := strings.CutPrefix(line, "Uid:"); ok {
			return strconv.Atoi(strings.Fields(v)[0])
		}
	}
	return -1, fmt.Errorf("/proc/%d/status has no Uid line", pid)
}
