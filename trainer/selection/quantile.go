package selection

import (
	"math"
	"sort"
)

// smallSample is N0 in the shrinkage of empiricalQuantiles.
const smallSample = 20

// empiricalQuantiles returns Quantiles[j][k] for a model without a predictive distribution,
// from backtest errors errs[i][k] = actual − forecast (origin i, step k+1, for the first H'
// steps) and the final fit's one-step in-sample residuals resid (NaN entries ignored):
//
//  1. Spread per step: s_k = sqrt(mean_i errs[i][k]²). Past the backtest horizon H', or when
//     there are no backtest errors (then s_1 is the RMS of resid), the spread grows as
//     s_k = s_last · sqrt(k / last), the random-walk rule (Hyndman & Athanasopoulos, FPP 3rd ed.,
//     section 5.5, naive-method standard deviation; common practice for other models).
//  2. Shape: the errors are standardized, u = e / s_k, and pooled over steps together with the
//     standardized in-sample residuals, N values in all. c_emp(p) is their sample quantile
//     (Hyndman & Fan 1996, "Sample quantiles in statistical packages", definition 7).
//  3. Few errors: c(p) = w·c_emp(p) + (1 − w)·z_p with w = N / (N + 20), shrinking towards the
//     standard normal quantile z_p, and the result is widened by sqrt(1 + 1/N), the allowance
//     for a spread estimated from N points in the classical prediction interval (common practice;
//     the shrinkage weight is this project's own rule).
//  4. q_jk = mean_k + s_k · c(p_j).
//
// Every step is increasing in p, so the quantiles never cross. When every spread is 0 (a perfect
// backtest, e.g. a constant series) the quantiles equal the mean.
func empiricalQuantiles(mean []float64, levels []float64, errs [][]float64, resid []float64) [][]float64 {
	h := len(mean)
	if len(levels) == 0 {
		return nil
	}
	hb := 0
	if len(errs) > 0 {
		hb = len(errs[0])
	}
	s := make([]float64, h)
	var pool []float64
	for k := 0; k < min(hb, h); k++ {
		ss := 0.0
		for i := range errs {
			ss += errs[i][k] * errs[i][k]
		}
		s[k] = math.Sqrt(ss / float64(len(errs)))
	}
	// in-sample residual spread
	var rs []float64
	for _, r := range resid {
		if !math.IsNaN(r) && !math.IsInf(r, 0) {
			rs = append(rs, r)
		}
	}
	sr := rms(rs)
	last := min(hb, h) - 1
	if last < 0 {
		s[0] = sr
		last = 0
	}
	for k := last + 1; k < h; k++ {
		s[k] = s[last] * math.Sqrt(float64(k+1)/float64(last+1))
	}
	for k := 0; k < min(hb, h); k++ {
		if s[k] > 0 {
			for i := range errs {
				pool = append(pool, errs[i][k]/s[k])
			}
		}
	}
	if sr > 0 {
		for _, r := range rs {
			pool = append(pool, r/sr)
		}
	}
	out := make([][]float64, len(levels))
	sort.Float64s(pool)
	n := float64(len(pool))
	for j, p := range levels {
		c := normalQuantile(p)
		if len(pool) > 0 {
			w := n / (n + smallSample)
			c = (w*sampleQuantile(pool, p) + (1-w)*c) * math.Sqrt(1+1/n)
		}
		q := make([]float64, h)
		for k := range q {
			q[k] = mean[k] + s[k]*c
		}
		out[j] = q
	}
	return out
}

func rms(x []float64) float64 {
	if len(x) == 0 {
		return 0
	}
	ss := 0.0
	for _, v := range x {
		ss += v * v
	}
	return math.Sqrt(ss / float64(len(x)))
}

// sampleQuantile is definition 7 of Hyndman & Fan (1996) (R's default) on sorted x:
// h = (n−1)p, Q = x[⌊h⌋] + (h − ⌊h⌋)(x[⌊h⌋+1] − x[⌊h⌋]).
func sampleQuantile(sorted []float64, p float64) float64 {
	h := float64(len(sorted)-1) * p
	lo := int(math.Floor(h))
	if lo >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	return sorted[lo] + (h-float64(lo))*(sorted[lo+1]-sorted[lo])
}

// normalQuantile is the standard normal quantile z_p = sqrt(2)·erfinv(2p − 1).
func normalQuantile(p float64) float64 { return math.Sqrt2 * math.Erfinv(2*p-1) }
