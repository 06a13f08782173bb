package models

import (
	"fmt"
	"math"

	"almanac.dev/almanac/trainer/numeric/kalman"
	"almanac.dev/almanac/trainer/numeric/neldermead"
)

// arimaFitter holds per-series scratch shared by the orders of one search, so that the
// likelihood evaluations allocate nothing.
type arimaFitter struct {
	y     []float64
	m     int
	o     ARIMAOrder
	w     []float64 // differenced series
	x     []float64 // w minus the constant
	e     []float64 // CSS residuals
	sd    float64   // standard deviation of w (scale of the constant)
	phi   []float64 // expanded AR coefficients
	theta []float64 // expanded MA coefficients
	ar    []float64 // block coefficients: AR, MA, SAR, SMA
	ma    []float64
	sar   []float64
	sma   []float64
	tmp   []float64
	space kalman.ARMA
	nm    neldermead.Work
	evals int
}

func newARIMAFitter(y []float64, m int) *arimaFitter {
	return &arimaFitter{y: y, m: m, phi: make([]float64, 64), theta: make([]float64, 64), tmp: make([]float64, 16)}
}

// setOrder prepares the differenced series for order o.
func (ft *arimaFitter) setOrder(o ARIMAOrder) {
	if ft.w == nil || ft.o.D != o.D || ft.o.SD != o.SD {
		ft.w = difference(ft.y, o.D, o.SD, ft.m)
		ft.x = make([]float64, len(ft.w))
		ft.e = make([]float64, len(ft.w))
		mean := 0.0
		for _, v := range ft.w {
			mean += v
		}
		mean /= float64(len(ft.w))
		ss := 0.0
		for _, v := range ft.w {
			ss += (v - mean) * (v - mean)
		}
		ft.sd = math.Sqrt(ss / float64(len(ft.w)))
		if ft.sd == 0 {
			ft.sd = 1
		}
	}
	ft.o = o
	ft.ar, ft.ma = make([]float64, o.P), make([]float64, o.Q)
	ft.sar, ft.sma = make([]float64, o.SP), make([]float64, o.SQ)
	if n := max(o.P, o.Q, o.SP, o.SQ); len(ft.tmp) < n {
		ft.tmp = make([]float64, n)
	}
	if n := max(o.P+ft.m*o.SP, o.Q+ft.m*o.SQ) + 1; len(ft.phi) < n {
		ft.phi = make([]float64, n)
		ft.theta = make([]float64, n)
	}
}

// dim is the length of the optimiser's vector for the current order.
func (ft *arimaFitter) dim() int {
	o := ft.o
	k := o.P + o.Q + o.SP + o.SQ
	if o.Constant {
		k++
	}
	return k
}

// decode maps the optimiser's vector u = [AR, MA, SAR, SMA in PACF space, constant / scale]
// into the block coefficients (pacfToCoef; MA blocks with flipped signs, so that theta(B) =
// 1 + theta_1 B + ... is invertible), the expanded polynomials and the series x = w - c. It
// returns the constant c of the differenced series.
func (ft *arimaFitter) decode(u []float64) float64 {
	o := ft.o
	i := 0
	for _, b := range [...]struct {
		dst  []float64
		sign float64
	}{{ft.ar, 1}, {ft.ma, -1}, {ft.sar, 1}, {ft.sma, -1}} {
		k := len(b.dst)
		pacfToCoef(b.dst, u[i:i+k], ft.tmp)
		for j := range b.dst {
			b.dst[j] *= b.sign
		}
		i += k
	}
	c := 0.0
	if o.Constant {
		c = u[i] * ft.sd
	}
	ft.setPolys(c)
	return c
}

// setPolys expands the block coefficients and fills x = w - c.
func (ft *arimaFitter) setPolys(c float64) {
	ft.phi = expand(ft.phi[:cap(ft.phi)], ft.ar, ft.sar, ft.m, -1)
	ft.theta = expand(ft.theta[:cap(ft.theta)], ft.ma, ft.sma, ft.m, 1)
	for t, v := range ft.w {
		ft.x[t] = v - c
	}
}

