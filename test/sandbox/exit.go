package sandbox

import (
	"os"
	"syscall"
)

// ExitStatus is the exit status a container runtime reports for a finished process: its exit
// code, or 128 plus the signal's number when a signal ended it (the shell's convention,
// POSIX.1-2017 XCU 2.8.2 "greater than 128", 128 + n as sh and bash report it; common
// practice for runtimes: 137 for SIGKILL); 128 without a process state (the process could not
// be waited for). test/localnode reports it for a pod's container, and the e2e suite's fault
// program (test/e2e/testdata/fault) exits with its trainer's.
func ExitStatus(st *os.ProcessState) int {
	if st == nil {
		return 128
	}
	if ws, ok := st.Sys().(syscall.WaitStatus); ok && ws.Signaled() {
		return 128 + int(ws.Signal())
	}
	return st.ExitCode()
}
