package models

import "math"

// The usual region for the smoothing weights (HKOS 2008 section 10.1, "usual" constraints; the
// numeric limits are those of R forecast 8.x ets(), lower = 1e-4, upper = 0.9999, phi in
// [0.8, 0.98]):
//
//	1e-4 <= alpha <= 0.9999
//	1e-4 <= beta  <= alpha
//	1e-4 <= gamma <= 1 - alpha
//	0.8  <= phi   <= 0.98
const (
	etsLower    = 1e-4
	etsUpper    = 0.9999
	etsPhiLower = 0.8
	etsPhiUpper = 0.98
)

// etsUsual reports whether the smoothing weights lie in the usual region above. Weights the form
// does not have are ignored.
func etsUsual(alpha, beta, gamma, phi float64, trend, season int8) bool {
	if !(alpha >= etsLower && alpha <= etsUpper) {
		return false
	}
	if trend != etsNone && !(beta >= etsLower && beta <= etsUpper && beta <= alpha) {
		return false
	}
	if season != etsNone && !(gamma >= etsLower && gamma <= etsUpper && gamma <= 1-alpha) {
		return false
	}
	if trend == etsDamped && !(phi >= etsPhiLower && phi <= etsPhiUpper) {
		return false
	}
	return true
}

// etsAdmissible reports whether the linear part of a seasonal form is forecastable: all roots of
// the characteristic polynomial of the discount matrix D = F - g w' lie inside the unit circle
// (HKOS 2008 section 10.2 and Hyndman, Akram & Archibald 2008, "The admissible parameter space
// for exponential smoothing models", AISM 60, Table 1). For seasonal forms the polynomial in z is
//
//	P(z) = phi (1 - alpha - gamma) + (alpha + beta - alpha phi + gamma - 1) z
//	       + sum_{j=2}^{m-1} (alpha + beta - alpha phi) z^j + (alpha + beta - phi) z^m + z^{m+1}
//
// with phi = 1 and beta = 0 where the form has no damping or no trend. Inside the usual region
// (etsUsual) the closed-form inequalities of the same table always hold, and so do the
// non-seasonal conditions, so only this root test is needed. poly is scratch of length >= 2(m+2).
//
// The root test is the Schur-Cohn step-down recursion (common practice; e.g. Jury, "Theory
// and Application of the z-Transform Method", 1964): a real polynomial of degree d has all
// roots strictly inside the unit circle iff |a_0| < |a_d| and the degree-(d-1) polynomial with
// coefficients a_d a_{i+1} - a_0 a_{d-1-i} has the same property.
func etsAdmissible(alpha, beta, gamma, phi float64, m int, trend, season int8, poly []float64) bool {
	if season == etsNone || m < 2 {
		return true
	}
	if trend != etsDamped {
		phi = 1
	}
	if trend == etsNone {
		beta = 0
	}
	d := m + 1
	c, tmp := poly[:d+1], poly[d+1:2*d+2]
	c[0] = phi * (1 - alpha - gamma)
	c[1] = alpha + beta - alpha*phi + gamma - 1
	for j := 2; j < m; j++ {
		c[j] = alpha + beta - alpha*phi
	}
	c[m] = alpha + beta - phi
	c[m+1] = 1
	return schurStable(c, tmp)
}

// schurStable reports whether every root of sum_i c[i] z^i lies strictly inside the unit circle
// (with a relative slack of 1e-10 on the step-down test). It overwrites c; tmp is scratch of the
// same length.
func schurStable(c, tmp []float64) bool {
	for d := len(c) - 1; d >= 1; d-- {
		a0, ad := c[0], c[d]
		if !(math.Abs(a0) < math.Abs(ad)*(1+1e-10)) {
			return false
		}
		big := 0.0
		for i := 0; i < d; i++ {
			v := ad*c[i+1] - a0*c[d-1-i]
			tmp[i] = v
			if av := math.Abs(v); av > big {
				big = av
			}
		}
		if big == 0 || math.IsNaN(big) {
			return false
		}
		for i := 0; i < d; i++ {
			c[i] = tmp[i] / big
		}
	}
	return true
}
