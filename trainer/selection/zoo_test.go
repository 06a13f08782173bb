package selection

import (
	"reflect"
	"slices"
	"testing"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// DefaultZoo adds the pooled Ridge for hourly data only, after every member of Zoo() (the order
// the deciding runs had; PROJECT-NOTES.md, sixteenth session), and is Zoo() elsewhere.
func TestDefaultZoo(t *testing.T) {
	all, err := Zoo()
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range series.Frequencies {
		got := DefaultZoo(f)
		if f != series.Hourly {
			if !reflect.DeepEqual(got, all) {
				t.Errorf("%s: DefaultZoo is not Zoo()", f)
			}
			continue
		}
		if len(got) != len(all)+1 || !reflect.DeepEqual(got[:len(all)], all) {
			t.Fatalf("hourly: %d members, want Zoo()'s %d and one more after them", len(got), len(all))
		}
		p := got[len(all)]
		if p.Family != models.FamilyRidge || p.DisplayName() != PooledRidgeName || p.Regression == nil || !p.Regression.AcrossShard || p.Features != nil {
			t.Errorf("hourly: last member %+v, want the pooled Ridge without declared features", p)
		}
		if err := (Config{Horizon: 48, Zoo: got}).Validate(); err != nil {
			t.Errorf("hourly: %v", err)
		}
	}
	if slices.ContainsFunc(all, func(sp models.Spec) bool { return sp.Family == models.FamilyRidge }) {
		t.Error("Zoo() holds a Ridge member: Ridge is taken by name only")
	}
}
