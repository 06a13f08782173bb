package reconcile_test

import (
	"fmt"

	"almanac.dev/almanac/trainer/reconcile"
)

// Two depots of Fenwick Lane Provisions and their total: the base forecasts disagree by 2
// (10 versus 3 + 5), and OLS shares the difference equally among the three nodes.
func ExampleReconcile() {
	h := reconcile.Hierarchy{Bottom: 2, Sums: [][]int{{0, 1}}} // total = north + south
	base := [][]float64{{10}, {3}, {5}}                        // total, north, south; one period
	res, err := reconcile.Reconcile(h, base, reconcile.OLS, nil, reconcile.Options{})
	if err != nil {
		panic(err)
	}
	fmt.Printf("total %.4f north %.4f south %.4f\n", res.Forecasts[0][0], res.Forecasts[1][0], res.Forecasts[2][0])
	fmt.Printf("largest deviation %g\n", reconcile.MaxDeviation(h, res.Forecasts))
	// Output:
	// total 9.3333 north 3.6667 south 5.6667
	// largest deviation 0
}
