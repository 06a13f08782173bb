package models

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"

	"almanac.dev/almanac/trainer/numeric/neldermead"
)

func init() { Register(FamilyETS, newETS) }

// ETSForm names one member of the ETS(error, trend, season) taxonomy (Hyndman, Koehler, Ord &
// Snyder 2008, "Forecasting with Exponential Smoothing: The State Space Approach", hereafter
// HKOS 2008, section 2.5): Error is "A" or "M", Trend "N", "A" or "Ad", Season "N", "A" or "M".
// Multiplicative trends are not offered (they are unstable in forecasting; HKOS 2008 section 2.5).
type ETSForm struct {
	Error, Trend, Season string
}

// String returns the usual label, e.g. "ETS(M,Ad,M)".
func (f ETSForm) String() string { return "ETS(" + f.Error + "," + f.Trend + "," + f.Season + ")" }

// codes converts the form to the internal codes, or reports which component is unknown.
func (f ETSForm) codes() (errT, trend, season int8, err error) {
	switch f.Error {
	case "A":
		errT = etsAdd
	case "M":
		errT = etsMul
	default:
		return 0, 0, 0, fmt.Errorf("models: ETS: error component %q: want A or M", f.Error)
	}
	switch f.Trend {
	case "N":
		trend = etsNone
	case "A":
		trend = etsAdd
	case "Ad":
		trend = etsDamped
	default:
		return 0, 0, 0, fmt.Errorf("models: ETS: trend component %q: want N, A or Ad", f.Trend)
	}
	switch f.Season {
	case "N":
		season = etsNone
	case "A":
		season = etsAdd
	case "M":
		season = etsMul
	default:
		return 0, 0, 0, fmt.Errorf("models: ETS: season component %q: want N, A or M", f.Season)
	}
	return errT, trend, season, nil
}

// ETSParams are the smoothing weights and seed states of one fitted form. Weights a form does
// not have are zero (Phi is 1 for an undamped trend). Seasonal[j] is s_{-j}, the seasonal state
// j periods before the first observation (Seasonal[0] is the most recent, at time 0); it is nil
// for non-seasonal forms. The weights are those of the error-correction form (HKOS 2008 Table
// 2.3), so Beta and Gamma are alpha*beta* and (1-alpha)*gamma* of the Holt-Winters form.
type ETSParams struct {
	Alpha, Beta, Gamma, Phi float64
	Level, Slope            float64
	Seasonal                []float64
}

// ETSFit is one fitted ETS form. It implements Fitted.
type ETSFit struct {
	form                ETSForm
	errT, trend, season int8
	m                   int
	par                 ETSParams
	k                   int // estimated parameters, the variance excluded
	n                   int
	crit                float64
	sigma2              float64
	fitted, resid       []float64
	endL, endB          float64
	endS                []float64 // seasonal states at time n, newest first
	evals               int
	candidates          []ETSCandidate
	refined             []*ETSFit // SelectETS: every refined form's fit, best first
}

// ETSCandidate records one form tried by the automatic search and its AICc (NaN if the fit
// failed, with Err saying why), in the order SelectETS scored them: refined forms first.
type ETSCandidate struct {
	Form ETSForm
	AICc float64
	Err  error
	// Screened is true when the form was scored at its screening stage only (SelectETS).
	Screened bool
}

// Name returns the form label, e.g. "ETS(A,Ad,N)".
func (f *ETSFit) Name() string { return f.form.String() }

// Form returns the fitted form.
func (f *ETSFit) Form() ETSForm { return f.form }

// Parameters returns the estimated weights and seed states.
func (f *ETSFit) Parameters() ETSParams {
	p := f.par
	p.Seasonal = append([]float64(nil), f.par.Seasonal...)
	return p
}

