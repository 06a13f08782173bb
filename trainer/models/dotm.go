package models

import (
	"math"
)

func init() {
	Register(FamilyOTM, func(s Spec) (Model, error) { return optThetaModel{spec: s}, nil })
	Register(FamilyDOTM, func(s Spec) (Model, error) { return optThetaModel{spec: s, dynamic: true}, nil })
}

// Family identifiers of the optimised Theta models of Fiorucci, Pellegrini, Louzada, Petropoulos
// & Koehler (2016, "Models for optimising the theta method and their relationship to state space
// models", International Journal of Forecasting 32(4), 1151-1161), by the paper's own acronyms.
const (
	// FamilyOTM is the optimised Theta model: θ and α estimated, the trend line fitted once to
	// the whole series.
	FamilyOTM = "OTM"
	// FamilyDOTM is the dynamic optimised Theta model: θ and α estimated, the trend line refitted
	// at every period on the observations so far.
	FamilyDOTM = "DOTM"
)

// Bounds of the optimised Theta models (from memory: the defaults of the authors' R package
// forecTheta, which Debian does not package, so they are not checked): α ∈ [0.1, 0.99], θ >= 1.
// θ is capped at 10⁶ (w = 1 − 1/θ <= 1 − 10⁻⁶) so that Params stays finite.
const (
	otmAlphaMin = 0.1
	otmAlphaMax = 0.99
	otmWMax     = 1 - 1e-6
	otmGrid     = 20 // coarse α grid points before the golden-section refinement
)

// optThetaModel is the optimised Theta model (OTM) or, with dynamic, the dynamic optimised
// Theta model (DOTM) of Fiorucci et al. (2016), on the seasonally adjusted series as the Theta
// family does (x_t = y_t / S_{t mod m}, adjustSeason; S ≡ 1 when seasonIndices finds no
// season). With t = 1..n (the paper's indexing) and w = 1 − 1/θ:
//
//	x_t = μ_t + ε_t
//	μ_t = ℓ_{t−1} + w [ (1−α)^{t−1} A_{t−1} + (1 − (1−α)^t)/α · B_{t−1} ]
//	ℓ_t = α x_t + (1−α) ℓ_{t−1}
//
// DOTM revises the least-squares line of x on t = 1..t at every period (the recursions of the
// paper's dynamic model; they are exactly ordinary least squares on the data so far):
//
//	x̄_t = ((t−1) x̄_{t−1} + x_t) / t
//	B_t = ((t−2) B_{t−1} + 6 (x_t − x̄_{t−1}) / t) / (t+1)
//	A_t = x̄_t − (t+1)/2 · B_t
//
// started at x̄_1 = A_1 = x_1, B_1 = 0; with no line before the first observation, the errors
// are scored from t = 2 (our choice of start). OTM uses A_{t−1} = A_n, B_{t−1} = B_n, the line
// fitted to all n observations, and scores t = 1..n; with θ = 2 it is the Theta method of
// Assimakopoulos & Nikolopoulos (2000) written as a state space model (the paper's first
// theorem). The equations are written from memory of the paper; the tests derive them again
// from the theta-line definition and work them by hand.
//
// Estimation: (ℓ_0, α, θ) minimise the sum of squared one-step errors, which is the Gaussian
// likelihood with σ² concentrated out. For fixed α the errors are linear in ℓ_0 and w, so both
// are solved exactly (2×2 least squares, w clamped to [0, 1 − 10⁻⁶], i.e. θ ∈ [1, 10⁶]); α ∈
// [0.1, 0.99] by a 20-point grid and golden-section search in the best bracket.
//
// Forecasts are the model's conditional means: the recursions run on with ε = 0, each mean
// taking the place of the unknown observation (for DOTM the line is revised with the means;
// for OTM this gives the paper's closed form ℓ_n + w[(1−α)^n A_n + ((h−1) + (1 − (1−α)^{n+1})/α)
// B_n]). The model is linear in its errors, so x_{n+k} = x̂_{n+k} + Σ_{j<=k} ψ_{k,j} ε_{n+j}
// with ψ_{k,k} = 1 and ψ_{k,j} the response at n+k to a unit error at n+j (for OTM ψ = α, the
// SES band); the band is x̂ ± Φ⁻¹(p) σ̂ √(Σ_j ψ²_{k,j}), σ̂² = SSE / (number of scored
// errors), and mean and band are multiplied by the seasonal index. Needs n >= 4.
type optThetaModel struct {
	spec    Spec
	dynamic bool
}

