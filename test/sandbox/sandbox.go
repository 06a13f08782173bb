// Package sandbox runs a program of an unpacked image the way a container runtime runs a
// restricted pod, without a daemon: a private mount namespace and PID namespace
// (unshare(1)), the image's root bind-mounted (read-only when asked), the pod's volumes
// bind-mounted at their paths, /proc, and a /dev tmpfs holding only null, zero, random and
// urandom; then chroot(1) into the root with the user, group and supplementary groups given and
// only the environment given. It needs root, as a runtime does. The image tests
// (test/packaging) and the test node agent (test/localnode) share it.
//
// Process tree: unshare (in the caller's PID namespace) → sh, the first process of the new PID
// namespace, which makes the mounts, starts the program and waits for it → the program. unshare
// blocks SIGTERM and sh, as the namespace's first process with no handler, ignores it
// (pid_namespaces(7)), so a SIGTERM sent to the whole process group reaches the program alone,
// and the exit status is the program's (128 + the signal's number when a signal ended it, as
// sh reports it). Killing unshare kills sh (--kill-child), and the end of a PID namespace's
// first process kills everything in it: no process outlives unshare, although chroot
// --userspec clears the program's own parent-death signal when it changes credentials
// (prctl(2), PR_SET_PDEATHSIG). The program is therefore not PID 1 of its namespace, as it
// would be in a pod; a runtime's working directory is not supported (chroot(1) always starts
// in /).
package sandbox

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"os/exec"
	"path"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"

	"almanac.dev/almanac/test/ociarchive"
)

// Image is an image unpacked by Unpack: its root file system and runtime configuration.
type Image struct {
	// Root is the unpacked tree. Run programs in a Tree of it, not in Root itself: the
	// sandbox makes mount points in the tree it enters.
	Root string
	ociarchive.ImageConfig
}

// Unpack reads an OCI archive and unpacks its layers into dir/rootfs (dir must exist), with
// the owners and modes the layers record.
func Unpack(archive, dir string) (*Image, error) {
	a, err := ociarchive.Read(archive)
	if err != nil {
		return nil, err
	}
	c, err := a.RuntimeConfig()
	if err != nil {
		return nil, err
	}
	root := filepath.Join(dir, "rootfs")
	if err := os.Mkdir(root, 0o755); err != nil {
		return nil, err
	}
	if err := a.Unpack(root); err != nil {
		return nil, err
	}
	return &Image{Root: root, ImageConfig: c}, nil
}

// Tree makes dst (which must not exist) a tree of src for one sandbox: directories are new,
// with src's owners and modes, so that mount points made in dst do not touch src; files and
// symbolic links are hard links of src's (link true: cheap, for a root mounted read-only, where
// nothing can write through them) or copies (link false: for a writable root). src and dst
// must be on one file system for links.
func Tree(src, dst string, link bool) error {
	return filepath.WalkDir(src, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, err := filepath.Rel(src, p)
		if err != nil {
			return err
		}
		to := filepath.Join(dst, rel)
		info, err := d.Info()
		if err != nil {
			return err
		}
		st := info.Sys().(*syscall.Stat_t)
		switch {
		case d.IsDir():
			if err := os.Mkdir(to, 0o700); err != nil {
				return err
			}
			if err := os.Chown(to, int(st.Uid), int(st.Gid)); err != nil {
				return err
			}
			return os.Chmod(to, info.Mode()&(fs.ModePerm|fs.ModeSetuid|fs.ModeSetgid|fs.ModeSticky))
		case link:
			return os.Link(p, to)
		case d.Type()&fs.ModeSymlink != 0:
			target, err := os.Readlink(p)
			if err == nil {
				err = os.Symlink(target, to)
			}
			if err == nil {
				err = os.Lchown(to, int(st.Uid), int(st.Gid))
			}
			return err
		case d.Type().IsRegular():
			b, err := os.ReadFile(p)
			if err == nil {
				err = os.WriteFile(to, b, 0o600)
			}
			if err == nil {
				err = os.Chown(to, int(st.Uid), int(st.Gid))
			}
			if err == nil {
				err = os.Chmod(to, info.Mode()&(fs.ModePerm|fs.ModeSetuid|fs.ModeSetgid|fs.ModeSticky))
			}
			return err
		}
		return fmt.Errorf("%s: file type %v is not copied", p, d.Type())
	})
}

// Mount is a host file or directory bound into the sandbox.
type Mount struct {
	// Source is the host path; a regular file is bound onto a file, anything else onto a
	// directory.
	Source string
	// Target is the absolute path inside the root; missing directories (and the file) are
	// made in the tree or in the mount below it.
	Target string
	// ReadOnly remounts the binding read-only.
	ReadOnly bool
}

// Spec is one program to run in a sandbox.
type Spec struct {
	// Root is the tree chroot enters (a Tree of an Image's Root); it must be writable by the
	// caller, who makes mount points in it.
	Root string
	// ReadOnlyRoot remounts the root read-only once everything is mounted on it.
	ReadOnlyRoot bool
	// UID and GID the program runs as; Groups are its supplementary groups (GID is always
	// one of them).
	UID, GID int
	Groups   []int
	// Env is the program's whole environment (NAME=value).
	Env []string
	// Mounts are bound in order of their targets, so that a mount inside another is made
	// after it. "/", /proc and /dev cannot be targets; paths under /dev can.
	Mounts []Mount
	// Argv is the program, an absolute path inside the root, and its arguments.
	Argv []string
}