// Params returns alpha, beta, gamma, phi (those the form has), l0, b0 (with a trend),
// s0..s{m-1} (seasonal forms; s0 is the most recent seed, see ETSParams) and sigma2, the
// innovation variance estimate sum(e^2)/(n - k).
func (f *ETSFit) Params() map[string]float64 {
	out := map[string]float64{"alpha": f.par.Alpha, "l0": f.par.Level, "sigma2": f.sigma2}
	if f.trend != etsNone {
		out["beta"] = f.par.Beta
		out["b0"] = f.par.Slope
	}
	if f.trend == etsDamped {
		out["phi"] = f.par.Phi
	}
	if f.season != etsNone {
		out["gamma"] = f.par.Gamma
		for j, s := range f.par.Seasonal {
			out["s"+strconv.Itoa(j)] = s
		}
	}
	return out
}

// NumParams returns k, the number of estimated parameters used by the information criteria:
// the smoothing weights, l0, b0 and m-1 free seasonal seeds, plus one for the variance.
func (f *ETSFit) NumParams() int { return f.k + 1 }

// LogLik returns the Gaussian log likelihood at the estimates, concentrated over the
// variance (HKOS 2008 eq. 5.3 with sigma^2 = sum(e^2)/n):
//
//	log L = -n/2 (log(2 pi sum(e^2) / n) + 1) - sum log|r(x_{t-1})|
//
// with r = mu_t for multiplicative error and r = 1 for additive error. R's forecast::ets reports
// this without the constant -n/2 (log(2 pi / n) + 1).
func (f *ETSFit) LogLik() float64 {
	n := float64(f.n)
	return -0.5*f.crit - 0.5*n*(math.Log(2*math.Pi/n)+1)
}

// AIC returns -2 log L + 2 (k+1).
func (f *ETSFit) AIC() float64 { return -2*f.LogLik() + 2*float64(f.k+1) }

// AICc returns AIC + 2 (k+1)(k+2) / (n - k - 2), the small-sample corrected criterion the
// automatic search minimises (HKOS 2008 section 7.1, eq. 7.2).
func (f *ETSFit) AICc() float64 {
	np := float64(f.k + 1)
	return f.AIC() + 2*np*(np+1)/(float64(f.n)-np-1)
}

// BIC returns -2 log L + (k+1) log n.
func (f *ETSFit) BIC() float64 { return -2*f.LogLik() + float64(f.k+1)*math.Log(float64(f.n)) }

// Sigma2 returns the innovation variance estimate sum(e_t^2)/(n - k), with e_t relative errors
// for multiplicative error forms (the estimate R's forecast::ets reports).
func (f *ETSFit) Sigma2() float64 { return f.sigma2 }

// InSample returns the one-step-ahead fitted values mu_t.
func (f *ETSFit) InSample() []float64 { return append([]float64(nil), f.fitted...) }

// Residuals returns the innovations e_t (relative errors for multiplicative error forms).
func (f *ETSFit) Residuals() []float64 { return append([]float64(nil), f.resid...) }

// Evaluations returns how many likelihood evaluations the fit took (the whole search for an
// automatic fit).
func (f *ETSFit) Evaluations() int { return f.evals }

// Candidates returns the forms the automatic search tried, in search order (nil for a fit of
// one form).
func (f *ETSFit) Candidates() []ETSCandidate { return f.candidates }

// etsK returns the number of estimated parameters of a form, the variance excluded: the
// smoothing weights, the seed level, slope and m-1 seasonal seeds (the last is fixed by the
// normalisation: additive seeds sum to 0, multiplicative ones to m).
func etsK(trend, season int8, m int) int {
	k := 2
	if trend != etsNone {
		k += 2
	}
	if trend == etsDamped {
		k++
	}
	if season != etsNone {
		k += m
	}
	return k
}

// etsMaxSeason is the longest season the search models (common practice: R's forecast::ets
// ignores seasonality above 24; the seeds and the search grow with m). Weekly data (m = 52)
// therefore gets non-seasonal forms only, as from R's ets on ts(y, frequency = 52) (checked
// in test/reference/weekly_test.go); its yearly cycle is for the MSTL and Fourier members.
const etsMaxSeason = 24

