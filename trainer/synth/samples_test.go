package synth

import (
	"os"
	"path/filepath"
	"slices"
	"testing"

	"sigs.k8s.io/yaml"
)

// The samples in config/samples read generated weekly data without mapping edits: every column
// a sample's source.columns names is one generate writes for the sample's scenario (the
// promotion sample has a price covariate), and the samples' key columns are item and depot.
func TestSamplesReadGeneratedColumns(t *testing.T) {
	files, err := filepath.Glob("../../config/samples/forecasting_v1alpha1_forecastportfolio*.yaml")
	if err != nil || len(files) == 0 {
		t.Fatalf("no portfolio samples found (%v)", err)
	}
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		var fp struct {
			Spec struct {
				Source struct {
					Frequency string `json:"frequency"`
					Columns   struct {
						Series     []string `json:"series"`
						Date       string   `json:"date"`
						Value      string   `json:"value"`
						Covariates []string `json:"covariates"`
					} `json:"columns"`
				} `json:"source"`
			} `json:"spec"`
		}
		if err := yaml.Unmarshal(b, &fp); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		c := fp.Spec.Source.Columns
		o := Options{Frequency: Weekly}
		if slices.Contains(c.Covariates, ColPrice) {
			o.Scenario = ScenarioPromotions
		}
		if fp.Spec.Source.Frequency != "Weekly" {
			t.Errorf("%s: frequency %q; this test assumes the samples are weekly", f, fp.Spec.Source.Frequency)
		}
		written := o.ColumnsOf()
		mapped := append(append(slices.Clone(c.Series), c.Date, c.Value), c.Covariates...)
		for _, col := range mapped {
			if !slices.Contains(written, col) {
				t.Errorf("%s maps column %q; generate --frequency Weekly writes %q", filepath.Base(f), col, written)
			}
		}
		if !slices.Equal(c.Series, []string{ColItem, ColDepot}) {
			t.Errorf("%s: key columns %q, want item, depot", filepath.Base(f), c.Series)
		}
	}
}
