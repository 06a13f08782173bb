package harness

import (
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"syscall"
	"time"
)

// Process is a child process started by the harness in its own process group, under
// timeout(1), with its output in a log file.
type Process struct {
	// Name names the process in errors and in the log file name.
	Name string
	// LogPath is the file stdout and stderr go to.
	LogPath string

	cmd    *exec.Cmd
	exited chan struct{}
	err    error
}

// StartProcess starts binary with args as name, logging to <dir>/<name>.log, ended by SIGTERM
// after lifetime (SIGKILL 10 s later) and by SIGTERM when the test process dies. env, when not
// nil, is added to this process's environment. Its PID is appended to <dir>/pids.
func StartProcess(dir, name string, lifetime time.Duration, env []string, binary string, args ...string) (*Process, error) {
	timeout, err := exec.LookPath("timeout")
	if err != nil {
		return nil, fmt.Errorf("harness: timeout(1) from coreutils is needed: %w", err)
	}
	p := &Process{Name: name, LogPath: filepath.Join(dir, name+".log"), exited: make(chan struct{})}
	log, err := os.Create(p.LogPath)
	if err != nil {
		return nil, err
	}
	full := append([]string{"--kill-after=10s", fmt.Sprintf("%ds", int(lifetime.Seconds())), binary}, args...)
	p.cmd = exec.Command(timeout, full...)
	p.cmd.Stdout, p.cmd.Stderr = log, log
	if env != nil {
		p.cmd.Env = append(os.Environ(), env...)
	}
	p.cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true, Pdeathsig: syscall.SIGTERM}
	if err := p.cmd.Start(); err != nil {
		log.Close()
		return nil, fmt.Errorf("harness: start %s: %w", name, err)
	}
	go func() {
		p.err = p.cmd.Wait()
		log.Close()
		close(p.exited)
	}()
	if err := appendPIDs(dir, fmt.Sprintf("%d %s", p.cmd.Process.Pid, name)); err != nil {
		_ = p.Stop(0)
		return nil, err
	}
	return p, nil
}

// PID returns the process ID (of the timeout(1) process, which leads the group).
func (p *Process) PID() int { return p.cmd.Process.Pid }

// Exited reports whether the process has ended.
func (p *Process) Exited() bool {
	select {
	case <-p.exited:
		return true
	default:
		return false
	}
}

// Err returns the wait error once the process has ended.
func (p *Process) Err() error {
	if !p.Exited() {
		return nil
	}
	return p.err
}

// Stop sends SIGTERM to the process group, SIGKILL after grace, and waits for the exit. An exit
// caused by the harness's own signal is not an error.
func (p *Process) Stop(grace time.Duration) error {
	if p.Exited() {
		return unexpectedExit(p)
	}
	pgid := p.cmd.Process.Pid
	_ = syscall.Kill(-pgid, syscall.SIGTERM)
	select {
	case <-p.exited:
	case <-time.After(grace):
		_ = syscall.Kill(-pgid, syscall.SIGKILL)
		<-p.exited
	}
	_ = syscall.Kill(-pgid, syscall.SIGKILL) // anything left in the group
	return nil
}

// unexpectedExit describes a process that ended before Stop.
func unexpectedExit(p *Process) error {
	var ee *exec.ExitError
	if p.err == nil || errors.As(p.err, &ee) {
		return fmt.Errorf("harness: %s exited before Stop: %v (log %s)", p.Name, p.err, p.LogPath)
	}
	return p.err
}
