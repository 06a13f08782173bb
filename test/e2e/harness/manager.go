package harness

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"strconv"
	"time"

	"k8s.io/client-go/rest"
)

// InProcess runs the almanac manager in the test process: the function gets a context that
// the cluster's Stop cancels and the admin REST config, and blocks until the context ends
// (typically: build a controller-runtime manager, call controllers.SetupWithManager, then
// mgr.Start(ctx)). Use it to reach into the manager (fake clock, metrics registry) or to debug
// the reconcilers with the test.
type InProcess func(ctx context.Context, cfg *rest.Config) error

// Start runs f in a goroutine; the returned stop cancels it and waits up to 30 s. An error f
// returns other than for the cancellation is reported by stop.
func (f InProcess) Start(_ context.Context, c *Cluster) (func() error, error) {
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f(ctx, rest.CopyConfig(c.RESTConfig)) }()
	return func() error {
		cancel()
		select {
		case err := <-done:
			if errors.Is(err, context.Canceled) {
				return nil
			}
			return err
		case <-time.After(30 * time.Second):
			return errors.New("harness: in-process manager did not stop within 30s")
		}
	}, nil
}

// Binary runs the built manager (bin/almanac-controller) as a process with KUBECONFIG set to
// the cluster's admin kubeconfig, metrics off and the health probes on a free loopback port;
// Start returns once /readyz answers 200. Use it to test the shipped binary and its flags.
type Binary struct {
	// Path is the manager binary.
	Path string
	// Args are added after the harness's --metrics-bind-address and --health-probe-bind-address.
	Args []string
	// ReadyTimeout bounds the wait for /readyz; default 60 s.
	ReadyTimeout time.Duration
}

// Start starts the binary under the cluster's lifetime bound and waits until it is ready.
func (b Binary) Start(ctx context.Context, c *Cluster) (func() error, error) {
	port, err := freePort()
	if err != nil {
		return nil, err
	}
	probe := "127.0.0.1:" + strconv.Itoa(port)
	args := append([]string{"--metrics-bind-address=0", "--health-probe-bind-address=" + probe}, b.Args...)
	p, err := StartProcess(c.Dir, "almanac-controller", c.lifetime, []string{"KUBECONFIG=" + c.Kubeconfig}, b.Path, args...)
	if err != nil {
		return nil, err
	}
	stop := func() error { return p.Stop(15 * time.Second) }
	timeout := b.ReadyTimeout
	if timeout == 0 {
		timeout = 60 * time.Second
	}
	if err := waitReady(ctx, p, "http://"+probe+"/readyz", timeout); err != nil {
		_ = stop()
		return nil, err
	}
	return stop, nil
}

// waitReady polls url until it answers 200, the process exits or timeout passes.
func waitReady(ctx context.Context, p *Process, url string, timeout time.Duration) error {
	ctx, cancel := context.WithTimeout(ctx, timeout)
	defer cancel()
	for {
		req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
		if err != nil {
			return err
		}
		if resp, err := http.DefaultClient.Do(req); err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return nil
			}
		}
		if p.Exited() {
			return fmt.Errorf("harness: %s exited before it was ready: %v (log %s)", p.Name, p.Err(), p.LogPath)
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("harness: %s not ready at %s within %s (log %s)", p.Name, url, timeout, p.LogPath)
		case <-time.After(200 * time.Millisecond):
		}
	}
}

// freePort returns a loopback TCP port that was free a moment ago.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}
