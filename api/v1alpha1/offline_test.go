package v1alpha1_test

import (
	"encoding/json"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"

	"github.com/google/go-cmp/cmp"
	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	apierrors "k8s.io/apimachinery/pkg/api/errors"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"k8s.io/apimachinery/pkg/runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/yaml"

	"almanac.dev/almanac/api/offline"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// Offline validation (api/offline, `almanac-trainer validate`) must accept what this apiserver
// accepts, with the same defaults, and refuse what it refuses, for the same fields. The table in
// validation_test.go checks every invalid case both ways (expectOfflineRefusesSameFields); this
// file checks the valid objects, the samples and api/offline's test files.

// strict is kubectl's default field validation: unknown fields are refused, not dropped.
var strict = client.FieldValidation("Strict")

var unknownFieldRE = regexp.MustCompile(`unknown field "([^"]+)"`)

// apiserverFields lists the fields an apiserver refusal names: the causes of an Invalid error,
// or the unknown fields of a strict decoding error.
func apiserverFields(err error) []string {
	var fields []string
	if status, ok := err.(apierrors.APIStatus); ok && status.Status().Details != nil {
		for _, c := range status.Status().Details.Causes {
			fields = append(fields, c.Field)
		}
	}
	if len(fields) == 0 {
		for _, m := range unknownFieldRE.FindAllStringSubmatch(err.Error(), -1) {
			fields = append(fields, m[1])
		}
	}
	slices.Sort(fields)
	return fields
}

func offlineLoad(u *unstructured.Unstructured) ([]offline.Object, error) {
	b, err := json.Marshal(u.Object)
	Expect(err).NotTo(HaveOccurred())
	return offline.Load(u.GetName()+".json", b)
}

// expectOfflineRefusesSameFields checks that api/offline refuses the object the apiserver
// refused with apiErr, for the same fields. The apiserver stops at unknown fields; offline
// validation goes on to list the rest too, so there only the unknown fields are compared.
func expectOfflineRefusesSameFields(u *unstructured.Unstructured, apiErr error) {
	GinkgoHelper()
	objs, err := offlineLoad(u)
	Expect(objs).To(BeEmpty(), "offline validation accepted what the apiserver refused: %v", apiErr)
	var refused *offline.Error
	Expect(err).To(BeAssignableToTypeOf(refused), "%v", err)
	refused = err.(*offline.Error)
	var got []string
	strictOnly := apierrors.IsBadRequest(apiErr) && strings.Contains(apiErr.Error(), "strict decoding error")
	for _, f := range refused.Fields() {
		if !strictOnly || strings.HasPrefix(f.Detail, "unknown field") {
			got = append(got, f.Field)
		}
	}
	slices.Sort(got)
	Expect(got).To(Equal(apiserverFields(apiErr)), "apiserver: %v\noffline: %v", apiErr, err)
}

// expectSameAsApiserver creates u (dry run, strict) and checks that offline validation accepts
// it and defaults it to the spec the apiserver would store.
func expectSameAsApiserver(u *unstructured.Unstructured) {
	GinkgoHelper()
	objs, err := offlineLoad(u)
	Expect(err).NotTo(HaveOccurred())
	Expect(objs).To(HaveLen(1))
	created := u.DeepCopy()
	Expect(k8sClient.Create(ctx, created, client.DryRunAll, strict)).To(Succeed())
	switch u.GetKind() {
	case "ForecastPortfolio":
		var want forecastingv1alpha1.ForecastPortfolio
		Expect(runtime.DefaultUnstructuredConverter.FromUnstructured(created.Object, &want)).To(Succeed())
		Expect(cmp.Diff(want.Spec, objs[0].Portfolio.Spec)).To(BeEmpty(), "%s: apiserver (-) and offline (+) specs differ", u.GetName())
	case "ForecastRun":
		var want forecastingv1alpha1.ForecastRun
		Expect(runtime.DefaultUnstructuredConverter.FromUnstructured(created.Object, &want)).To(Succeed())
		Expect(cmp.Diff(want.Spec, objs[0].Run.Spec)).To(BeEmpty(), "%s: apiserver (-) and offline (+) specs differ", u.GetName())
	default:
		Fail("unexpected kind " + u.GetKind())
	}
}

// readManifests reads every document of a YAML file as unstructured objects.
func readManifests(file string) []*unstructured.Unstructured {
	b, err := os.ReadFile(file)
	Expect(err).NotTo(HaveOccurred())
	var out []*unstructured.Unstructured
	for _, doc := range strings.Split(string(b), "\n---\n") {
		u := &unstructured.Unstructured{}
		Expect(yaml.Unmarshal([]byte(doc), &u.Object)).To(Succeed(), file)
		if len(u.Object) > 0 {
			out = append(out, u)
		}
	}
	return out
}

var _ = Describe("Offline validation (api/offline) against the apiserver", func() {
	It("accepts the valid objects with the apiserver's defaults", func() {
		full := validPortfolio("offline-features")
		withFeatures(map[string]any{"lags": []any{int64(1), int64(52)}, "windows": []any{int64(4)}, "windowStatistics": []any{"Mean"},
			"selection": map[string]any{"filter": "Correlation", "filterKeep": int64(12), "maxFeatures": int64(8)}})(full)
		combined := validPortfolio("offline-combine")
		set(combined, map[string]any{"top": int64(2)}, "spec", "selection", "combine")
		for _, u := range []*unstructured.Unstructured{validPortfolio("offline-minimal"), full, combined, validRun("offline-run")} {
			expectSameAsApiserver(u)
		}
	})

	It("accepts every sample with the apiserver's defaults", func() {
		files, err := filepath.Glob(filepath.Join(repoRoot, "config", "samples", "forecasting_*.yaml"))
		Expect(err).NotTo(HaveOccurred())
		Expect(files).NotTo(BeEmpty())
		for _, f := range files {
			for _, u := range readManifests(f) {
				u.SetName(u.GetName() + "-offline") // another test creates the samples themselves
				expectSameAsApiserver(u)
			}
		}
	})

	It("refuses api/offline's test files for the fields the apiserver refuses", func() {
		files, err := filepath.Glob(filepath.Join(repoRoot, "api", "offline", "testdata", "*.yaml"))
		Expect(err).NotTo(HaveOccurred())
		Expect(len(files)).To(BeNumerically(">=", 4))
		for _, f := range files {
			for _, u := range readManifests(f) {
				u.SetNamespace("default")
				err := k8sClient.Create(ctx, u.DeepCopy(), client.DryRunAll, strict)
				Expect(err).To(HaveOccurred(), "the apiserver accepted %s", f)
				GinkgoWriter.Printf("%s: %v\n", filepath.Base(f), err)
				expectOfflineRefusesSameFields(u, err)
			}
		}
	})
})
