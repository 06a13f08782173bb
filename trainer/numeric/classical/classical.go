// Package classical holds classical (moving-average) seasonal decomposition and the seasonality
// test of the M3 and M4 competitions' decomposition benchmarks (Naive2, Theta): multiplicative
// seasonal indices from a centred moving average (Hyndman & Athanasopoulos, FPP3 section 3.4;
// R stats::decompose) and the autocorrelation test of Makridakis & Hibon (2000).
package classical

import (
	"errors"
	"fmt"
	"math"
)

// seasonalCritical is the one-sided 90% normal critical value of the seasonality test, 1.645
// as printed in the M4 benchmark code and used for Naive2/Theta since the M3 competition
// (Makridakis & Hibon 2000). R forecast 8.20's thetaf uses qnorm(0.95) = 1.6448536...; the two
// differ only for a test statistic inside [1.64485, 1.645).
const seasonalCritical = 1.645

// minSeasonIndex is the smallest |index| SeasonalIndices accepts; below it the deseasonalised
// series would blow up, so the series is treated as non-seasonal (the threshold R forecast
// 8.20's thetaf uses, 1e-4).
const minSeasonIndex = 1e-4

// errNonPositiveTrend reports that multiplicative decomposition met a trend value <= 0.
var errNonPositiveTrend = errors.New("classical: multiplicative decomposition needs a positive trend")

// MultiplicativeIndices returns the m seasonal indices of classical multiplicative
// decomposition. idx[j] applies to every observation t (0-based) with t mod m == j, so idx is
// aligned with the start of y, not with a calendar.
//
// Method (Hyndman & Athanasopoulos, FPP3 section 3.4; R stats::decompose):
//
//	trend  T_t = centred moving average of order m; for even m the 2×m MA
//	             T_t = (½y_{t−m/2} + y_{t−m/2+1} + … + y_{t+m/2−1} + ½y_{t+m/2}) / m
//	ratio  R_t = y_t / T_t   (defined for the n − 2⌊m/2⌋ central periods)
//	index  S_j = mean of R_t over t ≡ j (mod m), then S_j ← S_j / (Σ S / m)
//
// so the indices average 1. It needs n >= 2m (panics if m < 2, a misuse) and returns an error
// when n < 2m or a trend value is not positive (multiplicative decomposition needs positive
// data).
func MultiplicativeIndices(y []float64, m int) ([]float64, error) {
	if m < 2 {
		panic(fmt.Sprintf("classical: MultiplicativeIndices needs season length >= 2, got %d", m))
	}
	n := len(y)
	if n < 2*m {
		return nil, fmt.Errorf("classical: decomposition with season length %d needs %d observations, got %d", m, 2*m, n)
	}
	half := m / 2
	even := m%2 == 0
	idx := make([]float64, 2*m)
	count := idx[m:]
	idx = idx[:m:m]
	inv := 1 / float64(m)
	var window float64 // Σ y_j for j in [t−half, t+half]
	for j := 0; j <= 2*half; j++ {
		window += y[j]
	}
	for t := half; t+half < n; t++ {
		if t > half {
			window += y[t+half] - y[t-half-1]
		}
		trend := window
		if even {
			trend -= 0.5 * (y[t-half] + y[t+half])
		}
		trend *= inv
		if !(trend > 0) {
			return nil, errNonPositiveTrend
		}
		j := t % m
		idx[j] += y[t] / trend
		count[j]++
	}
	var total float64
	for j := range idx {
		idx[j] /= count[j]
		total += idx[j]
	}
	scale := float64(m) / total
	for j := range idx {
		idx[j] *= scale
	}
	return idx, nil
}

// SeasonalityTest reports whether y shows seasonality of period m at the 90% level, the test of
// the M3 competition's Naive2 benchmark (Makridakis & Hibon 2000, section on the methods), of R
// forecast's thetaf and of the M4 benchmark code:
//
//	seasonal  ⇔  |r_m| > 1.645 · √((1 + 2 Σ_{k=1}^{m−1} r_k²) / n)
//
// with r_k the sample autocorrelation at lag k (R's acf: deviations from the overall mean,
// denominator Σ (y_t − ȳ)²). The right side is the Bartlett standard error of r_m under the
// hypothesis that autocorrelations beyond lag m−1 are zero.
//
// It requires n >= 3m, as the M4 benchmark code does (common practice; R forecast 8.20's
// thetaf only asks n > 2m). m < 2 and constant series are never seasonal.
func SeasonalityTest(y []float64, m int) bool {
	n := len(y)
	if m < 2 || n < 3*m {
		return false
	}
	var mu float64
	for _, v := range y {
		mu += v
	}
	mu /= float64(n)
	var c0 float64
	for _, v := range y {
		d := v - mu
		c0 += d * d
	}
	if !(c0 > 0) || math.IsInf(c0, 0) {
		return false
	}
	var sum2, rm float64
	for k := 1; k <= m; k++ {
		var ck float64
		for t := k; t < n; t++ {
			ck += (y[t] - mu) * (y[t-k] - mu)
		}
		r := ck / c0
		if k < m {
			sum2 += r * r
		} else {
			rm = r
		}
	}
	return math.Abs(rm) > seasonalCritical*math.Sqrt((1+2*sum2)/float64(n))
}

// SeasonalIndices is the seasonal adjustment the decomposition-based benchmarks share (Naive2,
// Theta): when SeasonalityTest passes it returns the MultiplicativeIndices and true; otherwise
// (not seasonal, n < 3m, a non-positive trend, or an index with |S_j| < 1e-4) it returns nil and
// false and the caller models y unadjusted.
func SeasonalIndices(y []float64, m int) (idx []float64, seasonal bool) {
	if !SeasonalityTest(y, m) {
		return nil, false
	}
	return UsableIndices(y, m)
}

// UsableIndices returns the MultiplicativeIndices of y and true when they can adjust y: false
// and nil when n < 2m, a trend value is not positive or an index has |S_j| < 1e-4 (R forecast
// 8.20's thetaf guard). It does not test for seasonality; SeasonalIndices does.
func UsableIndices(y []float64, m int) (idx []float64, ok bool) {
	idx, err := MultiplicativeIndices(y, m)
	if err != nil {
		return nil, false
	}
	for _, s := range idx {
		if !(math.Abs(s) >= minSeasonIndex) {
			return nil, false
		}
	}
	return idx, true
}

// Deseasonalize writes y_t / idx[t mod m] into dst (len(dst) == len(y)).
func Deseasonalize(dst, y, idx []float64) {
	m := len(idx)
	for t, v := range y {
		dst[t] = v / idx[t%m]
	}
}