// etsFormFits reports why a form cannot be fitted to y with season length m, or nil. The
// length rule is n > k + 4 with k from etsK (the guard R's forecast::ets uses before
// optimising, applied here to each form), which keeps the AICc denominator n - k - 2 above 2.
func etsFormFits(n, m int, positive bool, errT, trend, season int8) error {
	if season != etsNone && (m < 2 || m > etsMaxSeason) {
		return fmt.Errorf("models: ETS: seasonal form needs a season length in [2, %d], got %d", etsMaxSeason, m)
	}
	if (errT == etsMul || season == etsMul) && !positive {
		return errors.New("models: ETS: multiplicative error or season needs strictly positive data")
	}
	if k := etsK(trend, season, m); n <= k+4 {
		return fmt.Errorf("models: ETS: %d observations are too few for %d parameters (need more than %d): %w", n, k, k+4, ErrTooShort)
	}
	return nil
}

// checkSeries reports the first non-finite value of y.
func checkSeries(y []float64) (positive bool, err error) {
	positive = true
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false, fmt.Errorf("models: ETS: value %d is %v; clean the series before fitting", i, v)
		}
		if v <= 0 {
			positive = false
		}
	}
	return positive, nil
}

// FitETS estimates one form on y with season length m (1 for none) by maximum likelihood
// (see etsPass for the criterion; the search is described on etsFitter.fit).
func FitETS(y []float64, m int, form ETSForm) (*ETSFit, error) {
	errT, trend, season, err := form.codes()
	if err != nil {
		return nil, err
	}
	positive, err := checkSeries(y)
	if err != nil {
		return nil, err
	}
	if err := etsFormFits(len(y), m, positive, errT, trend, season); err != nil {
		return nil, err
	}
	var ft etsFitter
	ft.init(y, m)
	return ft.fit(form, errT, trend, season)
}

// ETSAt evaluates one form on y at the given weights and seeds without estimating anything:
// the returned fit has the likelihood, criteria, residuals and forecasts at p. The parameter
// count for the criteria is that of the form, as if p had been estimated. p.Seasonal must have
// length m for seasonal forms; p.Phi is ignored unless the trend is damped.
func ETSAt(y []float64, m int, form ETSForm, p ETSParams) (*ETSFit, error) {
	errT, trend, season, err := form.codes()
	if err != nil {
		return nil, err
	}
	if _, err := checkSeries(y); err != nil {
		return nil, err
	}
	if season != etsNone && len(p.Seasonal) != m {
		return nil, fmt.Errorf("models: ETS: %s needs %d seasonal seeds, got %d", form, m, len(p.Seasonal))
	}
	if season == etsNone {
		m = 1
	}
	st := etsState{alpha: p.Alpha, beta: p.Beta, gamma: p.Gamma, phi: p.Phi, l0: p.Level, b0: p.Slope,
		seas: append([]float64(nil), p.Seasonal...)}
	return etsFinish(y, m, form, errT, trend, season, &st, 0)
}

// etsFinish runs the final pass at st and assembles the fit.
func etsFinish(y []float64, m int, form ETSForm, errT, trend, season int8, st *etsState, evals int) (*ETSFit, error) {
	n := len(y)
	fit := &ETSFit{form: form, errT: errT, trend: trend, season: season, m: m, n: n,
		k: etsK(trend, season, m), fitted: make([]float64, n), resid: make([]float64, n), evals: evals}
	end := make([]float64, 2+m)
	buf := make([]float64, m)
	crit, sse := etsPass(y, m, errT, trend, season, st, buf, fit.fitted, fit.resid, end)
	if math.IsInf(crit, 0) || math.IsNaN(crit) {
		return nil, fmt.Errorf("models: ETS: %s: the likelihood is not finite at the estimates", form)
	}
	fit.crit = crit
	if n > fit.k {
		fit.sigma2 = sse / float64(n-fit.k)
	} else {
		fit.sigma2 = math.NaN()
	}
	fit.endL, fit.endB = end[0], end[1]
	phi := st.phi
	switch trend {
	case etsNone:
		phi = 0
		fit.endB = 0
	case etsAdd:
		phi = 1
	}
	fit.par = ETSParams{Alpha: st.alpha, Level: st.l0}
	if trend != etsNone {
		fit.par.Beta, fit.par.Slope = st.beta, st.b0
	}
	fit.par.Phi = phi
	if season != etsNone {
		fit.par.Gamma = st.gamma
		fit.par.Seasonal = append([]float64(nil), st.seas[:m]...)
		fit.endS = append([]float64(nil), end[2:2+m]...)
	}
	return fit, nil
}