func (o optThetaModel) Family() string {
	if o.dynamic {
		return FamilyDOTM
	}
	return FamilyOTM
}

func (optThetaModel) MinLength(m int) int { return 4 }

func (o optThetaModel) Fit(y []float64, m int) (Fitted, error) {
	family := o.Family()
	n := len(y)
	if n < 4 {
		return nil, tooShort(family, n, 4)
	}
	if err := checkFinite(family, y); err != nil {
		return nil, err
	}
	adj, x := adjustSeason(y, seasonFor(o.spec, m))
	lineA, lineB := thetaLines(x, o.dynamic)
	first := 0
	if o.dynamic {
		first = 1
	}
	start := x[0]
	profileSSE := func(a float64) float64 { _, _, s := otmProfile(x, lineA, lineB, first, a, start); return s }
	alpha := gridGoldenMin(profileSSE, otmAlphaMin, otmAlphaMax, otmGrid)
	delta, w, _ := otmProfile(x, lineA, lineB, first, alpha, start)

	f := &optThetaFit{seasonAdjustment: adj, name: o.spec.DisplayName(), dynamic: o.dynamic, n: n,
		alpha: alpha, w: w, l0: start + delta}
	f.fitted = nanSlice(n)
	var sse float64
	f.state, sse = otmFilter(x, f.alpha, f.w, f.l0, o.dynamic, f.fitted)
	for t := range f.fitted {
		f.fitted[t] *= adj.index(t)
	}
	f.sigma2 = sse / float64(n-first)
	return f, nil
}

// otmFilter runs the model over x with the given α, w and ℓ_0, writes the one-step means μ_t
// into fitted[t−1] for the scored t (fitted untouched elsewhere) and returns the states after the
// last observation and the sum of squared scored errors.
func otmFilter(x []float64, alpha, w, l0 float64, dynamic bool, fitted []float64) (otmState, float64) {
	st := otmState{level: l0}
	first := 1
	if !dynamic {
		a, b := thetaLines(x, false)
		st.a, st.b, first = a[0], b[0], 0
	}
	var sse float64
	for t, v := range x {
		if t >= first {
			mu := st.mean(alpha, w)
			e := v - mu
			sse += e * e
			fitted[t] = mu
		}
		st.absorb(v, alpha, dynamic)
	}
	return st, sse
}

// thetaLines returns the intercept and slope each mean μ_t uses, at index t−1 (t = 1..n): A_{t−1}
// and B_{t−1} for DOTM (zero at t = 1, which is not scored), A_n and B_n throughout for OTM.
func thetaLines(x []float64, dynamic bool) (a, b []float64) {
	n := len(x)
	a, b = make([]float64, n), make([]float64, n)
	if !dynamic {
		slope := olsSlope(x)
		var xbar float64
		for _, v := range x {
			xbar += v
		}
		xbar /= float64(n)
		icept := xbar - float64(n+1)/2*slope // at t = 0, for the line on t = 1..n
		for t := range a {
			a[t], b[t] = icept, slope
		}
		return a, b
	}
	st := otmState{}
	for t := 1; t < n; t++ {
		st.absorb(x[t-1], 0.5, true) // α moves only the level, which is not used here
		a[t], b[t] = st.a, st.b
	}
	return a, b
}

// otmProfile returns, for a fixed α, the least-squares δ = ℓ_0 − start and w, and the SSE at
// them. With L_t the level started at `start`, ℓ_{t−1} = L_{t−1} + c_t δ, c_t = (1−α)^{t−1},
// so the error is e_t = r_t − c_t δ − g_t w with r_t = x_t − L_{t−1} and g_t = c_t A_{t−1} +
// (1 − (1−α)^t)/α · B_{t−1}: a two-variable least-squares problem, with w clamped to
// [0, otmWMax] (the minimum over δ for the clamped w is then the constrained minimum, the SSE
// being a convex quadratic). When g is collinear with c, w = 0.
func otmProfile(x, lineA, lineB []float64, first int, alpha, start float64) (delta, w, sse float64) {
	n := len(x)
	level, c := start, 1.0
	var scc, scg, sgg, scr, sgr, srr float64
	for t := range n {
		if t >= first {
			g := c*lineA[t] + (1-c*(1-alpha))/alpha*lineB[t]
			r := x[t] - level
			scc += c * c
			scg += c * g
			sgg += g * g
			scr += c * r
			sgr += g * r
			srr += r * r
		}
		level += alpha * (x[t] - level)
		c *= 1 - alpha
	}
	if det := scc*sgg - scg*scg; det > 1e-12*scc*sgg {
		w = min(max((scc*sgr-scg*scr)/det, 0), otmWMax)
	}
	delta = (scr - scg*w) / scc
	sse = srr - 2*delta*scr - 2*w*sgr + delta*delta*scc + 2*delta*w*scg + w*w*sgg
	return delta, w, max(sse, 0)
}

