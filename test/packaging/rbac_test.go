package packaging

import (
	"slices"
	"strings"
	"testing"

	rbacv1 "k8s.io/api/rbac/v1"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/runtime"
)

// The controller's rights come from its +kubebuilder:rbac markers: controller-gen writes them
// to config/rbac/role.yaml (make manifests). The chart keeps its own copy of the rules
// (templates/_helpers.tpl, almanac.managerRules), so these tests compare every install path
// with that file, not with a list kept here.

// grants expands rules into "group/resource verb" strings, one per right granted.
func grants(rules []rbacv1.PolicyRule) []string {
	var out []string
	for _, r := range rules {
		for _, g := range r.APIGroups {
			for _, res := range r.Resources {
				for _, v := range r.Verbs {
					out = append(out, g+"/"+res+" "+v)
				}
			}
		}
	}
	slices.Sort(out)
	return slices.Compact(out)
}

// rulesOf converts a rendered Role or ClusterRole.
func rulesOf(t *testing.T, o *unstructured.Unstructured) []rbacv1.PolicyRule {
	t.Helper()
	if o == nil {
		t.Fatal("role not rendered")
	}
	var role rbacv1.ClusterRole // Role and ClusterRole share the rules field
	if err := runtime.DefaultUnstructuredConverter.FromUnstructured(o.Object, &role); err != nil {
		t.Fatal(err)
	}
	return role.Rules
}

// markerRules are the rules controller-gen derived from the markers.
func markerRules(t *testing.T) []rbacv1.PolicyRule {
	t.Helper()
	objs := readObjects(t, "config/rbac/role.yaml")
	if len(objs) != 1 || objs[0].GetKind() != "ClusterRole" {
		t.Fatalf("config/rbac/role.yaml: want one ClusterRole, got %v", kindsAndNames(objs))
	}
	return rulesOf(t, objs[0])
}

// diffGrants reports rights missing from got and rights got adds.
func diffGrants(t *testing.T, what string, want, got []string) {
	t.Helper()
	for _, w := range want {
		if !slices.Contains(got, w) {
			t.Errorf("%s lacks %s, which the controller's markers ask for", what, w)
		}
	}
	for _, g := range got {
		if !slices.Contains(want, g) {
			t.Errorf("%s grants %s, which the controller's markers do not ask for", what, g)
		}
	}
}

// installs renders every install path.
func installs(t *testing.T) map[string][]*unstructured.Unstructured {
	return map[string][]*unstructured.Unstructured{
		"kustomize":       renderKustomize(t, "config/default"),
		"helm":            mustRenderChart(t, "fenwick", "fenwick-system", nil),
		"helm-namespaced": mustRenderChart(t, "fenwick", "fenwick-system", namespacedValues(t)),
	}
}

func TestManagerRulesMatchMarkers(t *testing.T) {
	want := grants(markerRules(t))
	if len(want) == 0 {
		t.Fatal("config/rbac/role.yaml grants nothing")
	}
	all := installs(t)
	diffGrants(t, "kustomize ClusterRole", want, grants(rulesOf(t, find(all["kustomize"], "ClusterRole", "almanac-manager"))))
	diffGrants(t, "helm ClusterRole", want, grants(rulesOf(t, find(all["helm"], "ClusterRole", "fenwick-manager"))))
	for _, ns := range []string{"depot-north", "depot-south"} {
		diffGrants(t, "helm Role in "+ns, want, grants(rulesOf(t, findIn(all["helm-namespaced"], "Role", ns, "fenwick-manager"))))
	}
}

func TestLeaderElectionRulesAgree(t *testing.T) {
	all := installs(t)
	want := grants(rulesOf(t, find(all["kustomize"], "Role", "almanac-leader-election")))
	for _, name := range []string{"helm", "helm-namespaced"} {
		diffGrants(t, name+" leader-election Role", want, grants(rulesOf(t, find(all[name], "Role", "fenwick-leader-election"))))
	}
}

func TestRBACIsLeastPrivilege(t *testing.T) {
	for name, objs := range installs(t) {
		for _, o := range append(ofKind(objs, "ClusterRole"), ofKind(objs, "Role")...) {
			what := name + " " + o.GetKind() + " " + o.GetName()
			for _, r := range rulesOf(t, o) {
				for _, list := range [][]string{r.APIGroups, r.Resources, r.Verbs} {
					if slices.ContainsFunc(list, func(s string) bool { return strings.Contains(s, "*") }) {
						t.Errorf("%s: wildcard in rule %v", what, r)
					}
				}
				if len(r.NonResourceURLs) > 0 {
					t.Errorf("%s: non-resource URLs %v", what, r.NonResourceURLs)
				}
				// Secrets: no right at all. A missing credentials Secret is learned from the
				// trainer pod's CreateContainerConfigError (controllers/podconfig.go), so
				// the controller can read no Secret of the cluster, not even its metadata.
				if slices.Contains(r.Resources, "secrets") {
					t.Errorf("%s: a rule on secrets (verbs %v); the controller needs none", what, r.Verbs)
				}
			}
		}
	}
}