// etsStage1 is the evaluation budget per weight and start of the weights-only first stage.
const etsStage1 = 40

// etsSeedCount returns how many seed states a form estimates: l0, b0 and m-1 seasonal seeds.
func etsSeedCount(trend, season int8, m int) int {
	c := 1
	if trend != etsNone {
		c++
	}
	if season != etsNone {
		c += m - 1
	}
	return c
}

// etsLivelyStart overwrites starting weights [alpha, beta, gamma, phi] (those present) with a
// second start far from R's: alpha 0.5, beta 0.05, gamma 0.1, phi 0.9.
func etsLivelyStart(w []float64, trend, season int8) {
	i := 0
	w[i] = 0.5
	i++
	if trend != etsNone {
		w[i] = 0.05
		i++
	}
	if season != etsNone {
		w[i] = 0.1
		i++
	}
	if trend == etsDamped {
		w[i] = 0.9
	}
}

// etsBudget is the number of likelihood evaluations allowed per form and free parameter;
// the Nelder-Mead search restarts once from its best point while budget remains.
const etsBudget = 120

// etsFitter holds per-series scratch shared by the forms of one search.
type etsFitter struct {
	y        []float64
	m        int
	figA     []float64 // additive seasonal figure, computed on first use
	figM     []float64
	adj      []float64
	buf      []float64
	poly     []float64
	x0, step []float64
	full     []float64
	wStart   []float64
	wTry     []float64
	nm       neldermead.Work
	st       etsState
	scale    float64
	// screenTol is the relative stopping tolerance of the screening stage (see screen).
	screenTol float64
}

func (ft *etsFitter) init(y []float64, m int) {
	ft.y, ft.m = y, m
	ft.screenTol = 1e-8
	ft.adj = make([]float64, len(y))
	ft.buf = make([]float64, max(m, 1))
	ft.poly = make([]float64, 2*(m+2))
	ft.st.seas = make([]float64, max(m, 1))
	s := 0.0
	for _, v := range y {
		s += math.Abs(v)
	}
	ft.scale = s / float64(len(y))
	if ft.scale == 0 {
		ft.scale = 1
	}
}

// decode maps the optimiser's vector [alpha, beta, gamma, phi, l0, b0, s_0..s_{m-2}] (entries
// the form lacks are absent) into ft.st and reports whether it is feasible: the weights in the
// usual region and admissible (etsUsual, etsAdmissible), multiplicative seeds positive.
func (ft *etsFitter) decode(x []float64, trend, season int8) bool {
	st := &ft.st
	i := 0
	st.alpha = x[i]
	i++
	if trend != etsNone {
		st.beta = x[i]
		i++
	}
	if season != etsNone {
		st.gamma = x[i]
		i++
	}
	if trend == etsDamped {
		st.phi = x[i]
		i++
	} else {
		st.phi = 1
	}
	if !etsUsual(st.alpha, st.beta, st.gamma, st.phi, trend, season) {
		return false
	}
	st.l0 = x[i]
	i++
	if trend != etsNone {
		st.b0 = x[i]
		i++
	} else {
		st.b0 = 0
	}
	if season == etsNone {
		return true
	}
	m := ft.m
	sum := 0.0
	for j := 0; j < m-1; j++ {
		st.seas[j] = x[i+j]
		sum += x[i+j]
	}
	if season == etsAdd {
		st.seas[m-1] = -sum
	} else {
		st.seas[m-1] = float64(m) - sum
		for j := 0; j < m; j++ {
			if st.seas[j] <= 0 {
				return false
			}
		}
	}
	return etsAdmissible(st.alpha, st.beta, st.gamma, st.phi, m, trend, season, ft.poly)
}

