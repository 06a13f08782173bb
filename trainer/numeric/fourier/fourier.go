// Package fourier builds Fourier terms, the sine and cosine pairs that model a seasonal cycle of
// any period, integer or not, with few parameters (Hyndman & Athanasopoulos, Forecasting:
// Principles and Practice, 2nd ed., sections 5.4 and 9.5, from memory):
//
//	s_k(t) = sin(2 pi k t / p),   c_k(t) = cos(2 pi k t / p),   k = 1..K, 2K <= p,
//
// in the form of R forecast 8.20's fourier (read from the installed package's R source; checked
// against it in test/reference): frequencies k/p repeated across periods are kept once (for
// p = 24 and 168, k = 7 of the week is k = 1 of the day), the sine of k = p/2 (identically 0) is
// left out, and sin(pi x), cos(pi x) are computed as R's sinpi and cospi, reducing x modulo 2
// first so that whole and half turns are exact.
package fourier

import (
	"fmt"
	"math"
)

// Term is one column: Sin or cosine of 2 pi K t / Period.
type Term struct {
	Period float64
	K      int
	Sin    bool
}

// Name is "S<k>-<p>" or "C<k>-<p>" with p rounded, R's column labels.
func (t Term) Name() string {
	c := "C"
	if t.Sin {
		c = "S"
	}
	return fmt.Sprintf("%s%d-%d", c, t.K, int(math.Round(t.Period)))
}

// Terms lists the columns for K[i] pairs of periods[i], in R's order: per period, k = 1..K,
// sine then cosine. It returns an error when 2 K[i] > periods[i] or the lengths differ.
func Terms(periods []float64, K []int) ([]Term, error) {
	if len(periods) != len(K) {
		return nil, fmt.Errorf("fourier: %d periods but %d orders", len(periods), len(K))
	}
	var out []Term
	seen := map[float64]bool{}
	for i, p := range periods {
		if K[i] < 0 || float64(2*K[i]) > p {
			return nil, fmt.Errorf("fourier: order %d for period %v: want 0 to %v", K[i], p, math.Floor(p/2))
		}
		for k := 1; k <= K[i]; k++ {
			f := float64(k) / p
			if seen[f] {
				continue
			}
			seen[f] = true
			if math.Abs(2*f-math.Round(2*f)) > 0x1p-52 {
				out = append(out, Term{Period: p, K: k, Sin: true})
			}
			out = append(out, Term{Period: p, K: k})
		}
	}
	return out, nil
}

// At returns the term's value at time t (R's fourier uses t = 1..n in sample and n+1..n+h
// ahead).
func (t Term) At(time float64) float64 {
	x := 2 * (float64(t.K) / t.Period) * time
	if t.Sin {
		return sinpi(x)
	}
	return cospi(x)
}

// sinpi is sin(pi x) as R 4.2's sinpi computes it (nmath/cospi.c, from memory of its
// structure): reduce x modulo 2 into (-1, 1], exact at multiples of 1/2.
func sinpi(x float64) float64 {
	x = math.Mod(x, 2)
	if x <= -1 {
		x += 2
	} else if x > 1 {
		x -= 2
	}
	switch x {
	case 0, 1:
		return 0
	case 0.5:
		return 1
	case -0.5:
		return -1
	}
	return math.Sin(math.Pi * x)
}

// cospi is cos(pi x) as R 4.2's cospi computes it: reduce |x| modulo 2, exact at multiples of
// 1/2.
func cospi(x float64) float64 {
	x = math.Mod(math.Abs(x), 2)
	if math.Mod(x, 1) == 0.5 {
		return 0
	}
	switch x {
	case 1:
		return -1
	case 0:
		return 1
	}
	return math.Cos(math.Pi * x)
}
