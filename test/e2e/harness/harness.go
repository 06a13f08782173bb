// Package harness starts and stops the local cluster the end-to-end tests run against: etcd
// and kube-apiserver (through envtest), kube-controller-manager, the localnode agent and,
// optionally, the almanac manager.
//
// etcd, kube-apiserver and kube-controller-manager are real processes on loopback. Each runs
// under coreutils timeout(1), so it dies after Options.Lifetime even when the test binary is
// killed; each is started in its own process group, its PID is written to <Dir>/pids, and Stop
// ends the group (SIGTERM, then SIGKILL). The localnode agent runs in the test process (a
// goroutine); the processes it starts get SIGKILL when the test process dies. Logs go to files
// under Dir. Start returns once the Nodes are Ready.
//
// The almanac manager plugs in through Options.Manager in one of two kinds: InProcess (a
// function run in the test process with the admin config, for tests that need the manager's
// internals) or Binary (the built bin/almanac-controller as one more process, for tests of the
// shipped binary).
package harness

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"time"

	"go.uber.org/zap/zapcore"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/client-go/kubernetes"
	"k8s.io/client-go/rest"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"

	"almanac.dev/almanac/test/localnode"
	"almanac.dev/almanac/test/sandbox"
)

// DefaultControllers are the kube-controller-manager controllers the harness runs: the Job
// controller and the garbage collector (which deletes a deleted Job's pods).
var DefaultControllers = []string{"job", "garbagecollector"}

// Options configure Start. Zero values take the documented defaults.
type Options struct {
	// Dir receives logs, the kubeconfig, pids and the pods' directories; it must exist.
	Dir string
	// Assets holds etcd, kube-apiserver and kube-controller-manager; default
	// $KUBEBUILDER_ASSETS.
	Assets string
	// CRDDirs are installed before Start returns.
	CRDDirs []string
	// Controllers passed to kube-controller-manager --controllers; default DefaultControllers.
	Controllers []string
	// Nodes the localnode agent registers; default one node named "localnode-0".
	Nodes []localnode.NodeSpec
	// Images is localnode's image-to-binary map.
	Images map[string]string
	// Sandboxed and SharedDirs are passed to localnode: images whose pods run in the image's
	// root (test/sandbox; needs root), and host directories bound into every such pod.
	Sandboxed  map[string]*sandbox.Image
	SharedDirs []string
	// MaxPodsPerNode is passed to localnode.
	MaxPodsPerNode int
	// Manager, when set, is started last and stopped first.
	Manager Manager
	// Lifetime bounds every process; default 15 minutes.
	Lifetime time.Duration
}

// Cluster is a running local cluster.
type Cluster struct {
	// RESTConfig is an admin (system:masters) client configuration.
	RESTConfig *rest.Config
	// Kubeconfig is the path of a kubeconfig file with the same credentials.
	Kubeconfig string
	// Client is a clientset for RESTConfig.
	Client kubernetes.Interface
	// Dir is Options.Dir.
	Dir string

	env       *envtest.Environment
	kcm       *Process
	nodeStop  context.CancelFunc
	nodeDone  chan error
	nodeLog   *os.File
	logs      []*os.File // etcd and kube-apiserver logs, closed by Stop
	mgrStop   func() error
	lifetime  time.Duration
	stopOnce  sync.Once
	stopError error
}

// Manager is the almanac manager as the harness starts it: in the test process or as a binary.
type Manager interface {
	// Start starts the manager against c and returns the function that stops it.
	Start(ctx context.Context, c *Cluster) (stop func() error, err error)
}