// fit estimates one form. Starting weights follow R's forecast::ets (alpha = 1e-4 + 0.2 (1 -
// 2e-4) / m, beta = 0.1 alpha, gamma = 0.05 (1 - alpha), phi = 0.978), seeds come from
// etsSeedStates, and all of them are refined jointly by Nelder-Mead on the concentrated
// criterion of etsPass, with infeasible points (etsUsual, etsAdmissible) valued +Inf.
func (ft *etsFitter) fit(form ETSForm, errT, trend, season int8) (*ETSFit, error) {
	_, evals, err := ft.screen(form, errT, trend, season)
	if err != nil {
		return nil, err
	}
	return ft.refine(form, errT, trend, season, evals)
}

// formSeason returns the season length a form uses: ft.m when seasonal, else 1.
func (ft *etsFitter) formSeason(season int8) int {
	if season == etsNone {
		return 1
	}
	return ft.m
}

// prepare sets ft.x0 and ft.step to the starting point and initial simplex steps of one form
// (see fit) and returns the dimension.
func (ft *etsFitter) prepare(trend, season int8) int {
	m := ft.formSeason(season)
	var fig []float64
	switch season {
	case etsAdd:
		if ft.figA == nil {
			ft.figA = etsFigure(ft.y, m, etsAdd)
		}
		fig = ft.figA
	case etsMul:
		if ft.figM == nil {
			ft.figM = etsFigure(ft.y, m, etsMul)
		}
		fig = ft.figM
	}
	st := &ft.st
	etsSeedStates(ft.y, m, trend, season, fig, st, ft.adj)

	d := etsK(trend, season, m)
	if cap(ft.x0) < d {
		ft.x0 = make([]float64, d)
		ft.step = make([]float64, d)
	}
	x0, step := ft.x0[:d], ft.step[:d]
	alpha := etsLower + 0.2*(etsUpper-etsLower)/float64(m)
	i := 0
	x0[i], step[i] = alpha, 0.1
	i++
	if trend != etsNone {
		beta := etsLower + 0.1*(alpha-etsLower)
		x0[i], step[i] = beta, 0.5*(alpha-beta)
		i++
	}
	if season != etsNone {
		up := math.Min(etsUpper, 1-alpha)
		gamma := etsLower + 0.05*(up-etsLower)
		x0[i], step[i] = gamma, 0.1*(up-gamma)
		i++
	}
	if trend == etsDamped {
		x0[i], step[i] = etsPhiLower+0.99*(etsPhiUpper-etsPhiLower), -0.05
		i++
	}
	x0[i], step[i] = st.l0, 0.1*math.Abs(st.l0)+1e-3*ft.scale
	i++
	if trend != etsNone {
		x0[i], step[i] = st.b0, 0.1*math.Abs(st.b0)+1e-3*ft.scale
		i++
	}
	if season != etsNone {
		for j := 0; j < m-1; j++ {
			x0[i+j] = st.seas[j]
			if season == etsAdd {
				step[i+j] = 0.1*math.Abs(st.seas[j]) + 1e-3*ft.scale
			} else {
				step[i+j] = 0.02
			}
		}
	}

	return d
}

// objective returns the criterion of etsPass as a function of the optimiser's vector, +Inf
// where decode finds it infeasible.
func (ft *etsFitter) objective(errT, trend, season int8) func([]float64) float64 {
	m := ft.formSeason(season)
	return func(x []float64) float64 {
		if !ft.decode(x, trend, season) {
			return math.Inf(1)
		}
		c, _ := etsPass(ft.y, m, errT, trend, season, &ft.st, ft.buf, nil, nil, nil)
		return c
	}
}

