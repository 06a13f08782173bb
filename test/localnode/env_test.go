package localnode

import (
	"context"
	"fmt"
	"testing"

	"github.com/google/go-cmp/cmp"
	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// fakeData is an in-memory dataSource.
type fakeData struct {
	configMaps map[string]map[string]string
	secrets    map[string]map[string][]byte
}

func (f fakeData) configMap(_ context.Context, ns, name string) (map[string]string, error) {
	if d, ok := f.configMaps[ns+"/"+name]; ok {
		return d, nil
	}
	return nil, fmt.Errorf("configmap %s/%s: %w", ns, name, errNotFound)
}

func (f fakeData) secret(_ context.Context, ns, name string) (map[string][]byte, error) {
	if d, ok := f.secrets[ns+"/"+name]; ok {
		return d, nil
	}
	return nil, fmt.Errorf("secret %s/%s: %w", ns, name, errNotFound)
}

func field(path string) *corev1.EnvVarSource {
	return &corev1.EnvVarSource{FieldRef: &corev1.ObjectFieldSelector{FieldPath: path}}
}

func TestResolveEnv(t *testing.T) {
	pod := &corev1.Pod{
		ObjectMeta: metav1.ObjectMeta{
			Name: "weekly-dairy-1-abcde", Namespace: "fenwick", UID: "u-1",
			Labels:      map[string]string{"depot": "harlow-road"},
			Annotations: map[string]string{"batch.kubernetes.io/job-completion-index": "1"},
		},
		Spec: corev1.PodSpec{NodeName: "localnode-0", ServiceAccountName: "trainer"},
	}
	src := fakeData{
		configMaps: map[string]map[string]string{"fenwick/settings": {"REGION": "north", "HORIZON": "14"}},
		secrets:    map[string]map[string][]byte{"fenwick/store": {"ACCESS_KEY": []byte("k-123")}},
	}
	yes := true
	c := &corev1.Container{
		EnvFrom: []corev1.EnvFromSource{
			{ConfigMapRef: &corev1.ConfigMapEnvSource{LocalObjectReference: corev1.LocalObjectReference{Name: "settings"}}},
			{Prefix: "STORE_", SecretRef: &corev1.SecretEnvSource{LocalObjectReference: corev1.LocalObjectReference{Name: "store"}}},
			{ConfigMapRef: &corev1.ConfigMapEnvSource{LocalObjectReference: corev1.LocalObjectReference{Name: "absent"}, Optional: &yes}},
		},
		Env: []corev1.EnvVar{
			{Name: "JOB_COMPLETION_INDEX", ValueFrom: field("metadata.annotations['batch.kubernetes.io/job-completion-index']")},
			{Name: "DEPOT", ValueFrom: field("metadata.labels['depot']")},
			{Name: "POD", ValueFrom: field("metadata.name")},
			{Name: "NS", ValueFrom: field("metadata.namespace")},
			{Name: "UID", ValueFrom: field("metadata.uid")},
			{Name: "NODE", ValueFrom: field("spec.nodeName")},
			{Name: "SA", ValueFrom: field("spec.serviceAccountName")},
			{Name: "MISSING_ANNOTATION", ValueFrom: field("metadata.annotations['nope']")},
			{Name: "HORIZON", Value: "28"}, // replaces the envFrom value, keeps its place
			{Name: "OUT", Value: "/tmp/$(DEPOT)/$(JOB_COMPLETION_INDEX)/$(UNDEFINED)/$$(DEPOT)"},
			{Name: "KEY", ValueFrom: &corev1.EnvVarSource{SecretKeyRef: &corev1.SecretKeySelector{
				LocalObjectReference: corev1.LocalObjectReference{Name: "store"}, Key: "ACCESS_KEY"}}},
			{Name: "OPTIONAL_KEY", ValueFrom: &corev1.EnvVarSource{ConfigMapKeyRef: &corev1.ConfigMapKeySelector{
				LocalObjectReference: corev1.LocalObjectReference{Name: "settings"}, Key: "nope", Optional: &yes}}},
		},
	}
	got, err := resolveEnv(context.Background(), pod, c, src)
	if err != nil {
		t.Fatal(err)
	}
	want := []envVar{
		{"HORIZON", "28"}, {"REGION", "north"}, {"STORE_ACCESS_KEY", "k-123"},
		{"JOB_COMPLETION_INDEX", "1"}, {"DEPOT", "harlow-road"}, {"POD", "weekly-dairy-1-abcde"},
		{"NS", "fenwick"}, {"UID", "u-1"}, {"NODE", "localnode-0"}, {"SA", "trainer"},
		{"MISSING_ANNOTATION", ""},
		{"OUT", "/tmp/harlow-road/1/$(UNDEFINED)/$(DEPOT)"},
		{"KEY", "k-123"},
	}
	if d := cmp.Diff(want, got, cmp.AllowUnexported(envVar{})); d != "" {
		t.Errorf("resolveEnv (-want,+got):\n%s", d)
	}
}

func TestResolveEnvErrors(t *testing.T) {
	pod := &corev1.Pod{ObjectMeta: metav1.ObjectMeta{Name: "p", Namespace: "fenwick"}}
	tests := map[string]corev1.Container{
		"missing configMap": {EnvFrom: []corev1.EnvFromSource{{ConfigMapRef: &corev1.ConfigMapEnvSource{
			LocalObjectReference: corev1.LocalObjectReference{Name: "absent"}}}}},
		"missing secret key": {Env: []corev1.EnvVar{{Name: "K", ValueFrom: &corev1.EnvVarSource{SecretKeyRef: &corev1.SecretKeySelector{
			LocalObjectReference: corev1.LocalObjectReference{Name: "absent"}, Key: "k"}}}}},
		"unsupported fieldRef": {Env: []corev1.EnvVar{{Name: "X", ValueFrom: field("spec.schedulerName")}}},
		"resourceFieldRef": {Env: []corev1.EnvVar{{Name: "X", ValueFrom: &corev1.EnvVarSource{
			ResourceFieldRef: &corev1.ResourceFieldSelector{Resource: "limits.cpu"}}}}},
	}
	for name, c := range tests {
		if _, err := resolveEnv(context.Background(), pod, &c, fakeData{}); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}

// The $(VAR) rules follow the Kubernetes API documentation of Container.Args and EnvVar.Value
// (k8s.io/api v0.37.2 core/v1/types.go): references to defined variables expand, undefined
// ones stay as written, $$ escapes.
func TestExpand(t *testing.T) {
	vals := map[string]string{"A": "x", "B": "y"}
	tests := map[string]string{
		"$(A)":       "x",
		"$(A)-$(B)":  "x-y",
		"$(C)":       "$(C)",
		"$$(A)":      "$(A)",
		"$$":         "$",
		"cost $5":    "cost $5",
		"$(A":        "$(A",
		"end $":      "end $",
		"no dollars": "no dollars",
		"$(A)$$$(B)": "x$y",
	}
	for in, want := range tests {
		if got := expand(in, vals); got != want {
			t.Errorf("expand(%q) = %q, want %q", in, got, want)
		}
	}
}