// Start brings up the cluster; on error everything already started is stopped again. ctx
// bounds the start only; use Stop to end the cluster.
func Start(ctx context.Context, opts Options) (c *Cluster, err error) {
	if opts.Dir == "" {
		return nil, errors.New("harness: Options.Dir is required")
	}
	if opts.Assets == "" {
		opts.Assets = os.Getenv("KUBEBUILDER_ASSETS")
	}
	for _, b := range []string{"etcd", "kube-apiserver", "kube-controller-manager"} {
		if _, err := os.Stat(filepath.Join(opts.Assets, b)); err != nil {
			return nil, fmt.Errorf("harness: %w (run `make controlplane`)", err)
		}
	}
	if len(opts.Controllers) == 0 {
		opts.Controllers = DefaultControllers
	}
	if len(opts.Nodes) == 0 {
		opts.Nodes = []localnode.NodeSpec{{Name: "localnode-0"}}
	}
	if opts.Lifetime == 0 {
		opts.Lifetime = 15 * time.Minute
	}
	c = &Cluster{Dir: opts.Dir, lifetime: opts.Lifetime}
	defer func() {
		if err != nil {
			_ = c.Stop()
			c = nil
		}
	}()

	// envtest starts etcd and kube-apiserver; wrappers put each under timeout(1).
	bin := filepath.Join(opts.Dir, "bin")
	etcd, err := lifetimeWrapper(bin, filepath.Join(opts.Assets, "etcd"), opts.Lifetime)
	if err != nil {
		return c, err
	}
	apiserver, err := lifetimeWrapper(bin, filepath.Join(opts.Assets, "kube-apiserver"), opts.Lifetime)
	if err != nil {
		return c, err
	}
	c.env = &envtest.Environment{CRDDirectoryPaths: opts.CRDDirs, ErrorIfCRDPathMissing: len(opts.CRDDirs) > 0}
	api := c.env.ControlPlane.GetAPIServer()
	c.env.ControlPlane.Etcd = &envtest.Etcd{Path: etcd}
	api.Path = apiserver
	// pods/log reaches localnode's log endpoint at the Node's InternalIP (127.0.0.1); its
	// Hostname address does not resolve.
	api.Configure().Set("kubelet-preferred-address-types", "InternalIP")
	etcdLog, err := os.Create(filepath.Join(opts.Dir, "etcd.log"))
	if err != nil {
		return c, err
	}
	apiLog, err := os.Create(filepath.Join(opts.Dir, "kube-apiserver.log"))
	if err != nil {
		return c, err
	}
	c.logs = append(c.logs, etcdLog, apiLog)
	c.env.ControlPlane.Etcd.Out, c.env.ControlPlane.Etcd.Err = etcdLog, etcdLog
	api.Out, api.Err = apiLog, apiLog
	if c.RESTConfig, err = c.env.Start(); err != nil {
		return c, fmt.Errorf("harness: start etcd and kube-apiserver: %w", err)
	}
	if err := recordPIDs(opts.Dir, "etcd", "kube-apiserver"); err != nil {
		return c, err
	}
	user, err := c.env.AddUser(envtest.User{Name: "harness-admin", Groups: []string{"system:masters"}}, nil)
	if err != nil {
		return c, err
	}
	c.RESTConfig = user.Config()
	kubeconfig, err := user.KubeConfig()
	if err != nil {
		return c, err
	}
	c.Kubeconfig = filepath.Join(opts.Dir, "kubeconfig")
	if err := os.WriteFile(c.Kubeconfig, kubeconfig, 0o600); err != nil {
		return c, err
	}
	if c.Client, err = kubernetes.NewForConfig(c.RESTConfig); err != nil {
		return c, err
	}

	c.kcm, err = StartProcess(opts.Dir, "kube-controller-manager", opts.Lifetime, nil, filepath.Join(opts.Assets, "kube-controller-manager"),
		"--kubeconfig="+c.Kubeconfig,
		"--controllers="+strings.Join(opts.Controllers, ","),
		"--leader-elect=false",
		"--secure-port=0",
	)
	if err != nil {
		return c, err
	}

	if err := c.startNode(opts); err != nil {
		return c, err
	}
	if opts.Manager != nil {
		if c.mgrStop, err = opts.Manager.Start(ctx, c); err != nil {
			return c, fmt.Errorf("harness: start manager: %w", err)
		}
	}
	return c, nil
}

// startNode runs the localnode agent in a goroutine, logging to localnode.log.
func (c *Cluster) startNode(opts Options) error {
	f, err := os.Create(filepath.Join(opts.Dir, "localnode.log"))
	if err != nil {
		return err
	}
	c.nodeLog = f
	agent, err := localnode.New(localnode.Options{
		Client:         c.Client,
		Nodes:          opts.Nodes,
		Images:         opts.Images,
		Sandboxed:      opts.Sandboxed,
		SharedDirs:     opts.SharedDirs,
		Dir:            filepath.Join(opts.Dir, "pods"),
		MaxPodsPerNode: opts.MaxPodsPerNode,
		Log:            zap.New(zap.WriteTo(f), zap.UseDevMode(true), zap.Level(zapcore.DebugLevel)),
	})
	if err != nil {
		return err
	}
	ctx, cancel := context.WithCancel(context.Background())
	c.nodeStop, c.nodeDone = cancel, make(chan error, 1)
	go func() { c.nodeDone <- agent.Run(ctx) }()
	return c.waitNodes(opts.Nodes, 30*time.Second)
}

// waitNodes waits until every Node is registered with Ready=True, or the agent has failed.
func (c *Cluster) waitNodes(nodes []localnode.NodeSpec, timeout time.Duration) error {
	deadline := time.Now().Add(timeout)
	for _, n := range nodes {
		for {
			node, err := c.Client.CoreV1().Nodes().Get(context.Background(), n.Name, metav1.GetOptions{})
			if err == nil && nodeReady(node) {
				break
			}
			select {
			case err := <-c.nodeDone:
				c.nodeDone <- err // Stop reads it again
				return fmt.Errorf("harness: localnode stopped: %v", err)
			case <-time.After(100 * time.Millisecond):
			}
			if time.Now().After(deadline) {
				return fmt.Errorf("harness: node %s not Ready within %s (see localnode.log)", n.Name, timeout)
			}
		}
	}
	return nil
}