func TestTrainerServiceAccountHasNoRightsAndNoToken(t *testing.T) {
	for name, objs := range installs(t) {
		trainers := 0
		for _, sa := range ofKind(objs, "ServiceAccount") {
			if sa.GetLabels()["app.kubernetes.io/component"] != "trainer" {
				continue
			}
			trainers++
			if v, found, _ := unstructured.NestedBool(sa.Object, "automountServiceAccountToken"); !found || v {
				t.Errorf("%s: trainer ServiceAccount %s/%s mounts a token", name, sa.GetNamespace(), sa.GetName())
			}
			for _, b := range append(ofKind(objs, "RoleBinding"), ofKind(objs, "ClusterRoleBinding")...) {
				subjects, _, _ := unstructured.NestedSlice(b.Object, "subjects")
				for _, s := range subjects {
					if m, _ := s.(map[string]any); m["name"] == sa.GetName() && m["kind"] == "ServiceAccount" {
						t.Errorf("%s: %s %s binds the trainer ServiceAccount", name, b.GetKind(), b.GetName())
					}
				}
			}
		}
		if trainers == 0 {
			t.Errorf("%s: no trainer ServiceAccount", name)
		}
	}
	// config/default's copy and the per-namespace file must be the same object.
	perNamespace := readObjects(t, "config/rbac/trainer_service_account.yaml")[0]
	inDefault := find(renderKustomize(t, "config/default"), "ServiceAccount", perNamespace.GetName())
	if inDefault == nil {
		t.Fatalf("config/default has no ServiceAccount %s", perNamespace.GetName())
	}
	for _, field := range []string{"automountServiceAccountToken", "secrets", "imagePullSecrets"} {
		if !equalJSON(perNamespace.Object[field], inDefault.Object[field]) {
			t.Errorf("%s: config/rbac has %v, config/default %v", field, perNamespace.Object[field], inDefault.Object[field])
		}
	}
}

func TestManagerSecurityContextAgrees(t *testing.T) {
	all := installs(t)
	kust := find(all["kustomize"], "Deployment", "almanac-controller-manager")
	if kust == nil {
		t.Fatal("config/default has no almanac-controller-manager Deployment")
	}
	wantPod, _, _ := unstructured.NestedMap(kust.Object, "spec", "template", "spec", "securityContext")
	wantContainer := managerContainer(t, kust)["securityContext"]
	// The restricted Pod Security Standard, as a floor for both (the apply test also has the
	// API server's PodSecurity admission check the pods).
	if wantPod["runAsNonRoot"] != true || !equalJSON(wantPod["seccompProfile"], map[string]any{"type": "RuntimeDefault"}) {
		t.Errorf("kustomize pod securityContext %v is not restricted", wantPod)
	}
	if !equalJSON(wantContainer, map[string]any{
		"allowPrivilegeEscalation": false,
		"readOnlyRootFilesystem":   true,
		"capabilities":             map[string]any{"drop": []any{"ALL"}},
	}) {
		t.Errorf("kustomize container securityContext %v is not restricted with a read-only root", wantContainer)
	}
	for _, name := range []string{"helm", "helm-namespaced"} {
		d := find(all[name], "Deployment", "fenwick-controller-manager")
		pod, _, _ := unstructured.NestedMap(d.Object, "spec", "template", "spec", "securityContext")
		if !equalJSON(pod, wantPod) {
			t.Errorf("%s pod securityContext %v, kustomize %v", name, pod, wantPod)
		}
		if c := managerContainer(t, d)["securityContext"]; !equalJSON(c, wantContainer) {
			t.Errorf("%s container securityContext %v, kustomize %v", name, c, wantContainer)
		}
	}
}

// README (GitOps) promises that a sync never fights the controller over a portfolio's spec:
// the controller writes only the status subresource.
func TestControllerNeverWritesPortfolioSpec(t *testing.T) {
	for _, g := range grants(markerRules(t)) {
		res, verb, _ := strings.Cut(g, " ")
		if res == "forecasting.almanac.dev/forecastportfolios" && slices.Contains([]string{"create", "update", "patch", "delete", "deletecollection"}, verb) {
			t.Errorf("the controller's markers grant %s on forecastportfolios; README's GitOps section says it never writes their spec", verb)
		}
	}
}
