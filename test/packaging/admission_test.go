package packaging

import (
	"context"
	"os"
	"slices"
	"strings"
	"testing"
	"time"

	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/client-go/rest"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
)

// admissionObjects returns an install's ValidatingAdmissionPolicy and its binding.
func admissionObjects(t *testing.T, what string, objs []*unstructured.Unstructured) (policy, binding *unstructured.Unstructured) {
	t.Helper()
	ps, bs := ofKind(objs, "ValidatingAdmissionPolicy"), ofKind(objs, "ValidatingAdmissionPolicyBinding")
	if len(ps) != 1 || len(bs) != 1 {
		t.Fatalf("%s: %d policies and %d bindings, want one each", what, len(ps), len(bs))
	}
	return ps[0], bs[0]
}

// TestAdmissionPolicyInstalls: kustomize and the chart ship the same policy (the chart's
// defaults: any image, the trainer ServiceAccount almanac-trainer), each binding names its own
// policy after the name prefixes, and the chart's values reach both the policy and the
// controller's flag.
func TestAdmissionPolicyInstalls(t *testing.T) {
	kp, kb := admissionObjects(t, "kustomize", renderKustomize(t, "config/default"))
	hp, hb := admissionObjects(t, "helm", mustRenderChart(t, "fenwick", "fenwick-system", nil))
	if !equalJSON(kp.Object["spec"], hp.Object["spec"]) {
		t.Errorf("the chart's policy differs from config/admission's:\nkustomize %v\nhelm      %v", kp.Object["spec"], hp.Object["spec"])
	}
	for _, in := range []struct{ what, policy, binding, want string }{
		{"kustomize", kp.GetName(), kb.GetName(), "almanac-portfolio-references"},
		{"helm", hp.GetName(), hb.GetName(), "fenwick-portfolio-references"},
	} {
		if in.policy != in.want || in.binding != in.want {
			t.Errorf("%s: policy %q, binding %q, want both %q", in.what, in.policy, in.binding, in.want)
		}
	}
	for _, b := range []*unstructured.Unstructured{kb, hb} {
		name, _, _ := unstructured.NestedString(b.Object, "spec", "policyName")
		actions, _, _ := unstructured.NestedStringSlice(b.Object, "spec", "validationActions")
		if name != b.GetName() || !slices.Equal(actions, []string{"Deny"}) {
			t.Errorf("binding %s: policyName %q, validationActions %v; want its policy and [Deny]", b.GetName(), name, actions)
		}
	}

	objs := mustRenderChart(t, "fenwick", "fenwick-system", map[string]any{
		"trainerImagePrefixes": []any{"registry.example.com/almanac/", "registry.example.com/tools/almanac-trainer"},
		"trainer":              map[string]any{"serviceAccount": map[string]any{"name": "fenwick-trainer"}},
	})
	p, _ := admissionObjects(t, "helm with prefixes", objs)
	vars, _, _ := unstructured.NestedSlice(p.Object, "spec", "variables")
	got := map[string]string{}
	for _, v := range vars {
		m := v.(map[string]any)
		got[m["name"].(string)] = m["expression"].(string)
	}
	if got["allowedImages"] != `["registry.example.com/almanac/","registry.example.com/tools/almanac-trainer"]` || got["trainerServiceAccount"] != `"fenwick-trainer"` {
		t.Errorf("policy variables %v do not carry the values", got)
	}
	args := stringList(managerContainer(t, find(objs, "Deployment", "fenwick-controller-manager"))["args"])
	if !slices.Contains(args, "--trainer-image-prefixes=registry.example.com/almanac/,registry.example.com/tools/almanac-trainer") {
		t.Errorf("controller args %q lack the trainer image prefixes", args)
	}
	if args := stringList(managerContainer(t, find(mustRenderChart(t, "fenwick", "fenwick-system", nil), "Deployment", "fenwick-controller-manager"))["args"]); slices.ContainsFunc(args, func(a string) bool { return strings.HasPrefix(a, "--trainer-image-prefixes") }) {
		t.Errorf("default install passes an image list: %q", args)
	}
	off := mustRenderChart(t, "fenwick", "fenwick-system", map[string]any{"admissionPolicy": map[string]any{"enabled": false}})
	if n := len(ofKind(off, "ValidatingAdmissionPolicy")) + len(ofKind(off, "ValidatingAdmissionPolicyBinding")); n != 0 {
		t.Errorf("admissionPolicy.enabled false renders %d admission objects", n)
	}
	for _, bad := range []string{"registry.example.com/almanac/almanac-trainer:v0.1.0", "registry.example.com/almanac@sha256:00", "a,b"} {
		if _, err := renderChart("fenwick", "fenwick-system", map[string]any{"trainerImagePrefixes": []any{bad}}); err == nil {
			t.Errorf("trainerImagePrefixes [%q] accepted; an entry has no tag, digest or comma", bad)
		}
	}
}

