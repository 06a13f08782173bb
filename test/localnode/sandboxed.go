package localnode

import (
	"bufio"
	"cmp"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	corev1 "k8s.io/api/core/v1"

	"almanac.dev/almanac/test/sandbox"
)

// prepareSandbox prepares the container as the image's own program inside a tree of the
// image's root (test/sandbox): command and args as the kubelet combines them with the image's
// entrypoint and cmd, the image's environment then the container's, the user and groups of
// runAs, the container's mounts and termination message file at their paths, the agent's
// shared directories at theirs, and the root read-only when readOnlyRootFilesystem says so (a
// read-only root is a tree of hard links; a writable one a copy, so that nothing reaches the
// image). A pod the kubelet would refuse to start (runAsNonRoot against root) is an error the
// caller reports as CreateContainerConfigError.
func (r *podRun) prepareSandbox(ctx context.Context, pod *corev1.Pod, c *corev1.Container, img *sandbox.Image) (process, error) {
	id, err := runAs(pod, c, img)
	if err != nil {
		return process{}, err
	}
	mounts, p, env, err := r.files(ctx, pod, c)
	if err != nil {
		return process{}, err
	}
	if wd := cmp.Or(c.WorkingDir, img.WorkingDir); wd != "" && wd != "/" {
		return process{}, fmt.Errorf("%w: workingDir %s: localnode's sandbox starts programs in / (chroot)", errStart, wd)
	}
	vals := map[string]string{}
	envList := slices.Clone(img.Env)
	set := func(k, v string) {
		envList = slices.DeleteFunc(envList, func(e string) bool { return strings.HasPrefix(e, k+"=") })
		envList = append(envList, k+"="+v)
	}
	set("HOSTNAME", pod.Name)
	if !slices.ContainsFunc(envList, func(e string) bool { return strings.HasPrefix(e, "HOME=") }) {
		set("HOME", id.home)
	}
	for _, e := range env {
		vals[e.name] = e.value
		set(e.name, e.value)
	}
	argv := containerArgv(c, img)
	if len(argv) == 0 {
		return process{}, fmt.Errorf("%w: no command: the container names none and the image has no entrypoint or cmd", errStart)
	}
	for i := 1; i < len(argv); i++ {
		argv[i] = expand(argv[i], vals)
	}
	readOnly := c.SecurityContext != nil && isTrue(c.SecurityContext.ReadOnlyRootFilesystem)
	root := filepath.Join(r.dir, "rootfs")
	if err := os.RemoveAll(root); err != nil { // a restarted container gets a fresh root
		return process{}, err
	}
	if err := sandbox.Tree(img.Root, root, readOnly); err != nil {
		return process{}, fmt.Errorf("root of image %s: %w", c.Image, err)
	}
	spec := sandbox.Spec{Root: root, ReadOnlyRoot: readOnly, UID: id.uid, GID: id.gid, Groups: id.groups, Env: envList, Argv: argv}
	for _, m := range mounts {
		spec.Mounts = append(spec.Mounts, sandbox.Mount{Source: m.host, Target: filepath.Clean(m.path), ReadOnly: m.readOnly})
	}
	for _, d := range r.a.opts.SharedDirs {
		spec.Mounts = append(spec.Mounts, sandbox.Mount{Source: d, Target: d})
	}
	cmd, err := spec.Command()
	if err != nil {
		return process{}, fmt.Errorf("%w: %v", errStart, err)
	}
	p.cmd, p.argv = cmd, argv
	return p, nil
}

// containerArgv is the container's command line as the kubelet builds it from the image
// (Kubernetes documentation, "Define a Command and Arguments for a Container"): command
// replaces the entrypoint and drops the image's cmd; args replace the cmd.
func containerArgv(c *corev1.Container, img *sandbox.Image) []string {
	argv := slices.Clone(img.Entrypoint)
	args := img.Cmd
	if len(c.Command) > 0 {
		argv, args = slices.Clone(c.Command), nil
	}
	if len(c.Args) > 0 {
		args = c.Args
	}
	return append(argv, args...)
}

// identity is the user a sandboxed container runs as.
type identity struct {
	uid, gid int
	groups   []int
	home     string
}

