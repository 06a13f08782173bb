package localnode

import (
	"os"
	"path/filepath"
	"slices"
	"strings"
	"syscall"
	"testing"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"almanac.dev/almanac/test/ociarchive"
	"almanac.dev/almanac/test/sandbox"
)

// testImage is an image root holding only /etc/passwd, with root and the images' user 65532
// (images/root.sh writes the same line).
func testImage(t *testing.T, user string) *sandbox.Image {
	t.Helper()
	root := t.TempDir()
	if err := os.MkdirAll(filepath.Join(root, "etc"), 0o755); err != nil {
		t.Fatal(err)
	}
	passwd := "root:x:0:0:root:/root:/bin/sh\nnonroot:x:65532:65532:nonroot:/nonexistent:/sbin/nologin\n"
	if err := os.WriteFile(filepath.Join(root, "etc", "passwd"), []byte(passwd), 0o644); err != nil {
		t.Fatal(err)
	}
	return &sandbox.Image{Root: root, ImageConfig: ociarchive.ImageConfig{User: user, Entrypoint: []string{"/almanac-trainer"}}}
}

// TestRunAs: the user, group and supplementary groups a container runs as, and the pods the
// kubelet refuses to start (runAsNonRoot), with its messages.
func TestRunAs(t *testing.T) {
	i64 := func(v int64) *int64 { return &v }
	yes := func() *bool { b := true; return &b }
	for _, tc := range []struct {
		name      string
		imageUser string
		pod       *corev1.PodSecurityContext
		container *corev1.SecurityContext
		want      identity
		refused   string
	}{
		{name: "image user uid:gid", imageUser: "65532:65532", want: identity{uid: 65532, gid: 65532, groups: []int{65532}, home: "/nonexistent"}},
		{name: "no user is root", want: identity{uid: 0, gid: 0, groups: []int{0}, home: "/root"}},
		{name: "image user name", imageUser: "nonroot", want: identity{uid: 65532, gid: 65532, groups: []int{65532}, home: "/nonexistent"}},
		{name: "the trainer pod (controllers/jobs.go)", imageUser: "65532:65532",
			pod:       &corev1.PodSecurityContext{RunAsNonRoot: yes(), RunAsUser: i64(65532), RunAsGroup: i64(65532), FSGroup: i64(65532)},
			container: &corev1.SecurityContext{RunAsNonRoot: yes()},
			want:      identity{uid: 65532, gid: 65532, groups: []int{65532}, home: "/nonexistent"}},
		{name: "container overrides pod, groups", imageUser: "65532:65532",
			pod:       &corev1.PodSecurityContext{RunAsUser: i64(1000), RunAsGroup: i64(1000), SupplementalGroups: []int64{3000, 1000}, FSGroup: i64(2000)},
			container: &corev1.SecurityContext{RunAsUser: i64(1500)},
			want:      identity{uid: 1500, gid: 1000, groups: []int{1000, 2000, 3000}, home: "/"}},
		{name: "runAsUser without group takes the passwd group", imageUser: "0:0", pod: &corev1.PodSecurityContext{RunAsUser: i64(65532)},
			want: identity{uid: 65532, gid: 65532, groups: []int{65532}, home: "/nonexistent"}},
		{name: "runAsUser 0 with runAsNonRoot", imageUser: "65532:65532",
			pod:       &corev1.PodSecurityContext{RunAsNonRoot: yes()},
			container: &corev1.SecurityContext{RunAsUser: i64(0)},
			refused:   "container's runAsUser breaks non-root policy"},
		{name: "image root with runAsNonRoot", imageUser: "0", pod: &corev1.PodSecurityContext{RunAsNonRoot: yes()},
			refused: "container has runAsNonRoot and image will run as root"},
		{name: "image user name with runAsNonRoot", imageUser: "nonroot", container: &corev1.SecurityContext{RunAsNonRoot: yes()},
			refused: "container has runAsNonRoot and image has non-numeric user (nonroot), cannot verify user is non-root"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			pod := &corev1.Pod{ObjectMeta: metav1.ObjectMeta{Name: "p", Namespace: "fenwick", UID: "u1"},
				Spec: corev1.PodSpec{SecurityContext: tc.pod, Containers: []corev1.Container{{Name: "trainer", SecurityContext: tc.container}}}}
			got, err := runAs(pod, &pod.Spec.Containers[0], testImage(t, tc.imageUser))
			if tc.refused != "" {
				if err == nil || !strings.Contains(err.Error(), tc.refused) || !strings.Contains(err.Error(), `(pod: "p_fenwick(u1)", container: trainer)`) {
					t.Fatalf("error %v, want one containing %q and naming the pod and container", err, tc.refused)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if got.uid != tc.want.uid || got.gid != tc.want.gid || !slices.Equal(got.groups, tc.want.groups) || got.home != tc.want.home {
				t.Errorf("got %+v, want %+v", got, tc.want)
			}
		})
	}
}

// TestContainerArgv: command replaces the entrypoint and drops the image's cmd; args replace
// the cmd (Kubernetes documentation, "Define a Command and Arguments for a Container", table).
func TestContainerArgv(t *testing.T) {
	img := &sandbox.Image{ImageConfig: ociarchive.ImageConfig{Entrypoint: []string{"/e", "-x"}, Cmd: []string{"c1"}}}
	for _, tc := range []struct {
		command, args, want []string
	}{
		{nil, nil, []string{"/e", "-x", "c1"}},
		{[]string{"/other"}, nil, []string{"/other"}},
		{nil, []string{"a"}, []string{"/e", "-x", "a"}},
		{[]string{"/other"}, []string{"a"}, []string{"/other", "a"}},
	} {
		if got := containerArgv(&corev1.Container{Command: tc.command, Args: tc.args}, img); !slices.Equal(got, tc.want) {
			t.Errorf("command %q args %q: %q, want %q", tc.command, tc.args, got, tc.want)
		}
	}
}

// TestVolumeModes: ConfigMap files take the volume's defaultMode or their item's mode, an
// emptyDir is 0777, and fsGroup gives the volumes that group with group read (and write for an
// emptyDir) and setgid directories.
func TestVolumeModes(t *testing.T) {
	if os.Geteuid() != 0 {
		t.Skip("changing a file's group to fsGroup needs root")
	}
	dir := t.TempDir()
	mode := func(m int32) *int32 { return &m }
	fsGroup := int64(65532)
	pod := &corev1.Pod{ObjectMeta: metav1.ObjectMeta{Namespace: "fenwick"}, Spec: corev1.PodSpec{
		SecurityContext: &corev1.PodSecurityContext{FSGroup: &fsGroup},
		Containers: []corev1.Container{{Name: "c", VolumeMounts: []corev1.VolumeMount{
			{Name: "config", MountPath: "/etc/run", ReadOnly: true}, {Name: "scratch", MountPath: "/tmp"}}}},
		Volumes: []corev1.Volume{
			{Name: "config", VolumeSource: corev1.VolumeSource{ConfigMap: &corev1.ConfigMapVolumeSource{
				LocalObjectReference: corev1.LocalObjectReference{Name: "run"}, DefaultMode: mode(0o400),
				Items: []corev1.KeyToPath{{Key: "a", Path: "a"}, {Key: "b", Path: "sub/b", Mode: mode(0o600)}}}}},
			{Name: "scratch", VolumeSource: corev1.VolumeSource{EmptyDir: &corev1.EmptyDirVolumeSource{}}},
		},
	}}
	src := fakeData{configMaps: map[string]map[string]string{"fenwick/run": {"a": "1", "b": "2"}}}
	mounts, err := materialize(t.Context(), pod, &pod.Spec.Containers[0], dir, src)
	if err != nil {
		t.Fatal(err)
	}
	if len(mounts) != 2 || !mounts[0].readOnly || mounts[1].readOnly {
		t.Errorf("mounts %+v, want config read-only and scratch writable", mounts)
	}
	for p, want := range map[string]os.FileMode{
		"volumes/config/a":     0o440,                              // 0400 plus group read
		"volumes/config/sub/b": 0o640,                              // the item's 0600 plus group read
		"volumes/config/sub":   0o755 | os.ModeDir | os.ModeSetgid, // 0755 already has group search
		"volumes/scratch":      0o777 | os.ModeDir | os.ModeSetgid,
	} {
		st, err := os.Stat(filepath.Join(dir, p))
		if err != nil {
			t.Fatal(err)
		}
		if st.Mode() != want {
			t.Errorf("%s: mode %v, want %v", p, st.Mode(), want)
		}
		if gid := st.Sys().(*syscall.Stat_t).Gid; gid != uint32(fsGroup) {
			t.Errorf("%s: group %d, want fsGroup %d", p, gid, fsGroup)
		}
	}
}
