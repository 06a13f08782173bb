package sandbox

import (
	"os/exec"
	"syscall"
	"testing"
)

// TestExitStatus: a program's own exit code, 128 + 9 for one that SIGKILL ended (the shell's
// convention, see ExitStatus), and 128 without a process state.
func TestExitStatus(t *testing.T) {
	for _, c := range []struct {
		script string
		want   int
	}{{"exit 0", 0}, {"exit 3", 3}, {"kill -KILL $$", 128 + int(syscall.SIGKILL)}} {
		cmd := exec.Command("sh", "-c", c.script)
		_ = cmd.Run()
		if got := ExitStatus(cmd.ProcessState); got != c.want {
			t.Errorf("sh -c %q: exit status %d, want %d", c.script, got, c.want)
		}
	}
	if got := ExitStatus(nil); got != 128 {
		t.Errorf("no process state: %d, want 128", got)
	}
}
