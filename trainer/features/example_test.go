package features_test

import (
	"fmt"
	"time"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/series"
)

// The row for origin 3, step 1 of a monthly series starting January 2026 describes April 2026
// from the first three months: the April dummy, the previous value (lag1 = y[2] = 30) and the
// mean of the last two values ((20 + 30)/2 = 25).
func ExampleSet_Fill() {
	cfg := features.Config{Calendar: []string{features.Month}, Lags: []int{1}, Windows: []int{2}, Stats: []string{features.StatMean}}
	set, err := features.NewSet(cfg, features.Source{Key: "fenwick/oats/bristol", Start: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC), Freq: series.Monthly})
	if err != nil {
		panic(err)
	}
	y := []float64{10, 20, 30, 999} // y[3] lies at the origin and is never read
	cols := set.Columns(1)
	row := make([]float64, len(cols))
	if err := set.Fill(row, cols, y, 3, 1); err != nil {
		panic(err)
	}
	for k, j := range cols {
		if row[k] != 0 {
			fmt.Printf("%s = %g\n", set.Names()[j], row[k])
		}
	}
	// Output:
	// month:Apr = 1
	// lag1 = 30
	// rolling2:mean = 25
}
