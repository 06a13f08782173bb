package packaging

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/runtime/schema"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/client-go/dynamic"
	"k8s.io/client-go/rest"
	"sigs.k8s.io/controller-runtime/pkg/client/apiutil"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
)

// cluster applies unstructured objects to an API server, the way `kubectl apply
// --server-side` and GitOps tools do.
type cluster struct {
	dyn    dynamic.Interface
	mapper meta.RESTMapper
}

func newCluster(t *testing.T, cfg *rest.Config) *cluster {
	t.Helper()
	httpClient, err := rest.HTTPClientFor(cfg)
	if err != nil {
		t.Fatal(err)
	}
	// The dynamic mapper re-reads discovery on a miss, so kinds of CRDs applied during the
	// test are found.
	mapper, err := apiutil.NewDynamicRESTMapper(cfg, httpClient)
	if err != nil {
		t.Fatal(err)
	}
	dyn, err := dynamic.NewForConfigAndClient(cfg, httpClient)
	if err != nil {
		t.Fatal(err)
	}
	return &cluster{dyn: dyn, mapper: mapper}
}

// resource returns the client for o's kind and whether that kind is namespaced.
func (c *cluster) resource(o *unstructured.Unstructured) (dynamic.ResourceInterface, bool, error) {
	gvk := o.GroupVersionKind()
	m, err := c.mapper.RESTMapping(gvk.GroupKind(), gvk.Version)
	if err != nil {
		return nil, false, err
	}
	if m.Scope.Name() == meta.RESTScopeNameNamespace {
		return c.dyn.Resource(m.Resource).Namespace(o.GetNamespace()), true, nil
	}
	return c.dyn.Resource(m.Resource), false, nil
}

// apply does a server-side apply of o as fieldManager, without force: a conflict with another
// manager is an error, as it would be for a GitOps tool.
func (c *cluster) apply(ctx context.Context, o *unstructured.Unstructured, fieldManager string, dryRun bool) (*unstructured.Unstructured, error) {
	r, _, err := c.resource(o)
	if err != nil {
		return nil, err
	}
	opts := metav1.ApplyOptions{FieldManager: fieldManager}
	if dryRun {
		opts.DryRun = []string{metav1.DryRunAll}
	}
	return r.Apply(ctx, o.GetName(), o, opts)
}

// describe names an object in messages.
func describe(o *unstructured.Unstructured) string {
	if o.GetNamespace() == "" {
		return o.GetKind() + " " + o.GetName()
	}
	return o.GetKind() + " " + o.GetNamespace() + "/" + o.GetName()
}

// installOrder puts CRDs first, then Namespaces, then the rest, in their rendered order.
func installOrder(objs []*unstructured.Unstructured) []*unstructured.Unstructured {
	rank := func(o *unstructured.Unstructured) int {
		switch o.GetKind() {
		case "CustomResourceDefinition":
			return 0
		case "Namespace":
			return 1
		}
		return 2
	}
	var out []*unstructured.Unstructured
	for r := range 3 {
		for _, o := range objs {
			if rank(o) == r {
				out = append(out, o)
			}
		}
	}
	return out
}

// restrictedNamespace is a namespace the way the README tells users to prepare one: the
// restricted Pod Security Standard enforced.
func restrictedNamespace(name string) *unstructured.Unstructured {
	return &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "v1",
		"kind":       "Namespace",
		"metadata": map[string]any{
			"name": name,
			"labels": map[string]any{
				"pod-security.kubernetes.io/enforce": "restricted",
			},
		},
	}}
}

// startEnvtest starts env (etcd and kube-apiserver), stops it when the test ends, and returns
// it with the admin's rest config.
func startEnvtest(t *testing.T, env *envtest.Environment) (*envtest.Environment, *rest.Config) {
	t.Helper()
	cfg, err := env.Start()
	if err != nil {
		t.Fatalf("start envtest: %v", err)
	}
	t.Cleanup(func() {
		if err := env.Stop(); err != nil {
			t.Errorf("stop envtest: %v", err)
		}
	})
	return env, cfg
}

