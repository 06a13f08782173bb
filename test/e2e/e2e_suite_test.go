// Package e2e holds the end-to-end tests: a real etcd, kube-apiserver and
// kube-controller-manager (Job controller and garbage collector) on loopback, with the
// localnode agent playing the kubelet (see test/e2e/harness).
package e2e

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"testing"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	logf "sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"

	"almanac.dev/almanac/test/e2e/harness"
)

// progImage is the image the tests' pods name; localnode runs the test program for it.
const progImage = "fenwick-lane/prog:e2e"

var (
	cluster  *harness.Cluster
	suiteDir string
	// anyFailed keeps suiteDir (logs, pod directories) for a look after a failed spec.
	anyFailed bool
)

func TestE2E(t *testing.T) {
	assets := os.Getenv("KUBEBUILDER_ASSETS")
	for _, b := range []string{"etcd", "kube-apiserver", "kube-controller-manager"} {
		if _, err := os.Stat(filepath.Join(assets, b)); assets == "" || err != nil {
			t.Skipf("no %s in KUBEBUILDER_ASSETS=%q: run `make controlplane` (the Makefile sets KUBEBUILDER_ASSETS)", b, assets)
		}
	}
	RegisterFailHandler(Fail)
	suite, reporter := GinkgoConfiguration()
	suite.Timeout = 20 * time.Minute
	RunSpecs(t, "End-to-end suite", suite, reporter)
}

var _ = BeforeSuite(func(ctx SpecContext) {
	logf.SetLogger(zap.New(zap.WriteTo(GinkgoWriter)))
	var err error
	suiteDir, err = os.MkdirTemp("", "almanac-e2e-")
	Expect(err).NotTo(HaveOccurred())
	prog := filepath.Join(suiteDir, "prog")
	Expect(goBuild(ctx, prog, "../localnode/testdata/prog")).To(Succeed())

	images, sandboxed, crds, err := almanacImages(ctx, suiteDir) // fixtures_test.go: trainer and the faulty images
	Expect(err).NotTo(HaveOccurred())
	images[progImage] = prog

	start := time.Now()
	cluster, err = harness.Start(ctx, harness.Options{
		Dir:        suiteDir,
		Images:     images,
		Sandboxed:  sandboxed,
		SharedDirs: []string{storageDir, stateDir},
		CRDDirs:    crds,
	})
	Expect(err).NotTo(HaveOccurred())
	DeferCleanup(func() {
		Expect(cluster.Stop()).To(Succeed())
		if anyFailed {
			GinkgoWriter.Printf("a spec failed: logs and pod directories kept in %s\n", suiteDir)
			return
		}
		_ = os.RemoveAll(suiteDir)
	})
	GinkgoWriter.Printf("cluster up in %s, logs in %s\n", time.Since(start).Round(time.Millisecond), suiteDir)
}, NodeTimeout(10*time.Minute))

// Print where the logs are, and the end of each, when a spec fails.
var _ = ReportAfterEach(func(r SpecReport) {
	if !r.Failed() || cluster == nil {
		return
	}
	anyFailed = true
	for _, l := range cluster.Logs() {
		b, _ := os.ReadFile(l)
		if len(b) > 4000 {
			b = b[len(b)-4000:]
		}
		fmt.Fprintf(GinkgoWriter, "==> %s (tail) <==\n%s\n", l, b)
	}
})

var _ = AfterEach(func() {
	Expect(cluster.Healthy()).To(Succeed())
})

// newNamespace creates a namespace for one spec (no namespace controller runs, so it is never
// deleted; the cluster is thrown away after the suite).
func newNamespace(ctx context.Context, prefix string) string {
	ns, err := cluster.Client.CoreV1().Namespaces().Create(ctx, &corev1.Namespace{
		ObjectMeta: metav1.ObjectMeta{GenerateName: prefix + "-"},
	}, metav1.CreateOptions{})
	Expect(err).NotTo(HaveOccurred())
	return ns.Name
}