// TestAdmissionPolicyRefusesWithoutRights applies the chart's policy to a real kube-apiserver
// (v1.37, ValidatingAdmissionPolicy GA since 1.30) and creates portfolios as users with and
// without the rights, through impersonation: a user who may create portfolios but not read the
// Secret, use the ServiceAccount or name the image is refused with a message naming the
// field; the same portfolio from a user with the rights is admitted.
func TestAdmissionPolicyRefusesWithoutRights(t *testing.T) {
	if os.Getenv("KUBEBUILDER_ASSETS") == "" {
		t.Skip("KUBEBUILDER_ASSETS is not set: run `make controlplane` and `make test` (CI always sets it)")
	}
	_, cfg := startEnvtest(t, &envtest.Environment{})
	ctx := context.Background()
	admin := newCluster(t, cfg)
	const ns = "depot-north"
	objs := installOrder(mustRenderChart(t, "fenwick", "fenwick-system", map[string]any{
		"trainerImagePrefixes": []any{"registry.example.com/almanac/"},
	}))
	setup := []*unstructured.Unstructured{restrictedNamespace(ns)}
	for _, o := range objs {
		if k := o.GetKind(); k == "CustomResourceDefinition" || strings.HasPrefix(k, "ValidatingAdmissionPolicy") {
			setup = append(setup, o)
		}
	}
	setup = append(setup,
		obj("v1", "Secret", ns, "fenwick-planning-s3", nil),
		obj("v1", "ServiceAccount", ns, "fenwick-cloud", nil),
		// Planners may write portfolios; only some may also read the Secret and act as the
		// ServiceAccount (an identity a cloud's workload-identity webhook could map to a role).
		obj("rbac.authorization.k8s.io/v1", "Role", ns, "portfolio-editor", map[string]any{"rules": []any{
			map[string]any{"apiGroups": []any{"forecasting.almanac.dev"}, "resources": []any{"forecastportfolios"}, "verbs": []any{"get", "create", "update", "patch"}}}}),
		obj("rbac.authorization.k8s.io/v1", "Role", ns, "planning-credentials", map[string]any{"rules": []any{
			map[string]any{"apiGroups": []any{""}, "resources": []any{"secrets"}, "resourceNames": []any{"fenwick-planning-s3"}, "verbs": []any{"get"}},
			map[string]any{"apiGroups": []any{""}, "resources": []any{"serviceaccounts"}, "resourceNames": []any{"fenwick-cloud", "default"}, "verbs": []any{"impersonate"}}}}),
		binding(ns, "edit-ana", "portfolio-editor", "ana"), binding(ns, "edit-bo", "portfolio-editor", "bo"),
		binding(ns, "credentials-bo", "planning-credentials", "bo"),
	)
	for _, o := range setup {
		if _, err := admin.apply(ctx, o, "test-setup", false); err != nil {
			t.Fatalf("apply %s: %v", describe(o), err)
		}
		if o.GetKind() == "CustomResourceDefinition" {
			waitEstablished(ctx, t, admin, o)
		}
	}

	sample := readObjects(t, "config/samples/forecasting_v1alpha1_forecastportfolio.yaml")[0]
	sample.SetNamespace(ns)
	portfolio := func(mutate func(spec map[string]any)) *unstructured.Unstructured {
		o := sample.DeepCopy()
		mutate(o.Object["spec"].(map[string]any))
		return o
	}
	const image = "registry.example.com/almanac/almanac-trainer:v0.1.0"
	withSecret := portfolio(func(map[string]any) {})
	withAccount := portfolio(func(s map[string]any) {
		delete(s["source"].(map[string]any), "credentialsSecretRef")
		s["trainer"].(map[string]any)["serviceAccountName"] = "fenwick-cloud"
	})
	plain := portfolio(func(s map[string]any) {
		delete(s["source"].(map[string]any), "credentialsSecretRef")
		s["trainer"].(map[string]any)["serviceAccountName"] = "almanac-trainer" // the install's, no rights
	})
	both := portfolio(func(s map[string]any) { s["trainer"].(map[string]any)["serviceAccountName"] = "fenwick-cloud" })
	// No ServiceAccount named: the pods run as the namespace's default one, which is checked
	// like a named one (it used to be let through: a user who may not create pods then had
	// pods run as it through the controller).
	unnamed := portfolio(func(s map[string]any) {
		delete(s["source"].(map[string]any), "credentialsSecretRef")
		delete(s["trainer"].(map[string]any), "serviceAccountName")
	})
	foreignImage := portfolio(func(s map[string]any) {
		s["trainer"].(map[string]any)["image"] = "registry.example.com/almanac-fork/almanac-trainer:1"
	})
	if got, _, _ := unstructured.NestedString(withSecret.Object, "spec", "trainer", "image"); got != image {
		t.Fatalf("sample image %q, the allowlist below assumes %q", got, image)
	}

	as := func(user string) *cluster {
		c := rest.CopyConfig(cfg)
		c.Impersonate = rest.ImpersonationConfig{UserName: user}
		return newCluster(t, c)
	}
	ana, bo := as("ana"), as("bo")
	create := func(c *cluster, o *unstructured.Unstructured) error {
		_, err := c.apply(ctx, o, "kubectl", true)
		return err
	}
	// The policy takes effect once the apiserver has compiled it: wait for the first refusal.
	deadline := time.Now().Add(60 * time.Second)
	for err := create(ana, withSecret); err == nil; err = create(ana, withSecret) {
		if time.Now().After(deadline) {
			t.Fatal("the policy never refused ana's portfolio naming a Secret she may not read")
		}
		time.Sleep(200 * time.Millisecond)
	}

	for _, tc := range []struct {
		name    string
		who     *cluster
		obj     *unstructured.Unstructured
		wantErr string // "" admits
	}{
		{"secret without get", ana, withSecret, "spec.source.credentialsSecretRef: user ana may not get Secret depot-north/fenwick-planning-s3"},
		{"service account without impersonate", ana, withAccount, "spec.trainer.serviceAccountName: user ana may neither impersonate ServiceAccount depot-north/fenwick-cloud nor create pods in namespace depot-north"},
		{"the install's trainer account, no secret", ana, plain, ""},
		{"no account named, without impersonate on the default one", ana, unnamed, "spec.trainer.serviceAccountName (unset: the pods run as the namespace's default ServiceAccount): user ana may neither impersonate ServiceAccount depot-north/default nor create pods in namespace depot-north"},
		{"no account named, with impersonate on the default one", bo, unnamed, ""},
		{"secret and account with the rights", bo, both, ""},
		{"image outside the allowlist", bo, foreignImage, `spec.trainer.image: "registry.example.com/almanac-fork/almanac-trainer:1" is not in the install's allowed trainer images (registry.example.com/almanac/)`},
		{"image outside the allowlist, cluster admin", admin, foreignImage, "is not in the install's allowed trainer images"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			err := create(tc.who, tc.obj)
			switch {
			case tc.wantErr == "" && err != nil:
				t.Errorf("refused: %v", err)
			case tc.wantErr != "" && err == nil:
				t.Errorf("admitted; want refused with %q", tc.wantErr)
			case tc.wantErr != "" && (!apierrors.IsForbidden(err) && !apierrors.IsInvalid(err) || !strings.Contains(err.Error(), tc.wantErr)):
				t.Errorf("error %v; want a refusal containing %q", err, tc.wantErr)
			}
		})
	}

	// A change counts like a creation: ana may not edit a portfolio that names the Secret,
	// even one an administrator created.
	if _, err := admin.apply(ctx, withSecret, "gitops", false); err != nil {
		t.Fatalf("admin creates the portfolio: %v", err)
	}
	edited := withSecret.DeepCopy()
	edited.Object["spec"].(map[string]any)["horizon"] = int64(8)
	if _, err := ana.apply(ctx, edited, "gitops", true); err == nil || !strings.Contains(err.Error(), "may not get Secret") {
		t.Errorf("ana's edit of a portfolio naming the Secret: %v; want refused", err)
	}
	if _, err := bo.apply(ctx, edited, "gitops", true); err != nil {
		t.Errorf("bo's edit refused: %v", err)
	}
}

// obj is a namespaced object with extra top-level fields.
func obj(apiVersion, kind, ns, name string, fields map[string]any) *unstructured.Unstructured {
	o := &unstructured.Unstructured{Object: map[string]any{"apiVersion": apiVersion, "kind": kind,
		"metadata": map[string]any{"name": name, "namespace": ns}}}
	for k, v := range fields {
		o.Object[k] = v
	}
	return o
}

// binding grants a Role of ns to a user.
func binding(ns, name, role, user string) *unstructured.Unstructured {
	return obj("rbac.authorization.k8s.io/v1", "RoleBinding", ns, name, map[string]any{
		"roleRef":  map[string]any{"apiGroup": "rbac.authorization.k8s.io", "kind": "Role", "name": role},
		"subjects": []any{map[string]any{"apiGroup": "rbac.authorization.k8s.io", "kind": "User", "name": user}},
	})
}
