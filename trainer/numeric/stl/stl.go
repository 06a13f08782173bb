// Package stl decomposes a series into seasonal, trend and remainder components by STL,
// seasonal-trend decomposition by loess (Cleveland, Cleveland, McRae & Terpenning 1990, "STL: A
// Seasonal-Trend Decomposition Procedure Based on Loess", Journal of Official Statistics 6(1),
// 3-73):
//
//	y_t = S_t + T_t + R_t.
//
// The paper's notation: n_p the period, n_s, n_l, n_t the seasonal, low-pass and trend
// smoothing spans, n_i and n_o the inner and outer iteration counts. The section references
// below are from memory; the arithmetic is checked against R's stats::stl and statsmodels' STL
// in test/reference.
package stl

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// LoessDegree is the degree of a local fit in STL: constant or linear.
type LoessDegree int8

const (
	// LoessDefault takes the component's default: constant for the seasonal smoother, linear
	// for the trend, the trend's degree for the low-pass filter (the paper's recommendations;
	// R's stats::stl defaults).
	LoessDefault LoessDegree = iota
	// LoessConstant is a locally constant (weighted mean) fit.
	LoessConstant
	// LoessLinear is a locally linear fit.
	LoessLinear
)

// Options are the smoothing parameters of STL. The zero value of a field takes its default.
type Options struct {
	// Periodic makes the seasonal component the same in every period: the cycle-subseries are
	// smoothed with an infinite span (10n + 1) and degree 0, and the final seasonal values
	// are averaged per position in the period (as R's stats::stl does for
	// s.window = "periodic"). SeasonalWindow and SeasonalDegree are then ignored.
	Periodic bool
	// SeasonalWindow is n_s, the span (in periods) of the cycle-subseries smoother; odd,
	// at least 7 recommended by the paper. Required unless Periodic.
	SeasonalWindow int
	// SeasonalDegree defaults to LoessConstant.
	SeasonalDegree LoessDegree
	// TrendWindow is n_t; the default is the smallest odd integer >= 1.5 n_p / (1 - 1.5/n_s)
	// (the paper's recommendation, in R's form nextodd(ceiling(...))).
	TrendWindow int
	// TrendDegree defaults to LoessLinear.
	TrendDegree LoessDegree
	// LowPassWindow is n_l; the default is the smallest odd integer >= n_p.
	LowPassWindow int
	// LowPassDegree defaults to TrendDegree.
	LowPassDegree LoessDegree
	// SeasonalJump, TrendJump and LowPassJump: each smoother is evaluated at every jump-th
	// point and interpolated linearly in between (the paper's computational shortcut); the
	// default is ceil(span/10), 1 evaluates at every point.
	SeasonalJump, TrendJump, LowPassJump int
	// Robust adds the outer loop: bisquare robustness weights from the remainder.
	Robust bool
	// Inner is n_i (default 2, or 1 when Robust); Outer is n_o (default 0, or 15 when
	// Robust; ignored when not Robust).
	Inner, Outer int
}

// Decomposition is y = Seasonal + Trend + Remainder, with the robustness weights of the
// last outer pass (all 1 without the outer loop).
type Decomposition struct {
	Seasonal, Trend, Remainder, Weights []float64
	// Options are the options used, defaults filled in.
	Options Options
}

// resolve fills in the defaults of o for n observations of period m and checks it.
func resolve(o Options, n, m int) (Options, error) {
	if o.Periodic {
		o.SeasonalWindow = 10*n + 1
		o.SeasonalDegree = LoessConstant
	}
	if o.SeasonalWindow <= 0 {
		return o, errors.New("stl: SeasonalWindow must be positive unless Periodic")
	}
	if o.SeasonalDegree == LoessDefault {
		o.SeasonalDegree = LoessConstant
	}
	if o.TrendDegree == LoessDefault {
		o.TrendDegree = LoessLinear
	}
	if o.LowPassDegree == LoessDefault {
		o.LowPassDegree = o.TrendDegree
	}
	for _, d := range []LoessDegree{o.SeasonalDegree, o.TrendDegree, o.LowPassDegree} {
		if d != LoessConstant && d != LoessLinear {
			return o, fmt.Errorf("stl: loess degree %d is neither constant nor linear", d)
		}
	}
	if o.TrendWindow <= 0 {
		o.TrendWindow = nextOdd(math.Ceil(1.5 * float64(m) / (1 - 1.5/float64(o.SeasonalWindow))))
	}
	if o.LowPassWindow <= 0 {
		o.LowPassWindow = nextOdd(float64(m))
	}
	if o.SeasonalJump <= 0 {
		o.SeasonalJump = (o.SeasonalWindow + 9) / 10
	}
	if o.TrendJump <= 0 {
		o.TrendJump = (o.TrendWindow + 9) / 10
	}
	if o.LowPassJump <= 0 {
		o.LowPassJump = (o.LowPassWindow + 9) / 10
	}
	if o.Inner <= 0 {
		o.Inner = 2
		if o.Robust {
			o.Inner = 1
		}
	}
	if !o.Robust {
		o.Outer = 0
	} else if o.Outer <= 0 {
		o.Outer = 15
	}
	return o, nil
}