// TestServerSideApply applies each install path to a real kube-apiserver: a dry run of every
// object first, then for real, then a second time, which must change nothing.
func TestServerSideApply(t *testing.T) {
	if os.Getenv("KUBEBUILDER_ASSETS") == "" {
		t.Skip("KUBEBUILDER_ASSETS is not set: run `make controlplane` and `make test` (CI always sets it)")
	}
	_, cfg := startEnvtest(t, &envtest.Environment{})
	ctx := context.Background()
	// Every warning the API server sends back (deprecated API versions, Pod Security
	// violations of a Deployment's template, unknown fields...) fails the install it came from.
	warnings := &warningLog{}
	cfg.WarningHandler = warnings
	c := newCluster(t, cfg)

	for _, in := range []struct {
		name string
		objs []*unstructured.Unstructured
		// namespaces the user creates before installing (helm install --namespace X
		// --create-namespace, and the namespaces the controller is told to watch).
		namespaces []string
	}{
		{"kustomize", renderKustomize(t, "config/default"), nil},
		{"helm", mustRenderChart(t, "fenwick", "fenwick-system", nil), []string{"fenwick-system"}},
		{"helm-namespaced", mustRenderChart(t, "fenwick-depots", "fenwick-depots-system", namespacedValues(t)),
			[]string{"fenwick-depots-system", "depot-north", "depot-south"}},
		// The monitoring objects, with the operator's CRDs installed first as a cluster with the
		// operator has them.
		{"helm-monitoring", append(monitoringCRDs(t), mustRenderChart(t, "fenwick-obs", "fenwick-obs-system", monitoringValues(t))...),
			[]string{"fenwick-obs-system"}},
	} {
		t.Run(in.name, func(t *testing.T) {
			manager := "almanac-" + in.name
			for _, ns := range in.namespaces {
				if _, err := c.apply(ctx, restrictedNamespace(ns), "test-setup", false); err != nil {
					t.Fatalf("create namespace %s: %v", ns, err)
				}
			}
			objs := installOrder(in.objs)
			// Namespaced objects cannot be dry-run into a namespace that does not exist yet,
			// nor custom objects before their CRD is served, so the install's own Namespace
			// and CRD objects go in first (as Helm installs CRDs and waits for them).
			for _, o := range objs {
				if o.GetKind() == "Namespace" || o.GetKind() == "CustomResourceDefinition" {
					if _, err := c.apply(ctx, o, manager, false); err != nil {
						t.Fatalf("apply %s: %v", describe(o), err)
					}
				}
			}
			for _, o := range ofKind(objs, "CustomResourceDefinition") {
				waitEstablished(ctx, t, c, o)
			}

			for _, o := range objs {
				_, namespaced, err := c.resource(o)
				if err != nil {
					t.Errorf("%s: kind unknown to the API server: %v", describe(o), err)
					continue
				}
				if namespaced && o.GetNamespace() == "" {
					t.Errorf("%s names no namespace; GitOps tools would put it in their own", describe(o))
				}
				if _, err := c.apply(ctx, o, manager, true); err != nil {
					t.Errorf("dry-run apply %s: %v", describe(o), err)
				}
			}
			if t.Failed() {
				return
			}

			for _, o := range objs {
				if _, err := c.apply(ctx, o, manager, false); err != nil {
					t.Fatalf("apply %s: %v", describe(o), err)
				}
			}
			// The CRDs' status changes once the API server serves them; wait for that so the
			// second apply is measured against a settled object.
			for _, o := range ofKind(objs, "CustomResourceDefinition") {
				waitEstablished(ctx, t, c, o)
			}
			before := map[string]*unstructured.Unstructured{}
			for _, o := range objs {
				r, _, _ := c.resource(o)
				got, err := r.Get(ctx, o.GetName(), metav1.GetOptions{})
				if err != nil {
					t.Fatalf("get %s: %v", describe(o), err)
				}
				before[describe(o)] = got
			}
			for _, o := range objs {
				after, err := c.apply(ctx, o, manager, false)
				if err != nil {
					t.Errorf("second apply %s: %v", describe(o), err)
					continue
				}
				b := before[describe(o)]
				if after.GetResourceVersion() != b.GetResourceVersion() || after.GetGeneration() != b.GetGeneration() {
					t.Errorf("second apply changed %s: resourceVersion %s -> %s, generation %d -> %d",
						describe(o), b.GetResourceVersion(), after.GetResourceVersion(), b.GetGeneration(), after.GetGeneration())
				}
			}

			// The comparison above must see a change when there is one.
			changed := ofKind(objs, "Deployment")[0].DeepCopy()
			changed.SetAnnotations(map[string]string{"fenwick.example.com/changed": "true"})
			if after, err := c.apply(ctx, changed, manager, false); err != nil || after.GetResourceVersion() == before[describe(changed)].GetResourceVersion() {
				t.Errorf("a changed Deployment applied without a new resourceVersion (err %v)", err)
			}
			if _, err := c.apply(ctx, ofKind(objs, "Deployment")[0], manager, false); err != nil {
				t.Errorf("restore %s: %v", describe(changed), err)
			}
			if w := warnings.take(); len(w) > 0 {
				t.Errorf("API server warnings: %q", w)
			}

			for _, d := range ofKind(objs, "Deployment") {
				checkPodSecurity(ctx, t, c, d)
			}
			warnings.take() // the privileged control pod's refusal may come with warnings
		})
	}

	// A namespaced install grants the markers' rules through Roles, which only work for
	// namespaced resources; the API server's discovery says which ones are.
	t.Run("marker rules are all namespaced", func(t *testing.T) {
		for _, r := range markerRules(t) {
			for _, g := range r.APIGroups {
				for _, res := range r.Resources {
					base, _, _ := strings.Cut(res, "/") // status and finalizers share the scope
					gvk, err := c.mapper.KindFor(schema.GroupVersionResource{Group: g, Resource: base})
					if err != nil {
						t.Errorf("%s/%s: %v", g, base, err)
						continue
					}
					m, err := c.mapper.RESTMapping(gvk.GroupKind(), gvk.Version)
					if err != nil || m.Scope.Name() != meta.RESTScopeNameNamespace {
						t.Errorf("%s/%s is not namespaced (err %v): a Role cannot grant it, so watchNamespaces installs lack it", g, base, err)
					}
				}
			}
		}
	})

	t.Run("samples", func(t *testing.T) {
		files, _ := filepath.Glob(filepath.Join(repoRoot, "config", "samples", "forecasting_*.yaml"))
		if len(files) == 0 {
			t.Fatal("no samples in config/samples")
		}
		for _, f := range files {
			for _, o := range readObjects(t, filepath.Join("config", "samples", filepath.Base(f))) {
				// Status is the controller's to write; a sample that carries it would be
				// overwritten at once and teach users to commit it.
				if _, ok := o.Object["status"]; ok {
					t.Errorf("%s: %s carries a status", filepath.Base(f), describe(o))
				}
				if _, err := c.apply(ctx, o, "almanac-samples", true); err != nil {
					t.Errorf("dry-run apply %s from %s: %v", describe(o), filepath.Base(f), err)
				}
			}
		}
		if w := warnings.take(); len(w) > 0 {
			t.Errorf("API server warnings: %q", w)
		}
	})
}

