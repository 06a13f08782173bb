package tables

import (
	"bytes"
	"reflect"
	"strings"
	"testing"
)

// The kept_features column: written only when a row has features, round-trips in both
// formats, and a row without features reads back as nil.
func TestModelsKeptFeatures(t *testing.T) {
	rows := sampleModels()
	rows[0].Features = map[string][]string{"Lasso": {"covariate:promo_flag", "lag:1", "event:harvest-fair"}}
	rows[2].Features = map[string][]string{"Ridge": {"covariate:price"}, "Lasso": {"covariate:promo_flag"}}
	for _, f := range formats {
		var buf bytes.Buffer
		if err := WriteModels(&buf, f, keys, rows); err != nil {
			t.Fatal(err)
		}
		got, err := ReadModels(bytes.NewReader(buf.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		for i := range rows {
			if !reflect.DeepEqual(got[i].Features, rows[i].Features) {
				t.Errorf("%s row %d: features %v, want %v", f, i, got[i].Features, rows[i].Features)
			}
		}
	}
	var buf bytes.Buffer
	if err := WriteModels(&buf, CSV, keys, rows); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(buf.String(), "\n")
	if !strings.HasSuffix(lines[0], ",notes,kept_features") {
		t.Errorf("header %q, want kept_features last", lines[0])
	}
	// Members sorted (encoding/json sorts map keys), so the bytes do not depend on map order.
	if !strings.Contains(buf.String(), `"{""Lasso"":[""covariate:promo_flag""],""Ridge"":[""covariate:price""]}"`) {
		t.Errorf("row 3 does not carry the sorted JSON object:\n%s", buf.String())
	}
}

func TestModelsKeptFeaturesBroken(t *testing.T) {
	table := "depot,item,model,params,metric,score,notes,kept_features\nnorth,oats,Lasso,,MASE,0.9,,{not json\n"
	_, err := ReadModels(strings.NewReader(table), CSV, keys)
	if err == nil || !strings.Contains(err.Error(), `models row 1 (series "north/oats"): kept_features`) {
		t.Fatalf("err = %v, want the row, series and column named", err)
	}
}