// nextOdd rounds x and adds one when the result is even.
func nextOdd(x float64) int {
	k := int(math.Round(x))
	if k%2 == 0 {
		k++
	}
	return k
}

// oddSpan returns max(3, s), plus one when even (spans are odd and at least 3).
func oddSpan(s int) int {
	s = max(3, s)
	if s%2 == 0 {
		s++
	}
	return s
}

// Decompose decomposes y (period m >= 2, more than two full periods: len(y) > 2m) into seasonal,
// trend and remainder by the procedure of Cleveland et al. (1990). Each inner pass
// k = 1..n_i, from the trend T (0 at the start) and robustness weights rho (1 at the start):
//
//  1. detrend: y - T;
//  2. smooth each cycle-subseries (the values at one position in the period) by loess of
//     span n_s, extended one period before and after: C, of length n + 2 n_p;
//  3. low-pass filter C: moving averages of length n_p, n_p and 3, then loess of span n_l: L;
//  4. S = C[n_p : n_p+n] - L (the seasonal component, with its low-frequency part removed);
//  5. deseasonalise: y - S;
//  6. T = loess of span n_t of y - S.
//
// Steps 2 and 6 weight each point by rho. The outer loop (n_o passes when Robust) sets
// rho_t = B(|R_t| / (6 median|R|)) from the remainder R = y - S - T, with the bisquare
// B(u) = (1 - u^2)^2 for u < 1, else 0.
//
// The loess and its interpolation between jumps follow the paper as R's stats::stl computes
// them (checked against R 4.2.2 in test/reference): tricube neighbourhood weights
// (1 - (d/h)^3)^3 with h the distance to the farther end of the span (plus (span - n)/2,
// integer division, when the span exceeds the data), and the point's own value kept when
// every weight is zero. The median is the mean of the two middle order statistics, as in
// statsmodels 0.13.5; R 4.2.2's partial sort returns a wrong lower middle value in some
// outer passes when n is even, so robust fits of even length differ from R's (see
// test/reference/r/stl.R).
//
// It returns an error for bad options, too short a series or non-finite values.
func Decompose(y []float64, m int, opt Options) (Decomposition, error) {
	n := len(y)
	if m < 2 {
		return Decomposition{}, fmt.Errorf("stl: period %d is below 2", m)
	}
	if n <= 2*m {
		return Decomposition{}, fmt.Errorf("stl: %d observations, need more than two periods (%d)", n, 2*m)
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Decomposition{}, fmt.Errorf("stl: observation %d is %v", i+1, v)
		}
	}
	o, err := resolve(opt, n, m)
	if err != nil {
		return Decomposition{}, err
	}
	s := newState(y, m, o)
	s.run()
	d := Decomposition{Seasonal: s.season, Trend: s.trend, Remainder: make([]float64, n),
		Weights: s.rw, Options: o}
	if o.Periodic {
		// Average the seasonal values per position in the period.
		for j := 0; j < m; j++ {
			sum, k := 0.0, 0
			for t := j; t < n; t += m {
				sum += d.Seasonal[t]
				k++
			}
			for t := j; t < n; t += m {
				d.Seasonal[t] = sum / float64(k)
			}
		}
	}
	for t := range y {
		d.Remainder[t] = y[t] - d.Seasonal[t] - d.Trend[t]
	}
	return d, nil
}

// state holds the series, the resolved spans and the work arrays of one decomposition.
type state struct {
	y                   []float64
	m                   int
	ns, nt, nl          int
	sdeg, tdeg, ldeg    int
	sjump, tjump, ljump int
	inner, outer        int
	season, trend, rw   []float64
	useRW               bool
	c                   []float64 // cycle-subseries smooth, n + 2m
	w1, w2, w3, lw      []float64 // work arrays
	sub, subOut, subRW  []float64 // one cycle-subseries and its smooth (k + 2)
}

