package sandbox

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"
)

// probeRoot builds testdata/probe (static) into a minimal image root: /probe, /etc/probe.conf,
// /tmp (1777), and a symbolic link /lnk -> /etc. The ids the tests run it as are not root's.
func probeRoot(t *testing.T) string {
	t.Helper()
	if err := Available(); err != nil {
		t.Skip(err)
	}
	root := filepath.Join(t.TempDir(), "image")
	for _, d := range []string{"etc", "tmp"} {
		if err := os.MkdirAll(filepath.Join(root, d), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.Chmod(filepath.Join(root, "tmp"), 0o777|os.ModeSticky); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(root, "etc", "probe.conf"), []byte("from the image"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink("/etc", filepath.Join(root, "lnk")); err != nil {
		t.Fatal(err)
	}
	build := exec.Command("go", "build", "-o", filepath.Join(root, "probe"), "./testdata/probe")
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("build probe: %v\n%s", err, out)
	}
	return root
}

// tree returns a fresh Tree of root.
func tree(t *testing.T, root string, link bool) string {
	t.Helper()
	dst := filepath.Join(t.TempDir(), "rootfs")
	if err := Tree(root, dst, link); err != nil {
		t.Fatal(err)
	}
	return dst
}

// run runs the spec to its end and returns its output and exit code.
func run(t *testing.T, s Spec) (string, int) {
	t.Helper()
	cmd, err := s.Command()
	if err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() { <-ctx.Done(); _ = cmd.Process.Kill() }()
	_ = cmd.Wait()
	return out.String(), cmd.ProcessState.ExitCode()
}

// field returns the value of the probe's "name: value" line.
func field(out, name string) string {
	for _, l := range strings.Split(out, "\n") {
		if v, ok := strings.CutPrefix(l, name+": "); ok {
			return v
		}
	}
	return ""
}

func owner(t *testing.T, p string) int {
	t.Helper()
	st, err := os.Stat(p)
	if err != nil {
		t.Fatal(err)
	}
	return int(st.Sys().(*syscall.Stat_t).Uid)
}

// TestReadOnlyRoot runs the probe as 65532:65532 with a supplementary group in a read-only
// root with a writable /tmp, a read-only directory, a file on /dev/termination-log and a
// directory bound at its host path, and checks what it may write and who owns what it wrote.
func TestReadOnlyRoot(t *testing.T) {
	image := probeRoot(t)
	root := tree(t, image, true)
	host := t.TempDir()
	tmp, conf, shared, msg := filepath.Join(host, "tmp"), filepath.Join(host, "conf"), filepath.Join(host, "shared"), filepath.Join(host, "msg")
	for _, d := range []string{tmp, conf, shared} {
		if err := os.Mkdir(d, 0o777); err != nil || os.Chmod(d, 0o777) != nil {
			t.Fatal(err)
		}
	}
	if err := os.WriteFile(filepath.Join(conf, "run.json"), []byte("from a volume"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(msg, nil, 0o666); err != nil || os.Chmod(msg, 0o666) != nil {
		t.Fatal(err)
	}
	out, code := run(t, Spec{
		Root: root, ReadOnlyRoot: true, UID: 65532, GID: 65532, Groups: []int{2000, 65532},
		Env: []string{"PATH=/", "DEPOT=Harlow Road's"},
		Mounts: []Mount{
			{Source: tmp, Target: "/tmp"},
			{Source: shared, Target: shared}, // under /tmp: made after /tmp, inside it
			{Source: conf, Target: "/etc/almanac/run", ReadOnly: true},
			{Source: msg, Target: "/dev/termination-log"},
		},
		Argv: []string{"/probe", "--write", "/tmp/out", "--write", "/x", "--write", "/etc/almanac/run/y",
			"--write", "/dev/termination-log", "--write", shared + "/data", "--write", "/dev/x",
			"--read", "/etc/almanac/run/run.json", "--read", "/etc/probe.conf"},
	})
	if code != 0 {
		t.Fatalf("exit %d:\n%s", code, out)
	}
	for name, want := range map[string]string{
		"uid": "65532", "gid": "65532", "groups": "[2000 65532]",
		"ppid":                           "1", // sh is the PID namespace's first process
		"env":                            "PATH=/ DEPOT=Harlow Road's",
		"write /tmp/out":                 "ok",
		"write /x":                       "open /x: read-only file system",
		"write /etc/almanac/run/y":       "open /etc/almanac/run/y: read-only file system",
		"write /dev/termination-log":     "ok",
		"write " + shared + "/data":      "ok",
		"write /dev/x":                   "open /dev/x: permission denied",
		"read /etc/almanac/run/run.json": "from a volume",
		"read /etc/probe.conf":           "from the image",
	} {
		if got := field(out, name); got != want {
			t.Errorf("%s: %q, want %q\n%s", name, got, want, out)
		}
	}
	for _, p := range []string{filepath.Join(tmp, "out"), filepath.Join(shared, "data")} {
		if uid := owner(t, p); uid != 65532 {
			t.Errorf("%s is owned by uid %d, want 65532", p, uid)
		}
	}
	if b, _ := os.ReadFile(msg); string(b) != "probe" {
		t.Errorf("termination message file holds %q, want what the probe wrote", b)
	}
	if _, err := os.Stat(filepath.Join(image, "etc", "almanac")); err == nil {
		t.Error("the mount point was made in the image, not in its tree")
	}
}

// TestWritableRoot runs the probe as root in a copied, writable root: it may write there, and
// the image it was copied from stays unchanged.
func TestWritableRoot(t *testing.T) {
	image := probeRoot(t)
	root := tree(t, image, false)
	out, code := run(t, Spec{Root: root, Env: []string{"PATH=/"}, Argv: []string{"/probe", "--write", "/etc/probe.conf"}})
	if code != 0 || field(out, "write /etc/probe.conf") != "ok" || field(out, "uid") != "0" {
		t.Fatalf("exit %d, want a write as uid 0:\n%s", code, out)
	}
	if b, _ := os.ReadFile(filepath.Join(root, "etc", "probe.conf")); string(b) != "probe" {
		t.Errorf("the tree's file holds %q after the write", b)
	}
	if b, _ := os.ReadFile(filepath.Join(image, "etc", "probe.conf")); string(b) != "from the image" {
		t.Errorf("the image's file holds %q: the copy wrote through", b)
	}
}

// TestSignals: SIGTERM sent to the process group ends the program alone (exit 128+15, as a
// runtime reports it); killing unshare leaves no process of the sandbox behind.
func TestSignals(t *testing.T) {
	image := probeRoot(t)
	// start returns the running sandbox, a function reading its output so far, and the
	// probe's PID.
	start := func() (*exec.Cmd, func() string, int) {
		cmd, err := Spec{Root: tree(t, image, true), ReadOnlyRoot: true, UID: 65532, GID: 65532, Env: []string{"PATH=/"},
			Argv: []string{"/probe", "--sleep", "1m"}}.Command()
		if err != nil {
			t.Fatal(err)
		}
		// A file, not a buffer: the test reads it while the processes write.
		f, err := os.Create(filepath.Join(t.TempDir(), "out"))
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		out := func() string { b, _ := os.ReadFile(f.Name()); return string(b) }
		cmd.Stdout, cmd.Stderr = f, f
		cmd.SysProcAttr.Setpgid = true
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		// The probe is unshare's grandchild (unshare → sh → probe) once it has printed.
		deadline := time.Now().Add(30 * time.Second)
		for !strings.Contains(out(), "pid: ") && time.Now().Before(deadline) {
			time.Sleep(20 * time.Millisecond)
		}
		probe := cmd.Process.Pid
		for range 2 {
			b, err := os.ReadFile(fmt.Sprintf("/proc/%d/task/%d/children", probe, probe))
			f := strings.Fields(string(b))
			if err != nil || len(f) == 0 {
				t.Fatalf("no child of %d: %v\n%s", probe, err, out())
			}
			probe, _ = strconv.Atoi(f[0])
		}
		return cmd, out, probe
	}
	alive := func(pid int) bool {
		b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
		return err == nil && !strings.Contains(string(b), ") Z ")
	}

	cmd, out, _ := start()
	if err := syscall.Kill(-cmd.Process.Pid, syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	_ = cmd.Wait()
	if code := cmd.ProcessState.ExitCode(); code != 128+int(syscall.SIGTERM) {
		t.Errorf("SIGTERM to the group: exit %d, want %d\n%s", code, 128+int(syscall.SIGTERM), out())
	}

	cmd, out, probe := start()
	if !alive(probe) {
		t.Fatalf("probe %d not running\n%s", probe, out())
	}
	_ = cmd.Process.Kill()
	_ = cmd.Wait()
	deadline := time.Now().Add(10 * time.Second)
	for alive(probe) && time.Now().Before(deadline) {
		time.Sleep(20 * time.Millisecond)
	}
	if alive(probe) {
		t.Errorf("probe %d outlived the killed unshare", probe)
		_ = syscall.Kill(probe, syscall.SIGKILL)
	}
}

// TestBadSpecs: a program missing from the image and mount targets that would leave the
// image's tree are refused before anything runs.
func TestBadSpecs(t *testing.T) {
	image := probeRoot(t)
	root := tree(t, image, true)
	for name, s := range map[string]Spec{
		"missing program":  {Root: root, Argv: []string{"/sh"}},
		"relative program": {Root: root, Argv: []string{"probe"}},
		"through a link":   {Root: root, Argv: []string{"/probe"}, Mounts: []Mount{{Source: t.TempDir(), Target: "/lnk/x"}}},
		"unclean target":   {Root: root, Argv: []string{"/probe"}, Mounts: []Mount{{Source: t.TempDir(), Target: "/tmp/../etc"}}},
		"over /proc":       {Root: root, Argv: []string{"/probe"}, Mounts: []Mount{{Source: t.TempDir(), Target: "/proc"}}},
	} {
		if _, err := s.Command(); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}