func nodeReady(n *corev1.Node) bool {
	for _, c := range n.Status.Conditions {
		if c.Type == corev1.NodeReady {
			return c.Status == corev1.ConditionTrue
		}
	}
	return false
}

// Stop ends the manager, localnode, kube-controller-manager, kube-apiserver and etcd, in that
// order, and returns the first error. It is safe to call more than once.
func (c *Cluster) Stop() error {
	c.stopOnce.Do(func() {
		var errs []error
		if c.mgrStop != nil {
			errs = append(errs, c.mgrStop())
		}
		if c.nodeStop != nil {
			c.nodeStop()
			select {
			case err := <-c.nodeDone:
				errs = append(errs, err)
			case <-time.After(30 * time.Second):
				errs = append(errs, errors.New("harness: localnode did not stop within 30s"))
			}
			c.nodeLog.Close()
		}
		if c.kcm != nil {
			errs = append(errs, c.kcm.Stop(10*time.Second))
		}
		if c.env != nil {
			errs = append(errs, c.env.Stop())
		}
		for _, f := range c.logs {
			f.Close()
		}
		c.stopError = errors.Join(errs...)
	})
	return c.stopError
}

// Healthy returns an error when kube-controller-manager has exited.
func (c *Cluster) Healthy() error {
	if c.kcm != nil && c.kcm.Exited() {
		return fmt.Errorf("kube-controller-manager exited: %v (see %s)", c.kcm.Err(), c.kcm.LogPath)
	}
	return nil
}

// Logs returns the paths of the log files, for a test to print on failure.
func (c *Cluster) Logs() []string {
	logs, _ := filepath.Glob(filepath.Join(c.Dir, "*.log"))
	return logs
}

// lifetimeWrapper writes a script that runs binary under timeout(1) with the given lifetime
// (SIGTERM, then SIGKILL 10 s later) and returns its path.
func lifetimeWrapper(dir, binary string, lifetime time.Duration) (string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", err
	}
	timeout, err := exec.LookPath("timeout")
	if err != nil {
		return "", fmt.Errorf("harness: timeout(1) from coreutils is needed: %w", err)
	}
	path := filepath.Join(dir, filepath.Base(binary))
	script := fmt.Sprintf("#!/bin/sh\nexec %s --kill-after=10s %ds %s \"$@\"\n", timeout, int(lifetime.Seconds()), binary)
	return path, os.WriteFile(path, []byte(script), 0o755)
}

// recordPIDs appends to <dir>/pids the PIDs of this process's children that run one of the
// wrapped binaries (the timeout(1) processes) and of their children (the binaries), found
// through /proc.
func recordPIDs(dir string, names ...string) error {
	parents := map[int]string{}
	self := os.Getpid()
	procs := listProcs()
	var lines []string
	for _, p := range procs {
		for _, n := range names {
			if p.ppid == self && strings.Contains(p.cmdline, "/"+n+"\x00") {
				parents[p.pid] = n
				lines = append(lines, fmt.Sprintf("%d %s (timeout)", p.pid, n))
			}
		}
	}
	for _, p := range procs {
		if n, ok := parents[p.ppid]; ok {
			lines = append(lines, fmt.Sprintf("%d %s", p.pid, n))
		}
	}
	return appendPIDs(dir, lines...)
}

// proc is one entry of /proc.
type proc struct {
	pid, ppid int
	cmdline   string
}

// listProcs reads pid, parent pid and command line of every process (none when /proc is absent).
func listProcs() []proc {
	entries, _ := os.ReadDir("/proc")
	var out []proc
	for _, e := range entries {
		pid, err := strconv.Atoi(e.Name())
		if err != nil {
			continue
		}
		stat, err := os.ReadFile(filepath.Join("/proc", e.Name(), "stat"))
		if err != nil {
			continue
		}
		// stat: pid (comm) state ppid ...
		f := strings.Fields(string(stat[strings.LastIndexByte(string(stat), ')')+1:]))
		if len(f) < 2 {
			continue
		}
		ppid, _ := strconv.Atoi(f[1])
		cmdline, _ := os.ReadFile(filepath.Join("/proc", e.Name(), "cmdline"))
		out = append(out, proc{pid: pid, ppid: ppid, cmdline: string(cmdline)})
	}
	return out
}

func appendPIDs(dir string, lines ...string) error {
	f, err := os.OpenFile(filepath.Join(dir, "pids"), os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o644)
	if err != nil {
		return err
	}
	defer f.Close()
	for _, l := range lines {
		if _, err := fmt.Fprintln(f, l); err != nil {
			return err
		}
	}
	return nil
}
