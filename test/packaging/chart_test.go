package packaging

import (
	"bytes"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"helm.sh/helm/v3/pkg/chartutil"
	"helm.sh/helm/v3/pkg/lint"
	"helm.sh/helm/v3/pkg/lint/support"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
)

// namespacedValues reads testdata/namespaced-values.yaml: two watched namespaces, two replicas,
// NetworkPolicy and PodDisruptionBudget on, an image override.
func namespacedValues(t *testing.T) map[string]any {
	t.Helper()
	vals, err := chartutil.ReadValuesFile(filepath.Join("testdata", "namespaced-values.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	return vals.AsMap()
}

// lintErrors runs Helm's chart linter (the library behind `helm lint`) and returns the
// messages of error severity; the others are logged.
func lintErrors(t *testing.T, vals map[string]any) []support.Message {
	t.Helper()
	linter := lint.AllWithKubeVersion(chartDir, vals, "almanac-system", kubeVersion)
	var errs []support.Message
	for _, m := range linter.Messages {
		if m.Severity >= support.ErrorSev {
			errs = append(errs, m)
		} else {
			t.Logf("lint: %s", m)
		}
	}
	return errs
}

func TestChartLint(t *testing.T) {
	for name, vals := range map[string]map[string]any{
		"defaults":   nil,
		"namespaced": namespacedValues(t),
	} {
		t.Run(name, func(t *testing.T) {
			if errs := lintErrors(t, vals); len(errs) > 0 {
				t.Errorf("helm lint errors: %v", errs)
			}
		})
	}
	// The linter must see bad values at all, or the checks above prove nothing.
	t.Run("bad values are an error", func(t *testing.T) {
		if errs := lintErrors(t, map[string]any{"replicas": "two"}); len(errs) == 0 {
			t.Error("helm lint accepted replicas: \"two\"")
		}
	})
}

func TestChartSchemaRejectsWrongValues(t *testing.T) {
	cases := map[string]struct {
		vals map[string]any
		want string // part of the error
	}{
		"replicas as a string":      {map[string]any{"replicas": "2"}, "replicas"},
		"replicas zero":             {map[string]any{"replicas": 0}, "replicas"},
		"unknown top-level key":     {map[string]any{"replica": 2}, "replica"},
		"unknown nested key":        {map[string]any{"networkPolicy": map[string]any{"enable": true}}, "enable"},
		"tag as a number":           {map[string]any{"image": map[string]any{"repository": "almanac-controller", "tag": 0.1}}, "tag"},
		"digest without algorithm":  {map[string]any{"image": map[string]any{"repository": "almanac-controller", "digest": "latest"}}, "digest"},
		"watchNamespaces as string": {map[string]any{"watchNamespaces": "depot-north"}, "watchNamespaces"},
		"namespace not DNS-1123":    {map[string]any{"watchNamespaces": []any{"Depot_North"}}, "watchNamespaces"},
		"repeated namespace":        {map[string]any{"watchNamespaces": []any{"depot-north", "depot-north"}}, "watchNamespaces"},
		"unknown log level":         {map[string]any{"logLevel": "verbose"}, "logLevel"},
		"port out of range":         {map[string]any{"metrics": map[string]any{"port": 70000}}, "port"},
		"extra arg without dashes":  {map[string]any{"extraArgs": []any{"zap-devel"}}, "extraArgs"},
		"trainer namespaces string": {map[string]any{"trainer": map[string]any{"serviceAccount": map[string]any{"namespaces": "depot-north"}}}, "namespaces"},
		"unknown monitoring key":    {map[string]any{"monitoring": map[string]any{"serviceMonitor": map[string]any{"enable": true}}}, "enable"},
		"scrape interval unitless":  {map[string]any{"monitoring": map[string]any{"serviceMonitor": map[string]any{"interval": "30"}}}, "interval"},
		"dashboard label a number":  {map[string]any{"monitoring": map[string]any{"dashboard": map[string]any{"labels": map[string]any{"grafana_dashboard": 1}}}}, "grafana_dashboard"},
		"dashboard namespace bad":   {map[string]any{"monitoring": map[string]any{"dashboard": map[string]any{"namespace": "Grafana"}}}, "namespace"},
	}
	for name, tc := range cases {
		t.Run(name, func(t *testing.T) {
			_, err := renderChart("fenwick", "fenwick-system", tc.vals)
			if err == nil {
				t.Fatalf("values %v rendered without error", tc.vals)
			}
			t.Logf("refused: %v", err)
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error does not name %q: %v", tc.want, err)
			}
		})
	}
}

func TestChartRefusesDisruptionBudgetThatBlocksDrains(t *testing.T) {
	_, err := renderChart("fenwick", "fenwick-system", map[string]any{
		"podDisruptionBudget": map[string]any{"enabled": true},
	})
	if err == nil || !strings.Contains(err.Error(), "minAvailable must be below replicas") {
		t.Errorf("PDB with minAvailable 1 and one replica: got error %v", err)
	}
}

// kindsAndNames lists "Kind namespace/name" for every object, sorted.
func kindsAndNames(objs []*unstructured.Unstructured) []string {
	var out []string
	for _, o := range objs {
		out = append(out, o.GetKind()+" "+o.GetNamespace()+"/"+o.GetName())
	}
	slices.Sort(out)
	return out
}

func TestChartDefaults(t *testing.T) {
	objs := mustRenderChart(t, "fenwick", "fenwick-system", nil)
	want := []string{
		"ClusterRole /fenwick-manager",
		"ClusterRoleBinding /fenwick-manager",
		"CustomResourceDefinition /forecastportfolios.forecasting.almanac.dev",
		"CustomResourceDefinition /forecastruns.forecasting.almanac.dev",
		"Deployment fenwick-system/fenwick-controller-manager",
		"Role fenwick-system/fenwick-leader-election",
		"RoleBinding fenwick-system/fenwick-leader-election",
		"Service fenwick-system/fenwick-controller-manager-metrics",
		"ServiceAccount fenwick-system/almanac-trainer",
		"ServiceAccount fenwick-system/fenwick-controller-manager",
		"ValidatingAdmissionPolicy /fenwick-portfolio-references",
		"ValidatingAdmissionPolicyBinding /fenwick-portfolio-references",
	}
	if got := kindsAndNames(objs); !slices.Equal(got, want) {
		t.Errorf("objects:\n got %q\nwant %q", got, want)
	}
	c := managerContainer(t, find(objs, "Deployment", "fenwick-controller-manager"))
	if got, want := c["image"], "almanac-controller:v0.1.0"; got != want {
		t.Errorf("image %v, want %v (the chart's appVersion)", got, want)
	}
	args := stringList(c["args"])
	for _, a := range []string{"--leader-elect", "--metrics-bind-address=:8080", "--health-probe-bind-address=:8081", "--max-concurrent-shards=32", "--zap-log-level=info"} {
		if !slices.Contains(args, a) {
			t.Errorf("args %q lack %s", args, a)
		}
	}
	for _, a := range args {
		if strings.HasPrefix(a, "--watch-namespace") {
			t.Errorf("default install watches all namespaces, got %s", a)
		}
	}
}

func TestChartNamespaced(t *testing.T) {
	objs := mustRenderChart(t, "fenwick", "fenwick-system", namespacedValues(t))
	if n := len(ofKind(objs, "ClusterRole")) + len(ofKind(objs, "ClusterRoleBinding")); n != 0 {
		t.Errorf("namespaced install renders %d cluster-wide RBAC objects, want none", n)
	}
	for _, ns := range []string{"depot-north", "depot-south"} {
		role, binding := findIn(objs, "Role", ns, "fenwick-manager"), findIn(objs, "RoleBinding", ns, "fenwick-manager")
		if role == nil || binding == nil {
			t.Fatalf("no manager Role and RoleBinding in %s", ns)
		}
		subjects, _, _ := unstructured.NestedSlice(binding.Object, "subjects")
		want := []any{map[string]any{"kind": "ServiceAccount", "name": "fenwick-controller-manager", "namespace": "fenwick-system"}}
		if !equalJSON(subjects, want) {
			t.Errorf("RoleBinding in %s binds %v, want %v", ns, subjects, want)
		}
		if sa := findIn(objs, "ServiceAccount", ns, "almanac-trainer"); sa == nil {
			t.Errorf("no trainer ServiceAccount in watched namespace %s", ns)
		}
	}
	if sa := findIn(objs, "ServiceAccount", "fenwick-system", "almanac-trainer"); sa != nil {
		t.Error("trainer ServiceAccount in the release namespace, which is not watched")
	}
	d := find(objs, "Deployment", "fenwick-controller-manager")
	if r, _, _ := unstructured.NestedInt64(d.Object, "spec", "replicas"); r != 2 {
		t.Errorf("replicas %d, want 2", r)
	}
	c := managerContainer(t, d)
	if got, want := c["image"], "registry.example.com/fenwick/almanac-controller:v0.1.1"; got != want {
		t.Errorf("image %v, want %v", got, want)
	}
	args := stringList(c["args"])
	for _, a := range []string{"--watch-namespace=depot-north,depot-south", "--max-concurrent-shards=8", "--zap-log-level=debug"} {
		if !slices.Contains(args, a) {
			t.Errorf("args %q lack %s", args, a)
		}
	}
	np := find(objs, "NetworkPolicy", "fenwick-controller-manager")
	if np == nil {
		t.Fatal("no NetworkPolicy")
	}
	ingress, _, _ := unstructured.NestedSlice(np.Object, "spec", "ingress")
	wantIngress := []any{map[string]any{
		"ports": []any{map[string]any{"port": "metrics", "protocol": "TCP"}},
		"from":  []any{map[string]any{"namespaceSelector": map[string]any{"matchLabels": map[string]any{"kubernetes.io/metadata.name": "monitoring"}}}},
	}}
	if !equalJSON(ingress, wantIngress) {
		t.Errorf("NetworkPolicy ingress %v, want %v", ingress, wantIngress)
	}
	pdb := find(objs, "PodDisruptionBudget", "fenwick-controller-manager")
	if pdb == nil {
		t.Fatal("no PodDisruptionBudget")
	}
	// NetworkPolicy and PDB must select exactly the Deployment's pods.
	podLabels, _, _ := unstructured.NestedStringMap(d.Object, "spec", "template", "metadata", "labels")
	for _, sel := range []struct {
		obj  *unstructured.Unstructured
		path []string
	}{{np, []string{"spec", "podSelector", "matchLabels"}}, {pdb, []string{"spec", "selector", "matchLabels"}}, {d, []string{"spec", "selector", "matchLabels"}}} {
		m, _, _ := unstructured.NestedStringMap(sel.obj.Object, sel.path...)
		if len(m) == 0 {
			t.Errorf("%s %s: empty selector", sel.obj.GetKind(), sel.obj.GetName())
		}
		for k, v := range m {
			if podLabels[k] != v {
				t.Errorf("%s %s selects %s=%s, which the pods lack", sel.obj.GetKind(), sel.obj.GetName(), k, v)
			}
		}
	}
}

func TestChartImageDigestWinsOverTag(t *testing.T) {
	digest := "sha256:" + strings.Repeat("ab", 32)
	objs := mustRenderChart(t, "fenwick", "fenwick-system", map[string]any{
		"image": map[string]any{"repository": "registry.example.com/fenwick/almanac-controller", "tag": "v0.1.1", "digest": digest},
	})
	c := managerContainer(t, find(objs, "Deployment", "fenwick-controller-manager"))
	if got, want := c["image"], "registry.example.com/fenwick/almanac-controller@"+digest; got != want {
		t.Errorf("image %v, want %v", got, want)
	}
}

// The Makefile's manifests target copies the generated CRDs into the chart; a stale copy
// would install an old schema with Helm.
func TestChartCRDsAreTheGeneratedOnes(t *testing.T) {
	generated, err := filepath.Glob(filepath.Join(repoRoot, "config", "crd", "bases", "*.yaml"))
	if err != nil || len(generated) == 0 {
		t.Fatalf("no generated CRDs: %v", err)
	}
	inChart, _ := filepath.Glob(filepath.Join(chartDir, "crds", "*.yaml"))
	if len(inChart) != len(generated) {
		t.Errorf("chart has %d CRD files, config/crd/bases %d", len(inChart), len(generated))
	}
	for _, g := range generated {
		want, _ := os.ReadFile(g)
		got, err := os.ReadFile(filepath.Join(chartDir, "crds", filepath.Base(g)))
		if err != nil || !bytes.Equal(got, want) {
			t.Errorf("charts/almanac/crds/%s differs from config/crd/bases (run make manifests): %v", filepath.Base(g), err)
		}
	}
}
