package controllers

import (
	"context"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sync/atomic"
	"testing"
	"time"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	corev1 "k8s.io/api/core/v1"
	rbacv1 "k8s.io/api/rbac/v1"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/runtime"
	clientgoscheme "k8s.io/client-go/kubernetes/scheme"
	"k8s.io/client-go/rest"
	testingclock "k8s.io/utils/clock/testing"
	"k8s.io/utils/ptr"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/config"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
	logf "sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/log/zap"
	"sigs.k8s.io/controller-runtime/pkg/metrics"
	metricsserver "sigs.k8s.io/controller-runtime/pkg/metrics/server"
	"sigs.k8s.io/yaml"

	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// The suite runs the manager in-process against a real kube-apiserver and etcd (self-built, see
// test/tools/controlplane). No Job controller or kubelet runs: the tests play their part by
// creating the pods of each Job and setting pod and Job status as they would (jobplay_test.go).

const suiteBudget = 4

var (
	testEnv   *envtest.Environment
	cfg       *rest.Config
	k8sClient client.Client
	// managerCfg authenticates the manager as a user bound to config/rbac/role.yaml only, so a
	// missing RBAC rule fails the suite.
	managerCfg *rest.Config
	scheme     = runtime.NewScheme()
	fakeClock  *testingclock.FakeClock
	// current is the running manager (restart tests stop it and start another).
	current *testManager
	nsSeq   atomic.Int32
)

func TestControllers(t *testing.T) {
	if os.Getenv("KUBEBUILDER_ASSETS") == "" {
		t.Skip("KUBEBUILDER_ASSETS is not set: run `make controlplane` and `make test` (CI always sets it)")
	}
	RegisterFailHandler(Fail)
	// Gomega's 1 s default is too short on a loaded 2-core CI machine: reconciles queue behind
	// the apiserver. The waits end as soon as the condition holds, so a long ceiling costs nothing.
	SetDefaultEventuallyTimeout(30 * time.Second)
	SetDefaultEventuallyPollingInterval(50 * time.Millisecond)
	RunSpecs(t, "Controller suite")
}

var _ = BeforeSuite(func() {
	logf.SetLogger(zap.New(zap.WriteTo(GinkgoWriter), zap.UseDevMode(true)))
	Expect(clientgoscheme.AddToScheme(scheme)).To(Succeed())
	Expect(forecastingv1alpha1.AddToScheme(scheme)).To(Succeed())
	testEnv = &envtest.Environment{
		CRDDirectoryPaths:     []string{filepath.Join("..", "config", "crd", "bases")},
		ErrorIfCRDPathMissing: true,
	}
	var err error
	cfg, err = testEnv.Start()
	Expect(err).NotTo(HaveOccurred())
	k8sClient, err = client.New(cfg, client.Options{Scheme: scheme})
	Expect(err).NotTo(HaveOccurred())
	fakeClock = testingclock.NewFakeClock(time.Now().Truncate(time.Second))
	managerCfg = managerUser()
	current = startManager(suiteBudget)
})

var _ = AfterSuite(func() {
	if current != nil {
		current.stop()
	}
	if testEnv != nil {
		Expect(testEnv.Stop()).To(Succeed())
	}
})

// managerUser creates the ClusterRole generated from the RBAC markers (config/rbac/role.yaml),
// binds it to a new envtest user and returns that user's rest config.
func managerUser() *rest.Config {
	b, err := os.ReadFile(filepath.Join("..", "config", "rbac", "role.yaml"))
	Expect(err).NotTo(HaveOccurred())
	var role rbacv1.ClusterRole
	Expect(yaml.Unmarshal(b, &role)).To(Succeed())
	role.Name = "almanac-manager"
	Expect(k8sClient.Create(ctx(), &role)).To(Succeed())
	Expect(k8sClient.Create(ctx(), &rbacv1.ClusterRoleBinding{
		ObjectMeta: metav1.ObjectMeta{Name: "almanac-manager"},
		RoleRef:    rbacv1.RoleRef{APIGroup: rbacv1.GroupName, Kind: "ClusterRole", Name: role.Name},
		Subjects:   []rbacv1.Subject{{Kind: rbacv1.UserKind, APIGroup: rbacv1.GroupName, Name: "almanac-manager"}},
	})).To(Succeed())
	user, err := testEnv.AddUser(envtest.User{Name: "almanac-manager"}, nil)
	Expect(err).NotTo(HaveOccurred())
	return user.Config()
}

// testManager is one in-process manager. All managers of the suite share suiteMetrics, which
// is registered once on controller-runtime's metrics.Registry (as main.go does), so the
// manager's metrics endpoint serves them.
type testManager struct {
	cancel      context.CancelFunc
	done        chan struct{}
	metrics     *Metrics
	metricsAddr string
}

var suiteMetrics *Metrics

// suiteImages is the managers' trainer image allowlist: the repository every test portfolio
// names (security_test.go names another one to see it refused).
var suiteImages = ImageAllowlist{"registry.example/almanac-trainer"}

// startManager starts the controllers with the given shard budget and the suite's fake clock.
func startManager(budget int32) *testManager { return startManagerWith(managerCfg, budget) }

// startManagerWith is startManager with the manager's rest config (the exactly-once test wraps
// its transport).
func startManagerWith(restCfg *rest.Config, budget int32) *testManager {
	if suiteMetrics == nil {
		m, err := NewMetrics(metrics.Registry)
		Expect(err).NotTo(HaveOccurred())
		suiteMetrics = m
	}
	cacheOpts, err := CacheOptions(nil)
	Expect(err).NotTo(HaveOccurred())
	addr := freeAddress()
	mgr, err := ctrl.NewManager(restCfg, ctrl.Options{
		Scheme:  scheme,
		Cache:   cacheOpts,
		Metrics: metricsserver.Options{BindAddress: addr},
		// Restart tests start a second manager with the same controller names in this process.
		Controller: config.Controller{SkipNameValidation: ptr.To(true)},
	})
	Expect(err).NotTo(HaveOccurred())
	ctx, cancel := context.WithCancel(context.Background())
	// Progress is read from suiteLogs (progress_envtest_test.go) as often as a run requeues.
	Expect(SetupWithManager(ctx, mgr, Options{MaxConcurrentShards: budget, Clock: fakeClock, Metrics: suiteMetrics,
		Images: suiteImages, Logs: suiteLogs, ProgressInterval: 200 * time.Millisecond})).To(Succeed())
	tm := &testManager{cancel: cancel, done: make(chan struct{}), metrics: suiteMetrics, metricsAddr: addr}
	go func() {
		defer GinkgoRecover()
		defer close(tm.done)
		Expect(mgr.Start(ctx)).To(Succeed())
	}()
	return tm
}

// freeAddress is a loopback address with a port nobody listens on right now.
func freeAddress() string {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	Expect(err).NotTo(HaveOccurred())
	defer l.Close()
	return l.Addr().String()
}

// scrape fetches the manager's metrics endpoint.
func (tm *testManager) scrape() string {
	var body []byte
	Eventually(func() error {
		resp, err := http.Get("http://" + tm.metricsAddr + "/metrics")
		if err != nil {
			return err
		}
		defer resp.Body.Close()
		body, err = io.ReadAll(resp.Body)
		return err
	}, 10*time.Second).Should(Succeed())
	return string(body)
}

func (tm *testManager) stop() {
	tm.cancel()
	Eventually(tm.done, 30*time.Second).Should(BeClosed())
}

// newNamespace creates a namespace of its own for one test, with the default ServiceAccount
// (no controller-manager runs to create it). The namespace enforces the restricted Pod Security
// Standard, so the apiserver's PodSecurity admission rejects any pod the tests create from a Job
// template that is not restricted.
func newNamespace() string {
	name := fmt.Sprintf("fenwick-%d", nsSeq.Add(1))
	Expect(k8sClient.Create(ctx(), &corev1.Namespace{ObjectMeta: metav1.ObjectMeta{Name: name, Labels: map[string]string{
		"pod-security.kubernetes.io/enforce":         "restricted",
		"pod-security.kubernetes.io/enforce-version": "latest",
	}}})).To(Succeed())
	sa := &corev1.ServiceAccount{ObjectMeta: metav1.ObjectMeta{Name: "default", Namespace: name}}
	if err := k8sClient.Create(ctx(), sa); err != nil && !apierrors.IsAlreadyExists(err) {
		Expect(err).NotTo(HaveOccurred())
	}
	return name
}

func ctx() context.Context { return context.Background() }