// otmState holds the states after t observations: ℓ_t, x̄_t, A_t, B_t and c = (1−α)^t.
type otmState struct {
	t                 int
	level, xbar, a, b float64
	c                 float64 // (1−α)^t; set by absorb (1 before the first observation)
}

// mean returns μ_{t+1}, the one-step mean from the states after t observations.
func (s *otmState) mean(alpha, w float64) float64 {
	c := s.c
	if s.t == 0 {
		c = 1
	}
	return s.level + w*(c*s.a+(1-c*(1-alpha))/alpha*s.b)
}

// absorb moves the states on by one observation v (an observation, or a mean when forecasting).
// The line is revised only when dynamic.
func (s *otmState) absorb(v, alpha float64, dynamic bool) {
	if s.t == 0 {
		s.c = 1
	}
	s.t++
	t := float64(s.t)
	s.level += alpha * (v - s.level)
	s.c *= 1 - alpha
	if !dynamic {
		return
	}
	if s.t == 1 {
		s.xbar, s.a, s.b = v, v, 0
		return
	}
	prev := s.xbar
	s.xbar = ((t-1)*prev + v) / t
	s.b = ((t-2)*s.b + 6*(v-prev)/t) / (t + 1)
	s.a = s.xbar - (t+1)/2*s.b
}

// optThetaFit is a fitted OTM or DOTM.
type optThetaFit struct {
	seasonAdjustment
	name         string
	dynamic      bool
	n            int
	alpha, w, l0 float64
	sigma2       float64
	state        otmState // after the n observations
	fitted       []float64
}

func (f *optThetaFit) Name() string { return f.label(f.name) }

// Params returns "alpha", "theta" (1/(1 − w)), "l0" (ℓ_0), "level" (ℓ_n), "intercept" and
// "slope" (A_n, B_n), "sigma2" (σ̂² on the adjusted scale), "seasonal" (1 or 0) and "index<j>"
// for each seasonal index when seasonal.
func (f *optThetaFit) Params() map[string]float64 {
	p := map[string]float64{
		"alpha": f.alpha, "theta": 1 / (1 - f.w), "l0": f.l0, "level": f.state.level,
		"intercept": f.state.a, "slope": f.state.b, "sigma2": f.sigma2,
	}
	addSeasonParams(p, f.idx)
	return p
}

// InSample returns the one-step means μ_t · S_{t mod m} (NaN at t = 1 for DOTM).
func (f *optThetaFit) InSample() []float64 { return append([]float64(nil), f.fitted...) }

// Forecast runs the recursions on with ε = 0 for the means and propagates a unit error from
// each step for the ψ weights of the band (see optThetaModel).
func (f *optThetaFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	buf := make([]float64, 2*h)
	mean, se := buf[:h:h], buf[h:]
	st := f.state
	for k := range mean {
		mean[k] = st.mean(f.alpha, f.w)
		st.absorb(mean[k], f.alpha, f.dynamic)
		se[k] = 1 // ψ_{k,k}²
	}
	if len(levels) > 0 {
		// The recursions are linear and homogeneous in (ℓ, x̄, A, B, x), so the response to a
		// unit error at n+j is the same recursion run from zero states with x_{n+j} = 1.
		for j := range h - 1 {
			imp := otmState{t: f.n + j, c: f.state.c * math.Pow(1-f.alpha, float64(j))}
			imp.absorb(1, f.alpha, f.dynamic)
			for k := j + 1; k < h; k++ {
				psi := imp.mean(f.alpha, f.w)
				se[k] += psi * psi
				imp.absorb(psi, f.alpha, f.dynamic)
			}
		}
	}
	sigma := math.Sqrt(f.sigma2)
	for k := range mean {
		s := f.index(f.n + k)
		mean[k] *= s
		se[k] = s * sigma * math.Sqrt(se[k])
	}
	return Forecast{Mean: mean, Levels: copyLevels(levels), Quantiles: gaussianBands(mean, se, levels, zQuantile)}
}