// Available returns why this process cannot run sandboxes: it is not root, or a tool is
// missing; nil when it can.
func Available() error {
	if os.Geteuid() != 0 {
		return errors.New("mounting an image's root read-only and chroot into it need root (CI runs as root)")
	}
	for _, tool := range []string{"unshare", "mount", "chroot", "env", "sh", "mkdir", "touch"} {
		if _, err := exec.LookPath(tool); err != nil {
			return fmt.Errorf("%s (util-linux, coreutils) is needed to run a sandbox: %w", tool, err)
		}
	}
	return nil
}

// Command returns the command that runs the spec (see the package comment), with a
// parent-death signal SIGKILL on unshare; the caller sets its output and starts it. An argv
// whose program is not a regular file of the root, or a mount target that is not an absolute
// clean path, is "/", /proc or /dev, or passes through a symbolic link of the root, is an error.
func (s Spec) Command() (*exec.Cmd, error) {
	if !filepath.IsAbs(s.Root) {
		return nil, fmt.Errorf("sandbox root %q is not an absolute path", s.Root)
	}
	if len(s.Argv) == 0 || !path.IsAbs(s.Argv[0]) {
		return nil, fmt.Errorf("sandbox program %q is not an absolute path inside the image", s.Argv)
	}
	if st, err := os.Stat(filepath.Join(s.Root, s.Argv[0])); err != nil || !st.Mode().IsRegular() {
		return nil, fmt.Errorf("sandbox program %s: not a regular file of the image", s.Argv[0])
	}
	var b strings.Builder
	b.WriteString(`set -eu
r=` + quote(s.Root) + `
mount --bind "$r" "$r"
mkdir -p "$r/proc" "$r/dev"
mount -t proc -o nosuid,nodev,noexec proc "$r/proc"
mount -t tmpfs -o nosuid,noexec,mode=0755,size=64k tmpfs "$r/dev"
for d in null zero random urandom; do touch "$r/dev/$d"; mount --bind "/dev/$d" "$r/dev/$d"; done
`)
	mounts := slices.Clone(s.Mounts)
	slices.SortStableFunc(mounts, func(a, b Mount) int { return strings.Compare(a.Target, b.Target) })
	for _, m := range mounts {
		if err := checkTarget(s.Root, m.Target); err != nil {
			return nil, err
		}
		t := `"$r"` + quote(m.Target)
		if st, err := os.Stat(m.Source); err == nil && st.Mode().IsRegular() {
			fmt.Fprintf(&b, "mkdir -p \"$r\"%s\ntouch %s\n", quote(path.Dir(m.Target)), t)
		} else {
			fmt.Fprintf(&b, "mkdir -p %s\n", t)
		}
		opts := "remount,bind,nosuid,nodev"
		if m.ReadOnly {
			opts += ",ro"
		}
		fmt.Fprintf(&b, "mount --bind %s %s\nmount -o %s %s\n", quote(m.Source), t, opts, t)
	}
	if s.ReadOnlyRoot {
		b.WriteString("mount -o remount,bind,ro,nosuid,nodev \"$r\"\n")
	} else {
		b.WriteString("mount -o remount,bind,nosuid,nodev \"$r\"\n")
	}
	groups := []string{strconv.Itoa(s.GID)}
	for _, g := range s.Groups {
		if g != s.GID && !slices.Contains(groups, strconv.Itoa(g)) {
			groups = append(groups, strconv.Itoa(g))
		}
	}
	b.WriteString("env -i")
	for _, e := range s.Env {
		b.WriteString(" " + quote(e))
	}
	// env -i searches the program's own PATH: chroot is named by its host path.
	chroot, err := exec.LookPath("chroot")
	if err != nil {
		return nil, err
	}
	fmt.Fprintf(&b, " %s --userspec=%d:%d --groups=%s \"$r\"", quote(chroot), s.UID, s.GID, strings.Join(groups, ","))
	for _, a := range s.Argv {
		b.WriteString(" " + quote(a))
	}
	b.WriteString(" &\nwait $!\n")
	cmd := exec.Command("unshare", "--mount", "--pid", "--fork", "--kill-child", "--propagation", "private", "sh", "-c", b.String())
	cmd.Env = []string{"PATH=" + os.Getenv("PATH")}
	cmd.SysProcAttr = &syscall.SysProcAttr{Pdeathsig: syscall.SIGKILL}
	return cmd, nil
}

// checkTarget refuses a mount target that is not an absolute clean path, that is "/", /proc
// or /dev, or that passes through a symbolic link in root (a link could lead the mount out of
// the root; a runtime resolves such paths inside the root instead).
func checkTarget(root, target string) error {
	if !path.IsAbs(target) || path.Clean(target) != target {
		return fmt.Errorf("mount target %q is not an absolute clean path", target)
	}
	if target == "/" || target == "/proc" || target == "/dev" {
		return fmt.Errorf("mount target %s is the sandbox's own", target)
	}
	p := root
	for _, part := range strings.Split(target, "/")[1:] {
		p = filepath.Join(p, part)
		st, err := os.Lstat(p)
		if err != nil {
			return nil // made by mkdir -p from here on
		}
		if st.Mode()&fs.ModeSymlink != 0 {
			return fmt.Errorf("mount target %s passes through the symbolic link %s of the image", target, strings.TrimPrefix(p, root))
		}
	}
	return nil
}

// quote returns s as one single-quoted sh word.
func quote(s string) string {
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}