// screen runs the first stage of fit for one form: prepare, then the weights alone with the
// seeds held at their heuristic values. It leaves the best weights in ft.x0 and returns the
// criterion there and the evaluations used.
func (ft *etsFitter) screen(form ETSForm, errT, trend, season int8) (crit float64, evals int, err error) {
	m := ft.formSeason(season)
	d := ft.prepare(trend, season)
	x0, step := ft.x0[:d], ft.step[:d]
	eval := ft.objective(errT, trend, season)
	// Stage 1: the weights alone, seeds held at the heuristic values, from R's starting
	// weights and from a second, livelier start (alpha 0.5); the better result seeds stage 2.
	dw := d - etsSeedCount(trend, season, m)
	full := ft.full[:0]
	full = append(full, x0...)
	ft.full = full
	evalW := func(xw []float64) float64 {
		copy(full[:dw], xw)
		return eval(full)
	}
	bestW := math.Inf(1)
	wStart := ft.wStart[:0]
	wStart = append(wStart, x0[:dw]...)
	ft.wStart = wStart
	for try := 0; try < 2; try++ {
		start := append(ft.wTry[:0], wStart...)
		ft.wTry = start
		if try == 1 {
			etsLivelyStart(start, trend, season)
		}
		r := neldermead.Minimize(evalW, start, step[:dw], etsStage1*(dw+1), ft.screenTol, &ft.nm)
		evals += r.Evals
		if r.F < bestW {
			bestW = r.F
			copy(x0[:dw], r.X)
		}
	}
	if math.IsInf(bestW, 1) {
		return bestW, evals, fmt.Errorf("models: ETS: %s: the likelihood is not finite at the starting values", form)
	}
	return bestW, evals, nil
}

// refine runs the second stage of fit from ft.x0 and ft.step as screen left them (weights and
// seeds jointly, with restarts) and assembles the fit; evals counts the evaluations so far.
func (ft *etsFitter) refine(form ETSForm, errT, trend, season int8, evals int) (*ETSFit, error) {
	m := ft.formSeason(season)
	d := etsK(trend, season, m)
	x0, step := ft.x0[:d], ft.step[:d]
	eval := ft.objective(errT, trend, season)
	// Stage 2: weights and seeds jointly.
	budget := etsBudget*(d+1) + evals
	res := neldermead.Minimize(eval, x0, step, budget-evals, 1e-8, &ft.nm)
	evals += res.Evals
	if res.Status == neldermead.NoFiniteSeed {
		return nil, fmt.Errorf("models: ETS: %s: the likelihood is not finite at the starting values", form)
	}
	// Up to three restarts from the best point with a fresh simplex, while they still improve,
	// guard against the simplex having
	// collapsed on a ridge (common practice with Nelder-Mead).
	for restart := 0; restart < 3 && evals < budget; restart++ {
		copy(x0, res.X)
		f0 := res.F
		res = neldermead.Minimize(eval, x0, step, budget-evals, 1e-8, &ft.nm)
		evals += res.Evals
		if res.F >= f0 {
			res.X, res.F = x0, f0
			break
		}
		if f0-res.F < 1e-6*math.Abs(f0) {
			break
		}
	}
	if !ft.decode(res.X, trend, season) {
		return nil, fmt.Errorf("models: ETS: %s: the search ended outside the feasible region", form)
	}
	stCopy := ft.st
	stCopy.seas = append([]float64(nil), ft.st.seas[:m]...)
	return etsFinish(ft.y, m, form, errT, trend, season, &stCopy, evals)
}

// etsForms lists the forms of the automatic search allowed by opts, in search order: error
// A, M; trend N, A, Ad; season N, A, M. As in R's forecast::ets (restrict = TRUE), additive
// error with multiplicative season is left out, being numerically unstable (HKOS 2008 section
// 7.4 discusses it).
func etsForms(opts *ETSOptions) []ETSForm {
	pick := func(list []string, all []string) []string {
		if len(list) == 0 {
			return all
		}
		return list
	}
	var errs, trends, seasons []string
	if opts != nil {
		errs, trends, seasons = opts.Errors, opts.Trends, opts.Seasons
	}
	var out []ETSForm
	for _, e := range pick(errs, []string{"A", "M"}) {
		for _, t := range pick(trends, []string{"N", "A", "Ad"}) {
			for _, s := range pick(seasons, []string{"N", "A", "M"}) {
				if e == "A" && s == "M" {
					continue
				}
				out = append(out, ETSForm{Error: e, Trend: t, Season: s})
			}
		}
	}
	return out
}