// css returns log(S/n_c), the conditional-sum-of-squares criterion (Box, Jenkins & Reinsel 2008,
// section 7.1.2) with S = sum e_t^2 over t >= p' (p' = p + mP), where
//
//	e_t = x_t - sum_k phi'_k x_{t-k} - sum_k theta'_k e_{t-k},  e_t = 0 for t < p'
//
// with the expanded polynomials phi', theta'. It is used only for starting values.
func (ft *arimaFitter) css() float64 {
	x, e, phi, th := ft.x, ft.e, ft.phi, ft.theta
	start := len(phi)
	if start >= len(x) {
		return math.Inf(1)
	}
	s := 0.0
	for t := range x {
		if t < start {
			e[t] = 0
			continue
		}
		v := x[t]
		for k, c := range phi {
			v -= c * x[t-k-1]
		}
		for k, c := range th {
			if t-k-1 < 0 {
				break
			}
			v -= c * e[t-k-1]
		}
		e[t] = v
		s += v * v
	}
	return math.Log(s / float64(len(x)-start))
}

// ml returns log(sigma^2) + (1/n') sum log F_t, which is -2 log L / n' up to a constant (see
// ARIMAFit.LogLik), from the Kalman filter at the current polynomials.
func (ft *arimaFitter) ml(resid []float64) (float64, kalman.Result) {
	ft.space.Setup(ft.phi, ft.theta)
	r := ft.space.Filter(ft.x, resid)
	if !r.OK || !(r.SSQ > 0) {
		return math.Inf(1), r
	}
	n := float64(r.N)
	return math.Log(r.SSQ/n) + r.SumLog/n, r
}

// arimaBudget is the evaluation budget per free parameter for each stage of the fit.
const arimaBudget = 100

// fit estimates the current order: the conditional sum of squares from zero coefficients
// (and the mean of w as constant) gives starting values, then the exact likelihood is maximised
// from there (the "CSS then ML" scheme of Box, Jenkins & Reinsel 2008, chapter 7), both with
// Nelder-Mead in the unconstrained PACF parameterisation (pacfToCoef), which keeps every
// candidate stationary and invertible. The search restarts once from its best point with a
// fresh simplex (common practice with Nelder-Mead).
func (ft *arimaFitter) fit() (*ARIMAFit, error) {
	o := ft.o
	nw := len(ft.w)
	k := ft.dim()
	if nw < k+2 {
		return nil, fmt.Errorf("models: ARIMA: %s: %d differenced observations are too few for %d coefficients: %w", o.String(ft.m), nw, k, ErrTooShort)
	}
	u := make([]float64, k)
	step := make([]float64, k)
	for i := range step {
		step[i] = 0.3
	}
	if o.Constant {
		mean := 0.0
		for _, v := range ft.w {
			mean += v
		}
		u[k-1] = mean / float64(nw) / ft.sd
		step[k-1] = 0.2
	}
	evals := 0
	if k > 0 {
		cssF := func(v []float64) float64 {
			ft.decode(v)
			return ft.css()
		}
		r := neldermead.Minimize(cssF, u, step, arimaBudget*(k+1), 1e-8, &ft.nm)
		evals += r.Evals
		if !math.IsInf(r.F, 1) {
			for i, v := range r.X {
				// Keep the start away from the boundary, where tanh is flat.
				u[i] = math.Max(-3, math.Min(3, v))
			}
		}
		mlF := func(v []float64) float64 {
			ft.decode(v)
			f, _ := ft.ml(nil)
			return f
		}
		for i := range step {
			step[i] = 0.1
		}
		res := neldermead.Minimize(mlF, u, step, arimaBudget*(k+1), 1e-9, &ft.nm)
		evals += res.Evals
		if res.Status == neldermead.NoFiniteSeed {
			return nil, fmt.Errorf("models: ARIMA: %s: the likelihood is not finite at the starting values", o.String(ft.m))
		}
		for restart := 0; restart < 1; restart++ {
			copy(u, res.X)
			f0 := res.F
			res = neldermead.Minimize(mlF, u, step, arimaBudget*(k+1), 1e-9, &ft.nm)
			evals += res.Evals
			if res.F >= f0 {
				res.X, res.F = u, f0
				break
			}
			if f0-res.F < 1e-9 {
				break
			}
		}
		copy(u, res.X)
	}
	c := ft.decode(u)
	ft.evals += evals
	fit, err := ft.finish(c)
	if err != nil {
		return nil, err
	}
	fit.evals = evals
	return fit, nil
}

