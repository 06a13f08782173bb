// Package stationarity decides how many differences make a series stationary: the KPSS test of
// level stationarity for first differences (Kwiatkowski, Phillips, Schmidt & Shin 1992) and the
// STL seasonal-strength measure for a seasonal difference (Wang, Smith & Hyndman 2006), the
// rules R forecast 8.20's ndiffs and nsdiffs apply for auto.arima (Hyndman & Khandakar 2008).
package stationarity

import (
	"math"

	"almanac.dev/almanac/trainer/numeric/stl"
)

// KPSS returns the level-stationarity statistic of Kwiatkowski, Phillips, Schmidt & Shin
// (1992, J. Econometrics 54, eqs. 11-14):
//
//	eta = (1/n^2) sum_t S_t^2 / s^2(l),   S_t = sum_{i<=t} (y_i - ybar),
//	s^2(l) = (1/n) sum_t e_t^2 + (2/n) sum_{s=1}^{l} (1 - s/(l+1)) sum_{t=s+1}^{n} e_t e_{t-s}
//
// with e_t = y_t - ybar and Bartlett weights (Newey & West 1987). lags < 0 takes the paper's
// short truncation l = floor(4 (n/100)^{1/4}). It returns NaN for n < 2 or a constant series.
func KPSS(y []float64, lags int) float64 {
	n := len(y)
	if n < 2 {
		return math.NaN()
	}
	if lags < 0 {
		lags = int(math.Floor(4 * math.Pow(float64(n)/100, 0.25)))
	}
	mean := 0.0
	for _, v := range y {
		mean += v
	}
	mean /= float64(n)
	s, sum2, e0 := 0.0, 0.0, 0.0
	for _, v := range y {
		e := v - mean
		s += e
		sum2 += s * s
		e0 += e * e
	}
	lr := e0
	for l := 1; l <= lags && l < n; l++ {
		acc := 0.0
		for t := l; t < n; t++ {
			acc += (y[t] - mean) * (y[t-l] - mean)
		}
		lr += 2 * (1 - float64(l)/float64(lags+1)) * acc
	}
	lr /= float64(n)
	if !(lr > 0) {
		return math.NaN()
	}
	return sum2 / (float64(n) * float64(n) * lr)
}

// KPSSCritical5 is the 5% critical value of the level-stationarity KPSS test (Kwiatkowski et
// al. 1992, Table 1, eta_mu: 0.347 at 10%, 0.463 at 5%, 0.574 at 2.5%, 0.739 at 1%).
const KPSSCritical5 = 0.463

// KPSSLags returns the truncation lag floor(3 sqrt(n) / 13) that Diffs uses: the lag of R
// forecast 8.20's ndiffs (checked by running it: with the paper's floor(4 (n/100)^{1/4}) its
// choices are not reproduced, see test/reference).
func KPSSLags(n int) int { return int(math.Floor(3 * math.Sqrt(float64(n)) / 13)) }

// Diffs returns how many first differences make y level-stationary by the KPSS test at 5%:
// difference while the statistic with KPSSLags exceeds KPSSCritical5, at most maxD times,
// stopping when the differenced series is constant (the rule of Hyndman & Khandakar 2008,
// section 3.2).
func Diffs(y []float64, maxD int) int {
	d := 0
	x := y
	for d < maxD {
		if Constant(x) || len(x) < 3 {
			return d
		}
		if st := KPSS(x, KPSSLags(len(x))); math.IsNaN(st) || st <= KPSSCritical5 {
			return d
		}
		x = diff(x)
		d++
	}
	return d
}

// diff returns the first differences y_t - y_{t-1}, t = 1..n-1.
func diff(y []float64) []float64 {
	w := append([]float64(nil), y...)
	for t := len(w) - 1; t >= 1; t-- {
		w[t] -= w[t-1]
	}
	return w[1:]
}

// Constant reports whether every value of x equals the first (true for an empty x).
func Constant(x []float64) bool {
	for _, v := range x {
		if v != x[0] {
			return false
		}
	}
	return true
}

// SeasonalStrength returns F_S = max(0, min(1, 1 - Var(R) / Var(S + R))) (Wang, Smith &
// Hyndman 2006, Data Min. Knowl. Discov. 13(3); Hyndman & Athanasopoulos, FPP3 section 4.3;
// both from memory) with S and R the seasonal and remainder of STL(y, m) with seasonal span
// seasonalStrengthWindow, no robustness loop and the other spans at their defaults: the
// decomposition R forecast 8.20's nsdiffs uses (seas.heuristic on mstl(x)). Variances have
// the n - 1 denominator. It returns 0 when m < 2 or n <= 2m (STL needs more than two periods).
func SeasonalStrength(y []float64, m int) float64 {
	if m < 2 || len(y) <= 2*m {
		return 0
	}
	d, err := stl.Decompose(y, m, stl.Options{SeasonalWindow: seasonalStrengthWindow})
	if err != nil {
		return 0
	}
	sr := make([]float64, len(y))
	for t := range sr {
		sr[t] = d.Seasonal[t] + d.Remainder[t]
	}
	vr, vsr := variance(d.Remainder), variance(sr)
	if !(vsr > 0) {
		return 0
	}
	return math.Max(0, math.Min(1, 1-vr/vsr))
}

// seasonalStrengthWindow is the STL seasonal span of the seasonal-strength test: R forecast
// 8.20's mstl defaults s.window to 7 + 4 * seq(6) and takes its first element, 11, for a
// series with one season (read from the installed package's R source).
const seasonalStrengthWindow = 11

func variance(x []float64) float64 {
	mean := 0.0
	for _, v := range x {
		mean += v
	}
	mean /= float64(len(x))
	s := 0.0
	for _, v := range x {
		s += (v - mean) * (v - mean)
	}
	return s / float64(len(x)-1)
}

// SeasonalStrengthThreshold is the strength above which one seasonal difference is taken
// (0.64: R forecast 8.20's nsdiffs(x, test = "seas") takes a difference when
// seas.heuristic(x) > 0.64, strictly; read from the installed package's R source).
const SeasonalStrengthThreshold = 0.64

// SeasonalDiffs returns 1 when SeasonalStrength(y, m) exceeds SeasonalStrengthThreshold,
// else 0; 0 as well when m < 2, y is constant or n <= 2m (R forecast 8.20's auto.arima takes
// D = 0 for n <= 2m; its nsdiffs tests at most once for max.D = 1).
func SeasonalDiffs(y []float64, m int) int {
	if m < 2 || len(y) <= 2*m || Constant(y) {
		return 0
	}
	if SeasonalStrength(y, m) > SeasonalStrengthThreshold {
		return 1
	}
	return 0
}