// runAs resolves the container's user the way the kubelet and a container runtime do: uid from
// the container's then the pod's runAsUser, else the image's user (numeric, or a name looked up
// in the image's /etc/passwd; none is root); gid from runAsGroup, else the image user's group
// or the passwd entry's, else 0; supplementary groups the pod's supplementalGroups and fsGroup;
// home from the passwd entry, else /. With runAsNonRoot it refuses what the kubelet refuses,
// with the kubelet's messages (verifyRunAsNonRoot, from memory of its source): runAsUser 0, an
// image user that resolves to root, and a non-numeric image user it cannot verify.
func runAs(pod *corev1.Pod, c *corev1.Container, img *sandbox.Image) (identity, error) {
	psc := pod.Spec.SecurityContext
	if psc == nil {
		psc = &corev1.PodSecurityContext{}
	}
	csc := c.SecurityContext
	if csc == nil {
		csc = &corev1.SecurityContext{}
	}
	// The container's settings before the pod's (cmp.Or: the first non-nil pointer).
	runAsUser := cmp.Or(csc.RunAsUser, psc.RunAsUser)
	runAsGroup := cmp.Or(csc.RunAsGroup, psc.RunAsGroup)
	nonRoot := cmp.Or(csc.RunAsNonRoot, psc.RunAsNonRoot)
	who := fmt.Sprintf("(pod: %q, container: %s)", pod.Name+"_"+pod.Namespace+"("+string(pod.UID)+")", c.Name)
	users := readPasswd(filepath.Join(img.Root, "etc", "passwd"))

	id := identity{home: "/"}
	user, group, _ := strings.Cut(img.User, ":")
	named := ""
	switch {
	case runAsUser != nil:
		id.uid = int(*runAsUser)
	case user == "":
	default:
		n, err := strconv.Atoi(user)
		if err != nil {
			named = user
			e, ok := users.byName(user)
			if !ok {
				return identity{}, fmt.Errorf("image user %q is not in the image's /etc/passwd %s", user, who)
			}
			n = e.uid
		}
		id.uid = n
	}
	if isTrue(nonRoot) {
		switch {
		case runAsUser != nil && *runAsUser == 0:
			return identity{}, fmt.Errorf("container's runAsUser breaks non-root policy %s", who)
		case runAsUser == nil && named != "":
			return identity{}, fmt.Errorf("container has runAsNonRoot and image has non-numeric user (%s), cannot verify user is non-root %s", named, who)
		case id.uid == 0:
			return identity{}, fmt.Errorf("container has runAsNonRoot and image will run as root %s", who)
		}
	}
	entry, inPasswd := users.byUID(id.uid)
	if inPasswd && entry.home != "" {
		id.home = entry.home
	}
	switch {
	case runAsGroup != nil:
		id.gid = int(*runAsGroup)
	case group != "" && runAsUser == nil:
		g, err := strconv.Atoi(group)
		if err != nil {
			return identity{}, fmt.Errorf("image group %q is not numeric %s", group, who)
		}
		id.gid = g
	case inPasswd:
		id.gid = entry.gid
	}
	id.groups = []int{id.gid}
	for _, g := range psc.SupplementalGroups {
		id.groups = append(id.groups, int(g))
	}
	if psc.FSGroup != nil {
		id.groups = append(id.groups, int(*psc.FSGroup))
	}
	slices.Sort(id.groups)
	id.groups = slices.Compact(id.groups)
	return id, nil
}

// passwdEntry is one line of /etc/passwd (name:password:uid:gid:gecos:home:shell).
type passwdEntry struct {
	name     string
	uid, gid int
	home     string
}

type passwd []passwdEntry

// readPasswd reads an image's /etc/passwd; a missing file or bad line gives no entries.
func readPasswd(file string) passwd {
	f, err := os.Open(file)
	if err != nil {
		return nil
	}
	defer f.Close()
	var out passwd
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Split(sc.Text(), ":")
		if len(fields) < 7 {
			continue
		}
		uid, err1 := strconv.Atoi(fields[2])
		gid, err2 := strconv.Atoi(fields[3])
		if err1 == nil && err2 == nil {
			out = append(out, passwdEntry{name: fields[0], uid: uid, gid: gid, home: fields[5]})
		}
	}
	return out
}

func (p passwd) byName(name string) (passwdEntry, bool) {
	for _, e := range p {
		if e.name == name {
			return e, true
		}
	}
	return passwdEntry{}, false
}

func (p passwd) byUID(uid int) (passwdEntry, bool) {
	for _, e := range p {
		if e.uid == uid {
			return e, true
		}
	}
	return passwdEntry{}, false
}