// etsRefined is how many forms SelectETS refines fully after screening.
const etsRefined = 2

// etsScreenTol is the relative stopping tolerance of SelectETS's screening stage (FitETS's
// first stage uses 1e-8). Ranking forms needs the criterion to about 0.1 AICc units, not to
// 1e-8: on every 15th M3 series (training data) it cut the search's evaluations by about 40%
// against 1e-8 with the same mean AICc of the chosen forms (0.42 vs 0.48 above refining every
// form).
const etsScreenTol = 1e-4

// etsScreened is one form after the screening stage of SelectETS.
type etsScreened struct {
	form                ETSForm
	errT, trend, season int8
	aicc                float64 // AICc with the seeds at their heuristic values
	x0, step            []float64
	evals               int
}

// SelectETS chooses the form with the smallest AICc (HKOS 2008 section 7.2; Hyndman et al.
// 2002 IJF, section 3) among the allowed forms that suit y (etsFormFits), in two stages to save
// most of the cost of the joint search:
//
//  1. screen: every form gets the weights-only first stage of FitETS (seeds held at the
//     heuristic values of etsSeedStates, stopping tolerance etsScreenTol) and is scored by
//     the AICc there, counting the seeds as estimated;
//  2. refine: the etsRefined best-screened forms get the full joint search of FitETS, from
//     their screened weights, and the one with the smallest AICc is returned.
//
// Screened AICc values are upper bounds of the refined ones (the refinement starts at the
// screened point and only improves the criterion), so a form left out could only have won if
// optimising its seeds gained more than its gap to the second-best screened form. Our choice,
// made to cut the search cost about fourfold on monthly data; R's ets refines every form. The
// fit's Candidates lists every form with its refined AICc, or its screened AICc when it was
// not refined (Screened is true).
func SelectETS(y []float64, m int, opts *ETSOptions) (*ETSFit, error) {
	return selectETS(y, m, opts, etsRefined)
}

// selectETS is SelectETS refining the best `refine` screened forms.
func selectETS(y []float64, m int, opts *ETSOptions, refine int) (*ETSFit, error) {
	positive, err := checkSeries(y)
	if err != nil {
		return nil, err
	}
	var ft etsFitter
	ft.init(y, m)
	ft.screenTol = etsScreenTol
	var cands []ETSCandidate
	var screened []etsScreened
	evals := 0
	var lastErr error
	for _, form := range etsForms(opts) {
		errT, trend, season, err := form.codes()
		if err != nil {
			return nil, err
		}
		if err := etsFormFits(len(y), m, positive, errT, trend, season); err != nil {
			lastErr = err
			continue
		}
		crit, ev, err := ft.screen(form, errT, trend, season)
		evals += ev
		if err != nil {
			cands = append(cands, ETSCandidate{Form: form, AICc: math.NaN(), Err: err})
			lastErr = err
			continue
		}
		d := etsK(trend, season, ft.formSeason(season))
		screened = append(screened, etsScreened{form: form, errT: errT, trend: trend, season: season,
			aicc: etsAICc(crit, len(y), d), evals: ev,
			x0: append([]float64(nil), ft.x0[:d]...), step: append([]float64(nil), ft.step[:d]...)})
	}
	order := make([]int, len(screened))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return screened[order[a]].aicc < screened[order[b]].aicc })
	refined := map[int]bool{}
	var best *ETSFit
	var fits []*ETSFit
	for _, i := range order[:min(refine, len(order))] {
		sc := &screened[i]
		copy(ft.x0, sc.x0)
		copy(ft.step, sc.step)
		fit, err := ft.refine(sc.form, sc.errT, sc.trend, sc.season, 0)
		refined[i] = true
		if err != nil {
			cands = append(cands, ETSCandidate{Form: sc.form, AICc: math.NaN(), Err: err})
			lastErr = err
			continue
		}
		evals += fit.evals
		ic := fit.AICc()
		cands = append(cands, ETSCandidate{Form: sc.form, AICc: ic})
		if !math.IsNaN(ic) {
			fits = append(fits, fit)
		}
		if !math.IsNaN(ic) && (best == nil || ic < best.AICc()) {
			best = fit
		}
	}
	for i, sc := range screened {
		if !refined[i] {
			cands = append(cands, ETSCandidate{Form: sc.form, AICc: sc.aicc, Screened: true})
		}
	}
	if best == nil {
		if lastErr == nil {
			lastErr = errors.New("models: ETS: no form allowed by the options")
		}
		return nil, fmt.Errorf("models: ETS: no form could be fitted: %w", lastErr)
	}
	best.evals = evals
	best.candidates = cands
	best.refined = append([]*ETSFit{best}, slices.DeleteFunc(fits, func(f *ETSFit) bool { return f == best })...)
	return best, nil
}

