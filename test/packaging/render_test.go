package packaging

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"

	"helm.sh/helm/v3/pkg/action"
	"helm.sh/helm/v3/pkg/chart/loader"
	"helm.sh/helm/v3/pkg/chartutil"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	utilyaml "k8s.io/apimachinery/pkg/util/yaml"
	"sigs.k8s.io/kustomize/api/krusty"
	"sigs.k8s.io/kustomize/kyaml/filesys"
	"sigs.k8s.io/yaml"
)

var (
	repoRoot = filepath.Join("..", "..")
	chartDir = filepath.Join(repoRoot, "charts", "almanac")
	// kubeVersion is the control plane the tests run against (bin/k8s/v1.37.2).
	kubeVersion = &chartutil.KubeVersion{Version: "v1.37.2", Major: "1", Minor: "37"}
)

// renderChart renders charts/almanac the way `helm template --include-crds` does, with vals
// over the chart's defaults, and returns the objects (CRDs first, as Helm installs them).
func renderChart(release, namespace string, vals map[string]any) ([]*unstructured.Unstructured, error) {
	chrt, err := loader.Load(chartDir)
	if err != nil {
		return nil, err
	}
	install := action.NewInstall(&action.Configuration{Log: func(string, ...any) {}})
	install.ClientOnly = true
	install.DryRun = true
	install.ReleaseName = release
	install.Namespace = namespace
	install.IncludeCRDs = true
	install.KubeVersion = kubeVersion
	rel, err := install.Run(chrt, vals)
	if err != nil {
		return nil, err
	}
	return decodeObjects([]byte(rel.Manifest))
}

// mustRenderChart is renderChart that fails the test on error.
func mustRenderChart(t *testing.T, release, namespace string, vals map[string]any) []*unstructured.Unstructured {
	t.Helper()
	objs, err := renderChart(release, namespace, vals)
	if err != nil {
		t.Fatalf("render chart (release %s, values %v): %v", release, vals, err)
	}
	return objs
}

// renderKustomize builds a kustomization directory (relative to the repository root) the way
// `kustomize build` does.
func renderKustomize(t *testing.T, dir string) []*unstructured.Unstructured {
	t.Helper()
	k := krusty.MakeKustomizer(krusty.MakeDefaultOptions())
	resources, err := k.Run(filesys.MakeFsOnDisk(), filepath.Join(repoRoot, dir))
	if err != nil {
		t.Fatalf("kustomize build %s: %v", dir, err)
	}
	out, err := resources.AsYaml()
	if err != nil {
		t.Fatalf("kustomize build %s: %v", dir, err)
	}
	objs, err := decodeObjects(out)
	if err != nil {
		t.Fatalf("kustomize build %s: %v", dir, err)
	}
	return objs
}

// readObjects decodes a YAML file (relative to the repository root) into its objects.
func readObjects(t *testing.T, file string) []*unstructured.Unstructured {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(repoRoot, file))
	if err != nil {
		t.Fatal(err)
	}
	objs, err := decodeObjects(data)
	if err != nil {
		t.Fatalf("%s: %v", file, err)
	}
	return objs
}

// decodeObjects splits a multi-document YAML stream into objects, skipping empty documents.
func decodeObjects(data []byte) ([]*unstructured.Unstructured, error) {
	r := utilyaml.NewYAMLReader(bufio.NewReader(bytes.NewReader(data)))
	var objs []*unstructured.Unstructured
	for {
		doc, err := r.Read()
		if errors.Is(err, io.EOF) {
			return objs, nil
		}
		if err != nil {
			return nil, err
		}
		j, err := yaml.YAMLToJSON(doc)
		if err != nil {
			return nil, err
		}
		if s := string(bytes.TrimSpace(j)); s == "null" || s == "{}" {
			continue // an empty document, or one with only comments
		}
		// UnmarshalJSON keeps integers as int64, as the unstructured helpers expect.
		u := &unstructured.Unstructured{}
		if err := u.UnmarshalJSON(j); err != nil {
			return nil, err
		}
		objs = append(objs, u)
	}
}

// find returns the one object of that kind and name (any namespace), or nil.
func find(objs []*unstructured.Unstructured, kind, name string) *unstructured.Unstructured {
	for _, o := range objs {
		if o.GetKind() == kind && o.GetName() == name {
			return o
		}
	}
	return nil
}

// ofKind returns the objects of that kind.
func ofKind(objs []*unstructured.Unstructured, kind string) []*unstructured.Unstructured {
	var out []*unstructured.Unstructured
	for _, o := range objs {
		if o.GetKind() == kind {
			out = append(out, o)
		}
	}
	return out
}

// findIn returns the object of that kind, namespace and name, or nil.
func findIn(objs []*unstructured.Unstructured, kind, namespace, name string) *unstructured.Unstructured {
	for _, o := range objs {
		if o.GetKind() == kind && o.GetNamespace() == namespace && o.GetName() == name {
			return o
		}
	}
	return nil
}

// managerContainer returns the Deployment's container named manager.
func managerContainer(t *testing.T, d *unstructured.Unstructured) map[string]any {
	t.Helper()
	if d == nil {
		t.Fatal("no manager Deployment")
	}
	containers, _, _ := unstructured.NestedSlice(d.Object, "spec", "template", "spec", "containers")
	for _, c := range containers {
		if m, ok := c.(map[string]any); ok && m["name"] == "manager" {
			return m
		}
	}
	t.Fatalf("Deployment %s has no manager container", d.GetName())
	return nil
}

// stringList converts a decoded YAML list of strings.
func stringList(v any) []string {
	items, _ := v.([]any)
	out := make([]string, 0, len(items))
	for _, it := range items {
		s, _ := it.(string)
		out = append(out, s)
	}
	return out
}

// equalJSON reports whether a and b encode to the same JSON (so int64 and float64 from
// different decoders compare equal, and map order does not matter).
func equalJSON(a, b any) bool {
	ja, errA := json.Marshal(a)
	jb, errB := json.Marshal(b)
	return errA == nil && errB == nil && bytes.Equal(ja, jb)
}
