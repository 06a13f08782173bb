package features

import (
	"reflect"
	"slices"
	"testing"

	"almanac.dev/almanac/trainer/series"
)

// The pooled set for hourly data is the one fixed before the deciding runs (PROJECT-NOTES.md,
// sixteenth session), written out here by hand; every other frequency takes Defaults.
func TestPooledDefaults(t *testing.T) {
	c := PooledDefaults(series.Hourly)
	if err := c.Validate(); err != nil {
		t.Fatal(err)
	}
	if want := []int{1, 2, 3, 23, 24, 25, 47, 48, 72, 96, 120, 144, 167, 168, 169, 336}; !slices.Equal(c.Lags, want) {
		t.Errorf("lags %v, want %v", c.Lags, want)
	}
	if want := []FourierTerm{{Period: 24, Order: 4}, {Period: 168, Order: 4}}; !slices.Equal(c.Fourier, want) {
		t.Errorf("Fourier %v, want %v", c.Fourier, want)
	}
	if !slices.Equal(c.Windows, []int{24, 168}) || !slices.Equal(c.Stats, []string{StatMean}) {
		t.Errorf("windows %v stats %v, want [24 168] [mean]", c.Windows, c.Stats)
	}
	if c.Selection != (Selection{Filter: FilterNone, Embedded: EmbeddedNone}) || len(c.Calendar) != 0 {
		t.Errorf("selection %+v calendar %v: want every column kept and no calendar dummies", c.Selection, c.Calendar)
	}
	for _, f := range series.Frequencies {
		if f != series.Hourly && !reflect.DeepEqual(PooledDefaults(f), Defaults(f)) {
			t.Errorf("%s: PooledDefaults differs from Defaults", f)
		}
	}
}
