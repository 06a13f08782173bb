package bench

import (
	"bytes"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// envSignalChild makes the test binary run bench.Main as the child of TestBenchStopsOnSIGTERM.
const envSignalChild = "ALMANAC_BENCH_SIGNAL_CHILD"

// TestBenchStopsOnSIGTERM runs bench in a child process while it waits on R's ets over every
// M3 series, sends SIGTERM, and expects the child to exit with status 1 and leave no process
// of its R reference run behind (their command lines name the almanac-bench-r directory, made
// under a TMPDIR of this test's own, so R runs of other benches on the machine do not count).
// Skipped without the M3 data or R.
func TestBenchStopsOnSIGTERM(t *testing.T) {
	if os.Getenv(envSignalChild) != "" {
		os.Exit(Main([]string{"--data", os.Getenv(envSignalChild), "--design", "fixed", "--zoo", "Naive", "--reference-r"}, os.Stdout, os.Stderr))
	}
	if testing.Short() {
		t.Skip("runs R")
	}
	d := m3Dir(t)
	if !HaveR(context.Background()) {
		t.Skip("Rscript with the forecast package not installed")
	}
	cmd := exec.Command(os.Args[0], "-test.run", "^TestBenchStopsOnSIGTERM$")
	tmp := t.TempDir()
	cmd.Env = append(os.Environ(), envSignalChild+"="+d, "TMPDIR="+tmp)
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	// Wait until an R child of the run exists, then stop the bench.
	deadline := time.Now().Add(60 * time.Second)
	for len(rChildren(tmp)) == 0 {
		if time.Now().After(deadline) {
			cmd.Process.Kill()
			t.Fatalf("no R child appeared within 60 s; output:\n%s", out.String())
		}
		time.Sleep(100 * time.Millisecond)
	}
	if err := cmd.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- cmd.Wait() }()
	select {
	case err := <-done:
		if ee, ok := err.(*exec.ExitError); !ok || ee.ExitCode() != 1 {
			t.Errorf("bench after SIGTERM: %v, want exit status 1; output:\n%s", err, out.String())
		}
	case <-time.After(30 * time.Second):
		cmd.Process.Kill()
		t.Fatalf("bench still running 30 s after SIGTERM; output:\n%s", out.String())
	}
	time.Sleep(200 * time.Millisecond) // let the killed group be reaped
	if left := rChildren(tmp); len(left) > 0 {
		t.Errorf("R processes left after SIGTERM: %v", left)
	}
}

// rChildren lists the pids whose command line names a bench R working directory under tmp.
func rChildren(tmp string) []string {
	var out []string
	ms, _ := filepath.Glob("/proc/[0-9]*/cmdline")
	for _, m := range ms {
		b, err := os.ReadFile(m)
		if err == nil && strings.Contains(string(b), filepath.Join(tmp, "almanac-bench-r")) {
			out = append(out, filepath.Base(filepath.Dir(m)))
		}
	}
	return out
}
