package stl

import (
	"fmt"
	"math"
	"slices"
)

// MSTL: multiple seasonal-trend decomposition by loess (Bandara, Hyndman & Bergmeir 2021, "MSTL:
// A Seasonal-Trend Decomposition Algorithm for Time Series with Multiple Seasonal Patterns",
// arXiv 2107.13462), in the form of R forecast 8.20's mstl (read from the installed package's R
// source, checked against it in test/reference):
//
//	y_t = T_t + S^(1)_t + ... + S^(K)_t + R_t,   periods p_1 < ... < p_K.

// MSTLOptions are the settings of MSTL. The zero value takes R forecast 8.20's defaults.
type MSTLOptions struct {
	// SeasonalWindows is n_s of the STL fit of each period, shortest period first; missing
	// entries take 7 + 4i for the i-th period (11, 15, 19, ...: mstl's s.window = 7 + 4 *
	// seq(6)).
	SeasonalWindows []int
	// Iterations is how many times every seasonal component is re-estimated; 0 takes 2 when
	// more than one period is given (even if only one is kept) and 1 for one period: mstl
	// iterates twice on a multi-seasonal series and once on a ts with one frequency.
	Iterations int
}

// MSTLDecomposition is y = Trend + sum_i Seasonal[i] + Remainder.
type MSTLDecomposition struct {
	// Periods are the seasonal periods kept, ascending; Seasonal[i] belongs to Periods[i].
	Periods  []float64
	Seasonal [][]float64
	Trend    []float64
	// Remainder is y minus the trend and every seasonal component.
	Remainder []float64
}

// MSTL decomposes y by the seasonal periods given (any order; non-integer periods such as
// 365.25 or 52.18 are allowed). Periods p with n <= 2p (fewer than two full cycles) and p < 2
// are dropped, the rest sorted ascending (mstl drops p >= n/2 with a warning). Then, with
// D = y and S^(i) = 0,
//
//	for j = 1..Iterations, for i = 1..K:
//	    D <- D + S^(i);  S^(i) <- seasonal part of STL(D, p_i, n_s = SeasonalWindows[i]);  D <- D - S^(i)
//
// and T is the trend of the last STL fit, R = D - T. Each STL fit runs on the integer period
// trunc(p_i) (R's stl passes as.integer(frequency) to its Fortran code) with the spans R's stl
// derives from the real period: n_t = nextodd(ceil(1.5 p / (1 - 1.5/n_s))), n_l = nextodd(p)
// (nextodd rounds, then adds one when even). For an integer p these are Decompose's defaults.
//
// It returns an error when no period is left, or for non-finite values.
func MSTL(y []float64, periods []float64, opt MSTLOptions) (MSTLDecomposition, error) {
	n := len(y)
	var kept []float64
	for _, p := range periods {
		if math.IsNaN(p) || math.IsInf(p, 0) {
			return MSTLDecomposition{}, fmt.Errorf("stl: MSTL: period %v is not finite", p)
		}
		if p >= 2 && float64(n) > 2*p {
			kept = append(kept, p)
		}
	}
	if len(kept) == 0 {
		return MSTLDecomposition{}, fmt.Errorf("stl: MSTL: %d observations, no period of %v has more than two full cycles", n, periods)
	}
	slices.Sort(kept)
	kept = slices.Compact(kept)
	iter := opt.Iterations
	if iter <= 0 {
		iter = 2
		if len(periods) == 1 {
			iter = 1
		}
	}
	d := MSTLDecomposition{Periods: kept, Seasonal: make([][]float64, len(kept))}
	for i := range d.Seasonal {
		d.Seasonal[i] = make([]float64, n)
	}
	deseas := append([]float64(nil), y...)
	var last Decomposition
	for range iter {
		for i, p := range kept {
			s := d.Seasonal[i]
			for t := range deseas {
				deseas[t] += s[t]
			}
			sw := 7 + 4*(i+1)
			if i < len(opt.SeasonalWindows) && opt.SeasonalWindows[i] > 0 {
				sw = opt.SeasonalWindows[i]
			}
			o := Options{SeasonalWindow: sw,
				TrendWindow:   nextOdd(math.Ceil(1.5 * p / (1 - 1.5/float64(sw)))),
				LowPassWindow: nextOdd(p)}
			fit, err := Decompose(deseas, int(p), o)
			if err != nil {
				return MSTLDecomposition{}, fmt.Errorf("stl: MSTL: period %v: %w", p, err)
			}
			copy(s, fit.Seasonal)
			for t := range deseas {
				deseas[t] -= s[t]
			}
			last = fit
		}
	}
	d.Trend = last.Trend
	d.Remainder = deseas
	for t := range deseas {
		d.Remainder[t] = deseas[t] - d.Trend[t]
	}
	return d, nil
}

// Adjusted returns the seasonally adjusted series Trend + Remainder (R forecast's seasadj).
func (d MSTLDecomposition) Adjusted() []float64 {
	out := make([]float64, len(d.Trend))
	for t := range out {
		out[t] = d.Trend[t] + d.Remainder[t]
	}
	return out
}

// SeasonalForecast returns the seasonal part of the next h steps: for each period p, the last
// trunc(p) values of its component repeated, summed over the periods (R forecast 8.20's
// forecast.mstl, whose seq_len(p) truncates a non-integer period).
func (d MSTLDecomposition) SeasonalForecast(h int) []float64 {
	out := make([]float64, h)
	for i, p := range d.Periods {
		s := d.Seasonal[i]
		mp := int(p)
		base := len(s) - mp
		for k := range out {
			out[k] += s[base+k%mp]
		}
	}
	return out
}