// finish evaluates the current polynomials with constant c and assembles the fit.
func (ft *arimaFitter) finish(c float64) (*ARIMAFit, error) {
	o := ft.o
	resid := make([]float64, len(ft.w))
	f, r := ft.ml(resid)
	if math.IsInf(f, 0) || math.IsNaN(f) {
		return nil, fmt.Errorf("models: ARIMA: %s: the likelihood is not finite at the estimates", o.String(ft.m))
	}
	n := float64(r.N)
	fit := &ARIMAFit{order: o, m: ft.m, y: ft.y, w: ft.w, c: c, nw: r.N, resid: resid,
		loglik: -0.5 * (n*f + n + n*math.Log(2*math.Pi))}
	// sigma^2 for the intervals: the MLE with a degrees-of-freedom correction, as R forecast
	// 8.20 reports it.
	fit.sigma2 = r.SSQ / float64(r.N-fit.NumParams()+1)
	fit.coef = ARIMACoef{AR: append([]float64{}, ft.ar...), MA: append([]float64{}, ft.ma...),
		SAR: append([]float64{}, ft.sar...), SMA: append([]float64{}, ft.sma...)}
	if o.Constant {
		fit.coef.Constant = c
		if o.D+o.SD == 1 && o.SD == 1 {
			fit.coef.Constant = c / float64(ft.m)
		}
	}
	return fit, nil
}

// arimaCheck validates y, m and the order.
func arimaCheck(y []float64, m int, o ARIMAOrder) error {
	if err := checkFinite(FamilyARIMA, y); err != nil {
		return err
	}
	if err := checkOrder(o, m); err != nil {
		return err
	}
	if nd := o.D + o.SD*m; len(y) <= nd+1 {
		return fmt.Errorf("models: ARIMA: %s: %d observations leave nothing after differencing: %w", o.String(m), len(y), ErrTooShort)
	}
	return nil
}

// FitARIMA estimates one order on y with season length m (1 for none) by exact maximum
// likelihood (see arimaFitter.fit for the scheme and ARIMAFit.LogLik for the criterion).
func FitARIMA(y []float64, m int, o ARIMAOrder) (*ARIMAFit, error) {
	if m < 1 {
		panic("models: ARIMA: season length must be >= 1")
	}
	if err := arimaCheck(y, m, o); err != nil {
		return nil, err
	}
	ft := newARIMAFitter(y, m)
	ft.setOrder(o)
	return ft.fit()
}

// ARIMAAt evaluates an order on y at the given coefficients without estimating anything: the
// fit has the likelihood, criteria, residuals and forecasts at c (the parameter count is that
// of the order, as if c had been estimated). The coefficients must be stationary and invertible.
func ARIMAAt(y []float64, m int, o ARIMAOrder, c ARIMACoef) (*ARIMAFit, error) {
	if m < 1 {
		panic("models: ARIMA: season length must be >= 1")
	}
	if err := arimaCheck(y, m, o); err != nil {
		return nil, err
	}
	if len(c.AR) != o.P || len(c.MA) != o.Q || len(c.SAR) != o.SP || len(c.SMA) != o.SQ {
		return nil, fmt.Errorf("models: ARIMA: %s: coefficient counts %d,%d,%d,%d do not match the order",
			o.String(m), len(c.AR), len(c.MA), len(c.SAR), len(c.SMA))
	}
	ft := newARIMAFitter(y, m)
	ft.setOrder(o)
	copy(ft.ar, c.AR)
	copy(ft.ma, c.MA)
	copy(ft.sar, c.SAR)
	copy(ft.sma, c.SMA)
	cw := 0.0
	if o.Constant {
		cw = c.Constant
		if o.SD == 1 {
			cw *= float64(m)
		}
	}
	ft.setPolys(cw)
	return ft.finish(cw)
}

// Update returns the fit with the same order and coefficients filtered over y, a longer
// history of which the fitted one is a prefix (the backtest's "updating", Tashman 2000 section
// 3; see backtest.Updater): ARIMAAt at the fit's coefficients, so the likelihood, criteria and
// residuals are those of y, and an order chosen by SelectARIMA stays the chosen one.
func (f *ARIMAFit) Update(y []float64) (Fitted, error) {
	if len(y) < len(f.y) {
		return nil, fmt.Errorf("models: ARIMA: update needs at least the %d fitted observations, got %d", len(f.y), len(y))
	}
	return ARIMAAt(y, f.m, f.order, f.coef)
}