func newState(y []float64, m int, o Options) *state {
	n := len(y)
	deg := func(d LoessDegree) int {
		if d == LoessLinear {
			return 1
		}
		return 0
	}
	k := (n+m-1)/m + 2
	return &state{
		y: y, m: m,
		ns: oddSpan(o.SeasonalWindow), nt: oddSpan(o.TrendWindow), nl: oddSpan(o.LowPassWindow),
		sdeg: deg(o.SeasonalDegree), tdeg: deg(o.TrendDegree), ldeg: deg(o.LowPassDegree),
		sjump: o.SeasonalJump, tjump: o.TrendJump, ljump: o.LowPassJump,
		inner: o.Inner, outer: o.Outer,
		season: make([]float64, n), trend: make([]float64, n), rw: make([]float64, n),
		c: make([]float64, n+2*m), w1: make([]float64, n+2*m), w2: make([]float64, n+2*m),
		w3: make([]float64, n+2*m), lw: make([]float64, n+2*m),
		sub: make([]float64, k), subOut: make([]float64, k), subRW: make([]float64, k),
	}
}

// run does the inner loop, then each outer pass: new robustness weights and the inner loop
// again.
func (s *state) run() {
	for pass := 0; ; pass++ {
		s.innerLoop()
		if pass >= s.outer {
			break
		}
		s.robustnessWeights()
		s.useRW = true
	}
	if s.outer == 0 {
		for i := range s.rw {
			s.rw[i] = 1
		}
	}
}

// innerLoop is steps 1-6, n_i times.
func (s *state) innerLoop() {
	n, m := len(s.y), s.m
	for range s.inner {
		for i := range n {
			s.w1[i] = s.y[i] - s.trend[i]
		}
		s.cycleSubseries(s.w1[:n])
		s.lowPass()
		for i := range n {
			s.season[i] = s.c[m+i] - s.w1[i]
			s.w1[i] = s.y[i] - s.season[i]
		}
		var rw []float64
		if s.useRW {
			rw = s.rw
		}
		loessSmooth(s.w1[:n], s.nt, s.tdeg, s.tjump, rw, s.trend, s.lw)
	}
}

// cycleSubseries smooths each cycle-subseries of x (step 2) into s.c, with one value
// extrapolated before the first and after the last observation of each subseries.
func (s *state) cycleSubseries(x []float64) {
	n, m := len(x), s.m
	for j := range m {
		k := (n-1-j)/m + 1
		sub, out := s.sub[:k], s.subOut[:k+2]
		var rw []float64
		for i := range k {
			sub[i] = x[i*m+j]
		}
		if s.useRW {
			rw = s.subRW[:k]
			for i := range k {
				rw[i] = s.rw[i*m+j]
			}
		}
		loessSmooth(sub, s.ns, s.sdeg, s.sjump, rw, out[1:k+1], s.lw)
		if v, ok := loessAt(sub, s.ns, s.sdeg, 0, 1, min(s.ns, k), rw, s.lw); ok {
			out[0] = v
		} else {
			out[0] = out[1]
		}
		if v, ok := loessAt(sub, s.ns, s.sdeg, float64(k+1), max(1, k-s.ns+1), k, rw, s.lw); ok {
			out[k+1] = v
		} else {
			out[k+1] = out[k]
		}
		for i := range k + 2 {
			s.c[i*m+j] = out[i]
		}
	}
}

// lowPass filters s.c (step 3) into s.w1[:n]: moving averages of length m, m and 3, then a
// loess of span n_l without robustness weights.
func (s *state) lowPass() {
	n, m := len(s.y), s.m
	movingAverage(s.c, m, s.w2)          // n + m + 1 values
	movingAverage(s.w2[:n+m+1], m, s.w3) // n + 2
	movingAverage(s.w3[:n+2], 3, s.w2)   // n
	loessSmooth(s.w2[:n], s.nl, s.ldeg, s.ljump, nil, s.w1[:n], s.lw)
}

// movingAverage writes the len(x) - k + 1 means of k consecutive values of x into dst.
func movingAverage(x []float64, k int, dst []float64) {
	v := 0.0
	for i := range k {
		v += x[i]
	}
	dst[0] = v / float64(k)
	for j := 1; j <= len(x)-k; j++ {
		v += x[j+k-1] - x[j-1]
		dst[j] = v / float64(k)
	}
}

// robustnessWeights sets s.rw from the remainder y - S - T: h = 6 median|R|
// (the median as the mean of the two middle order statistics), rho = (1 - (|R|/h)^2)^2 when
// |R| <= 0.999h, 1 when |R| <= 0.001h, else 0.
func (s *state) robustnessWeights() {
	n := len(s.y)
	r := s.w1[:n]
	for i := range n {
		r[i] = math.Abs(s.y[i] - s.season[i] - s.trend[i])
	}
	sorted := s.w2[:n]
	copy(sorted, r)
	sort.Float64s(sorted)
	mid1 := n / 2 // 0-based index of the 1-based order statistic n/2 + 1
	mid2 := n - mid1 - 1
	h := 3 * (sorted[mid1] + sorted[mid2])
	for i := range n {
		switch {
		case r[i] <= 0.001*h:
			s.rw[i] = 1
		case r[i] <= 0.999*h:
			u := r[i] / h
			s.rw[i] = (1 - u*u) * (1 - u*u)
		default:
			s.rw[i] = 0
		}
	}
}

