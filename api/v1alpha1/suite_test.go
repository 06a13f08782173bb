package v1alpha1_test

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	"k8s.io/apimachinery/pkg/runtime"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"k8s.io/client-go/rest"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/envtest"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// The suite runs the CRDs against a real kube-apiserver and etcd (self-built, see
// test/tools/controlplane) so that OpenAPI schema and CEL rules are checked by the server that
// enforces them in production, not by a re-implementation.

var (
	testEnv   *envtest.Environment
	cfg       *rest.Config
	k8sClient client.Client
	scheme    = runtime.NewScheme()
	ctx       = context.Background()
	repoRoot  = filepath.Join("..", "..")
)

func TestAPI(t *testing.T) {
	if os.Getenv("KUBEBUILDER_ASSETS") == "" {
		t.Skip("KUBEBUILDER_ASSETS is not set: run `make controlplane` and `make test` (CI always sets it)")
	}
	RegisterFailHandler(Fail)
	RunSpecs(t, "API validation suite")
}

var _ = BeforeSuite(func() {
	Expect(clientgoscheme.AddToScheme(scheme)).To(Succeed())
	Expect(forecastingv1alpha1.AddToScheme(scheme)).To(Succeed())
	testEnv = &envtest.Environment{
		CRDDirectoryPaths:     []string{filepath.Join(repoRoot, "config", "crd", "bases")},
		ErrorIfCRDPathMissing: true,
	}
	var err error
	cfg, err = testEnv.Start()
	Expect(err).NotTo(HaveOccurred())
	k8sClient, err = client.New(cfg, client.Options{Scheme: scheme})
	Expect(err).NotTo(HaveOccurred())
})

var _ = AfterSuite(func() {
	if testEnv != nil {
		Expect(testEnv.Stop()).To(Succeed())
	}
})