// etsAICc is the AICc of ETSFit.AICc computed from the criterion of etsPass, n observations
// and k estimated parameters (the variance excluded).
func etsAICc(crit float64, n, k int) float64 {
	f := ETSFit{crit: crit, n: n, k: k}
	return f.AICc()
}

// etsModel is the ETS zoo member: the automatic search over the forms its spec allows.
type etsModel struct {
	name string
	opts *ETSOptions
}

func newETS(s Spec) (Model, error) {
	if s.ETS != nil {
		check := func(field string, list []string, valid ...string) error {
			for i, c := range list {
				ok := false
				for _, v := range valid {
					ok = ok || c == v
				}
				if !ok {
					return fmt.Errorf("models: %s: ets.%s[%d] is %q: want one of %v", s.DisplayName(), field, i, c, valid)
				}
			}
			return nil
		}
		if err := check("errors", s.ETS.Errors, "A", "M"); err != nil {
			return nil, err
		}
		if err := check("trends", s.ETS.Trends, "N", "A", "Ad"); err != nil {
			return nil, err
		}
		if err := check("seasons", s.ETS.Seasons, "N", "A", "M"); err != nil {
			return nil, err
		}
		if len(etsForms(s.ETS)) == 0 {
			return nil, fmt.Errorf("models: %s: ets allows no form (additive error with multiplicative season is excluded)", s.DisplayName())
		}
	}
	return &etsModel{name: s.DisplayName(), opts: s.ETS}, nil
}

// Family returns FamilyETS.
func (e *etsModel) Family() string { return FamilyETS }

// MinLength returns the shortest series some allowed form can be fitted to (n > k + 4, see
// etsFormFits), assuming positive data.
func (e *etsModel) MinLength(seasonLength int) int {
	best := math.MaxInt
	for _, f := range etsForms(e.opts) {
		_, trend, season, _ := f.codes()
		if season != etsNone && (seasonLength < 2 || seasonLength > etsMaxSeason) {
			continue
		}
		best = min(best, etsK(trend, season, seasonLength)+5)
	}
	return best
}

// Fit runs the automatic search (SelectETS) over the allowed forms and forecasts with the
// Akaike-weighted mean of the forms it refined (AkaikeWeighted); with one form refined, that
// form's fit itself.
func (e *etsModel) Fit(y []float64, m int) (Fitted, error) {
	if m < 1 {
		panic("models: ETS: season length must be >= 1")
	}
	fit, err := SelectETS(y, m, e.opts)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", e.name, err)
	}
	return AkaikeWeighted(fit), nil
}

// Update returns the fit with the same weights and seed states filtered over y, a longer
// history of which the fitted one is a prefix (the backtest's "updating", see
// backtest.Updater). The criteria and residuals are those of y at the fixed estimates.
func (f *ETSFit) Update(y []float64) (Fitted, error) {
	if len(y) < f.n {
		return nil, fmt.Errorf("models: ETS: update needs at least the %d fitted observations, got %d", f.n, len(y))
	}
	return ETSAt(y, f.m, f.form, f.par)
}
