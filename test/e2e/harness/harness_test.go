package harness

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/client-go/kubernetes"
	"k8s.io/client-go/rest"
	logf "sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"
)

func TestProcessLifetimeAndStop(t *testing.T) {
	dir := t.TempDir()
	short, err := StartProcess(dir, "short", time.Second, nil, "sleep", "30")
	if err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(5 * time.Second)
	for !short.Exited() && time.Now().Before(deadline) {
		time.Sleep(50 * time.Millisecond)
	}
	if !short.Exited() {
		_ = short.Stop(0)
		t.Fatal("a process with a 1 s lifetime still runs after 5 s")
	}
	if err := short.Stop(time.Second); err == nil {
		t.Error("Stop of a process that ended by itself reports no error")
	}

	// A shell that ignores SIGTERM and has a child: Stop kills the whole group.
	long, err := StartProcess(dir, "long", time.Minute, []string{"FENWICK_DEPOT=harlow-road"},
		"sh", "-c", `trap "" TERM; echo "$FENWICK_DEPOT"; sleep 60 & wait`)
	if err != nil {
		t.Fatal(err)
	}
	time.Sleep(300 * time.Millisecond)
	start := time.Now()
	if err := long.Stop(500 * time.Millisecond); err != nil {
		t.Fatal(err)
	}
	if !long.Exited() || time.Since(start) > 5*time.Second {
		t.Fatalf("Stop took %s, exited %v", time.Since(start), long.Exited())
	}
	// The orphaned sleep is reaped by init, which may take a moment.
	if err := waitGone(-long.PID(), 3*time.Second); err != nil {
		t.Errorf("process group %d still has members: %v", long.PID(), err)
	}
	b, _ := os.ReadFile(long.LogPath)
	if strings.TrimSpace(string(b)) != "harlow-road" {
		t.Errorf("log = %q, want the env value", b)
	}
	pids, _ := os.ReadFile(filepath.Join(dir, "pids"))
	if !strings.Contains(string(pids), strconv.Itoa(long.PID())+" long") {
		t.Errorf("pids file %q lacks %d", pids, long.PID())
	}
}

// TestClusterWithManager starts the whole cluster with the built manager binary, checks the
// CRDs, the manager's readiness and an in-process manager's access, then stops it and checks
// that every recorded process is gone.
func TestClusterWithManager(t *testing.T) {
	if os.Getenv("KUBEBUILDER_ASSETS") == "" {
		t.Skip("KUBEBUILDER_ASSETS is not set: run `make controlplane`")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "almanac-controller")
	build := exec.Command("go", "build", "-o", bin, "almanac.dev/almanac")
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	began := time.Now()
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("build manager: %v\n%s", err, out)
	}
	t.Logf("manager built in %s", time.Since(began).Round(time.Millisecond))
	began = time.Now()
	logf.SetLogger(zap.New(zap.WriteTo(io.Discard)))
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	c, err := Start(ctx, Options{
		Dir:      dir,
		CRDDirs:  []string{filepath.Join("..", "..", "..", "config", "crd", "bases")},
		Manager:  Binary{Path: bin},
		Lifetime: 3 * time.Minute,
	})
	if err != nil {
		t.Fatal(err)
	}
	stopped := false
	defer func() {
		if !stopped {
			_ = c.Stop()
		}
		if t.Failed() {
			for _, l := range c.Logs() {
				b, _ := os.ReadFile(l)
				if len(b) > 3000 {
					b = b[len(b)-3000:]
				}
				t.Logf("==> %s <==\n%s", l, b)
			}
		}
	}()
	t.Logf("cluster with manager up in %s", time.Since(began).Round(time.Millisecond))
	if err := c.Healthy(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(c.Kubeconfig); err != nil {
		t.Fatal(err)
	}
	node, err := c.Client.CoreV1().Nodes().Get(ctx, "localnode-0", metav1.GetOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if len(node.Status.Conditions) == 0 || node.Status.Conditions[0].Status != "True" {
		t.Errorf("node conditions %+v, want Ready=True", node.Status.Conditions)
	}
	if _, err := c.Client.Discovery().ServerResourcesForGroupVersion("forecasting.almanac.dev/v1alpha1"); err != nil {
		t.Errorf("CRDs not served: %v", err)
	}

	// The in-process kind gets a working config and is stopped by its stop function.
	saw := make(chan error, 1)
	stopIn, err := InProcess(func(ctx context.Context, cfg *rest.Config) error {
		cs, err := kubernetes.NewForConfig(cfg)
		if err == nil {
			_, err = cs.CoreV1().Namespaces().Get(ctx, "default", metav1.GetOptions{})
		}
		saw <- err
		<-ctx.Done()
		return ctx.Err()
	}).Start(ctx, c)
	if err != nil {
		t.Fatal(err)
	}
	if err := <-saw; err != nil {
		t.Errorf("in-process manager: %v", err)
	}
	if err := stopIn(); err != nil {
		t.Errorf("stop in-process manager: %v", err)
	}

	stopped = true
	if err := c.Stop(); err != nil {
		t.Fatalf("Stop: %v", err)
	}
	pids, err := os.ReadFile(filepath.Join(dir, "pids"))
	if err != nil {
		t.Fatal(err)
	}
	names := map[string]bool{}
	for _, line := range strings.Split(strings.TrimSpace(string(pids)), "\n") {
		f := strings.Fields(line)
		pid, _ := strconv.Atoi(f[0])
		names[f[1]] = true
		if err := waitGone(pid, 3*time.Second); err != nil {
			t.Errorf("%s still runs after Stop: %v", line, err)
		}
	}
	for _, n := range []string{"etcd", "kube-apiserver", "kube-controller-manager", "almanac-controller"} {
		if !names[n] {
			t.Errorf("pids file has no %s:\n%s", n, pids)
		}
	}
	if _, err := c.Client.CoreV1().Nodes().Get(context.Background(), "localnode-0", metav1.GetOptions{}); err == nil || apierrors.IsNotFound(err) {
		t.Errorf("API server still answers after Stop: %v", err)
	}
}

// waitGone waits until kill(pid, 0) reports ESRCH (pid < 0: a process group).
func waitGone(pid int, timeout time.Duration) error {
	deadline := time.Now().Add(timeout)
	for {
		err := syscall.Kill(pid, 0)
		if errors.Is(err, syscall.ESRCH) {
			return nil
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("kill(%d, 0) = %v after %s", pid, err, timeout)
		}
		time.Sleep(50 * time.Millisecond)
	}
}
