package e2e

import (
	"fmt"
	"io/fs"
	"path/filepath"
	"syscall"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"
)

// imageUID is the trainer image's user (images/root.sh) and the uid of the controller's
// trainer pods (controllers/jobs.go).
const imageUID = 65532

// expectOwnedByImageUser fails unless dir holds files and every entry below it belongs to
// imageUID: what trainer image pods wrote, they wrote as that user, not as root.
func expectOwnedByImageUser(dir string) {
	GinkgoHelper()
	files := 0
	Expect(filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || p == dir {
			return err
		}
		info, err := d.Info()
		if err != nil {
			return err
		}
		if uid := info.Sys().(*syscall.Stat_t).Uid; uid != imageUID {
			return fmt.Errorf("%s is owned by uid %d, want %d (the trainer image's user)", p, uid, imageUID)
		}
		if !d.IsDir() {
			files++
		}
		return nil
	})).To(Succeed())
	Expect(files).To(BeNumerically(">", 0), "no file under %s", dir)
}

// trainerPod is a pod of the trainer image with the trainer pod's security settings
// (controllers/jobs.go podSpec): non-root 65532, read-only root, an emptyDir on /tmp, the log
// as the termination message on error.
func trainerPod(name string, args ...string) *corev1.Pod {
	return &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{Name: name},
		Spec: corev1.PodSpec{
			RestartPolicy:                 corev1.RestartPolicyNever,
			TerminationGracePeriodSeconds: ptr.To[int64](5),
			SecurityContext: &corev1.PodSecurityContext{
				RunAsNonRoot: ptr.To(true), RunAsUser: ptr.To[int64](imageUID), RunAsGroup: ptr.To[int64](imageUID), FSGroup: ptr.To[int64](imageUID),
			},
			Containers: []corev1.Container{{
				Name: "trainer", Image: trainerImage, Args: args,
				VolumeMounts:             []corev1.VolumeMount{{Name: "tmp", MountPath: "/tmp"}},
				TerminationMessagePolicy: corev1.TerminationMessageFallbackToLogsOnError,
				SecurityContext: &corev1.SecurityContext{
					RunAsNonRoot: ptr.To(true), ReadOnlyRootFilesystem: ptr.To(true), AllowPrivilegeEscalation: ptr.To(false),
				},
			}},
			Volumes: []corev1.Volume{{Name: "tmp", VolumeSource: corev1.VolumeSource{EmptyDir: &corev1.EmptyDirVolumeSource{}}}},
		},
	}
}

// With ALMANAC_IMAGES set and as root, localnode runs trainerImage pods in the trainer image's
// own root (test/sandbox); these pods show what that sandbox enforces. The scenarios' own
// checks of ownership are in "rejects bad series".
var _ = Describe("trainer image pods in the image's root", func() {
	BeforeEach(func() {
		if trainerEntrypoint == "" {
			Skip("trainer image pods run on the host: needs ALMANAC_IMAGES (make test) and root")
		}
	})

	It("runs them as the pod's user on a read-only root with only /tmp and the storage writable, and refuses runAsNonRoot with uid 0", func(ctx SpecContext) {
		ns := newNamespace(ctx, "sandbox")
		d := newDataset()
		gen := []string{"generate", "--items", "2", "--depots", "1", "--periods", "30", "--end", "2026-11-01", "--output"}
		pods := map[string]*corev1.Pod{
			"outside-tmp": trainerPod("outside-tmp", append(gen, "file:///fenwick-data/")...),
			"inside-tmp":  trainerPod("inside-tmp", append(gen, "file:///tmp/fenwick-data/")...),
			"storage":     trainerPod("storage", append(gen, "file://"+d.output+"/generated/")...),
			"as-root":     trainerPod("as-root", "version"),
		}
		pods["as-root"].Spec.Containers[0].SecurityContext.RunAsUser = ptr.To[int64](0)
		for _, p := range pods {
			_, err := cluster.Client.CoreV1().Pods(ns).Create(ctx, p, metav1.CreateOptions{})
			Expect(err).NotTo(HaveOccurred())
		}
		// terminated waits for the pod's container to end and returns its state.
		terminated := func(name string) *corev1.ContainerStateTerminated {
			var t *corev1.ContainerStateTerminated
			Eventually(func(g Gomega) {
				p := getPod(ctx, ns, name)(g)
				g.Expect(p.Status.ContainerStatuses).To(HaveLen(1))
				t = p.Status.ContainerStatuses[0].State.Terminated
				g.Expect(t).NotTo(BeNil())
			}).WithTimeout(time.Minute).WithPolling(200 * time.Millisecond).Should(Succeed())
			return t
		}

		By("writing outside /tmp: the image's root is read-only")
		// As uid 65532 on a writable root the error would be "permission denied" instead.
		t := terminated("outside-tmp")
		Expect(t.ExitCode).NotTo(BeZero(), t.Message)
		Expect(t.Message).To(ContainSubstring("read-only file system"))

		By("writing under /tmp (the emptyDir) and to the shared storage, as uid 65532")
		for _, name := range []string{"inside-tmp", "storage"} {
			t := terminated(name)
			Expect(t.ExitCode).To(BeZero(), "%s: %s", name, t.Message)
		}
		expectOwnedByImageUser(d.output)

		By("refusing to start runAsNonRoot with runAsUser 0, as the kubelet does")
		expectWaiting(ctx, ns, "as-root", corev1.PodPending, "CreateContainerConfigError", "container's runAsUser breaks non-root policy")
		Expect(cluster.Client.CoreV1().Pods(ns).Delete(ctx, "as-root", metav1.DeleteOptions{})).To(Succeed())
	}, SpecTimeout(2*time.Minute))
})