// warningLog collects the API server's warnings (a rest.WarningHandler).
type warningLog struct {
	mu   sync.Mutex
	msgs []string
}

func (w *warningLog) HandleWarningHeader(code int, agent, text string) {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.msgs = append(w.msgs, text)
}

// take returns the warnings so far and forgets them.
func (w *warningLog) take() []string {
	w.mu.Lock()
	defer w.mu.Unlock()
	msgs := w.msgs
	w.msgs = nil
	return msgs
}

// waitEstablished waits until the API server serves the CRD.
func waitEstablished(ctx context.Context, t *testing.T, c *cluster, crd *unstructured.Unstructured) {
	t.Helper()
	r, _, _ := c.resource(crd)
	err := wait.PollUntilContextTimeout(ctx, 100*time.Millisecond, 30*time.Second, true, func(ctx context.Context) (bool, error) {
		got, err := r.Get(ctx, crd.GetName(), metav1.GetOptions{})
		if err != nil {
			return false, err
		}
		conds, _, _ := unstructured.NestedSlice(got.Object, "status", "conditions")
		for _, cond := range conds {
			if m, _ := cond.(map[string]any); m["type"] == "Established" && m["status"] == "True" {
				return true, nil
			}
		}
		return false, nil
	})
	if err != nil {
		t.Fatalf("CRD %s not established: %v", crd.GetName(), err)
	}
}

// checkPodSecurity has the API server's PodSecurity admission judge the Deployment's pod in
// its namespace (which enforces the restricted standard): a dry-run create of a Pod made from
// the template must be admitted, and the same Pod made privileged must be refused, which
// shows the namespace really enforces the standard.
func checkPodSecurity(ctx context.Context, t *testing.T, c *cluster, d *unstructured.Unstructured) {
	t.Helper()
	ns, err := c.dyn.Resource(namespaceResource).Get(ctx, d.GetNamespace(), metav1.GetOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if level := ns.GetLabels()["pod-security.kubernetes.io/enforce"]; level != "restricted" {
		t.Fatalf("namespace %s enforces Pod Security %q, want restricted", ns.GetName(), level)
	}
	template, _, _ := unstructured.NestedMap(d.Object, "spec", "template")
	pod := &unstructured.Unstructured{Object: map[string]any{
		"apiVersion": "v1",
		"kind":       "Pod",
		"metadata": map[string]any{
			"name":      d.GetName() + "-pod-security-check",
			"namespace": d.GetNamespace(),
			"labels":    template["metadata"].(map[string]any)["labels"],
		},
		"spec": template["spec"],
	}}
	pods := c.dyn.Resource(podResource).Namespace(d.GetNamespace())
	dryRun := metav1.CreateOptions{DryRun: []string{metav1.DryRunAll}}
	if _, err := pods.Create(ctx, pod, dryRun); err != nil {
		t.Errorf("pod of %s refused: %v", describe(d), err)
	}
	privileged := pod.DeepCopy()
	containers, _, _ := unstructured.NestedSlice(privileged.Object, "spec", "containers")
	containers[0].(map[string]any)["securityContext"] = map[string]any{"privileged": true}
	if err := unstructured.SetNestedSlice(privileged.Object, containers, "spec", "containers"); err != nil {
		t.Fatal(err)
	}
	_, err = pods.Create(ctx, privileged, dryRun)
	if !apierrors.IsForbidden(err) || !strings.Contains(err.Error(), "PodSecurity") {
		t.Errorf("privileged pod in %s: want a PodSecurity refusal, got %v", d.GetNamespace(), err)
	}
}

var (
	namespaceResource = schema.GroupVersionResource{Version: "v1", Resource: "namespaces"}
	podResource       = schema.GroupVersionResource{Version: "v1", Resource: "pods"}
)
