package v1alpha1_test

import (
	"os"
	"path/filepath"
	"sort"
	"testing"

	"github.com/google/go-cmp/cmp"
	apiextensionsv1 "k8s.io/apiextensions-apiserver/pkg/apis/apiextensions/v1"
	"sigs.k8s.io/yaml"

	"almanac.dev/almanac/trainer/models"
)

// TestModelFamiliesMatchTheZoo keeps the API's family enum (from the generated CRD) and the
// trainer's model registry in step: a family the API accepts must be one the trainer can build,
// and a family the trainer registers must be declarable. The list is written in two places (the
// API may not import the trainer), so this test is what ties them together.
func TestModelFamiliesMatchTheZoo(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "config", "crd", "bases", "forecasting.almanac.dev_forecastportfolios.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	var crd apiextensionsv1.CustomResourceDefinition
	if err := yaml.Unmarshal(b, &crd); err != nil {
		t.Fatal(err)
	}
	family := crd.Spec.Versions[0].Schema.OpenAPIV3Schema.Properties["spec"].Properties["models"].Items.Schema.Properties["family"]
	var api []string
	for _, v := range family.Enum {
		var s string
		if err := yaml.Unmarshal(v.Raw, &s); err != nil {
			t.Fatal(err)
		}
		api = append(api, s)
	}
	sort.Strings(api)
	if diff := cmp.Diff(api, models.Families()); diff != "" {
		t.Errorf("API family enum vs registered trainer families (-api,+trainer):\n%s", diff)
	}
}