// loessSmooth writes the loess smooth of y (positions 1..n) with the given span, degree and
// robustness weights rw (nil: none) into ys, evaluating at every jump-th position (and at
// n) and interpolating linearly in between. w is scratch of length >= len(y).
func loessSmooth(y []float64, span, deg, jump int, rw, ys, w []float64) {
	n := len(y)
	if n < 2 {
		ys[0] = y[0]
		return
	}
	step := min(jump, n-1)
	nleft, nright := 1, n
	fit := func(i int) {
		if v, ok := loessAt(y, span, deg, float64(i), nleft, nright, rw, w); ok {
			ys[i-1] = v
		} else {
			ys[i-1] = y[i-1]
		}
	}
	half := (span + 1) / 2
	switch {
	case span >= n:
		for i := 1; i <= n; i += step {
			fit(i)
		}
	case step == 1:
		nright = span
		for i := 1; i <= n; i++ {
			if i > half && nright != n {
				nleft++
				nright++
			}
			fit(i)
		}
	default:
		for i := 1; i <= n; i += step {
			switch {
			case i < half:
				nleft, nright = 1, span
			case i >= n-half+1:
				nleft, nright = n-span+1, n
			default:
				nleft, nright = i-half+1, span+i-half
			}
			fit(i)
		}
	}
	if step == 1 {
		return
	}
	for i := 1; i <= n-step; i += step {
		delta := (ys[i+step-1] - ys[i-1]) / float64(step)
		for j := i + 1; j < i+step; j++ {
			ys[j-1] = ys[i-1] + delta*float64(j-i)
		}
	}
	k := ((n-1)/step)*step + 1
	if k != n {
		fit(n) // with the span of the last evaluated point
		if k != n-1 {
			delta := (ys[n-1] - ys[k-1]) / float64(n-k)
			for j := k + 1; j < n; j++ {
				ys[j-1] = ys[k-1] + delta*float64(j-k)
			}
		}
	}
}

// loessAt is the local fit at position xs (1-based, may lie outside 1..n) from the points
// nleft..nright of y (1-based, inclusive):
//
//	h = max(xs - nleft, nright - xs) (+ (span - n)/2 when span > n)
//	w_j = rho_j (1 - (|j - xs|/h)^3)^3 for |j - xs| <= 0.999h (1 within 0.001h), else 0
//
// normalised to sum 1; for degree 1 (and h > 0) the weights become w_j (1 + b (j - a)) with
// a = sum w_j j, b = (xs - a) / sum w_j (j - a)^2 when that spread exceeds 0.001 (n - 1).
// It returns sum w_j y_j, and false when every weight is zero.
func loessAt(y []float64, span, deg int, xs float64, nleft, nright int, rw, w []float64) (float64, bool) {
	n := len(y)
	h := math.Max(xs-float64(nleft), float64(nright)-xs)
	if span > n {
		h += float64((span - n) / 2)
	}
	h9, h1 := 0.999*h, 0.001*h
	a := 0.0
	for j := nleft; j <= nright; j++ {
		w[j-1] = 0
		r := math.Abs(float64(j) - xs)
		if r <= h9 {
			if r <= h1 {
				w[j-1] = 1
			} else {
				q := r / h
				q = 1 - q*q*q
				w[j-1] = q * q * q
			}
			if rw != nil {
				w[j-1] *= rw[j-1]
			}
			a += w[j-1]
		}
	}
	if a <= 0 {
		return 0, false
	}
	for j := nleft; j <= nright; j++ {
		w[j-1] /= a
	}
	if h > 0 && deg > 0 {
		a = 0
		for j := nleft; j <= nright; j++ {
			a += w[j-1] * float64(j)
		}
		b := xs - a
		c := 0.0
		for j := nleft; j <= nright; j++ {
			c += w[j-1] * (float64(j) - a) * (float64(j) - a)
		}
		if math.Sqrt(c) > 0.001*float64(n-1) {
			b /= c
			for j := nleft; j <= nright; j++ {
				w[j-1] *= b*(float64(j)-a) + 1
			}
		}
	}
	v := 0.0
	for j := nleft; j <= nright; j++ {
		v += w[j-1] * y[j-1]
	}
	return v, true
}
