package models

import (
	"errors"
	"fmt"
	"math"
	"strconv"
)

func init() { Register(FamilyARIMA, newARIMA) }

// FamilyARIMA is the seasonal ARIMA family with automatic order selection (SelectARIMA).
const FamilyARIMA = "ARIMA"

// ARIMAOrder is a seasonal ARIMA(p,d,q)(P,D,Q)m order (Box, Jenkins & Reinsel 2008, chapter
// 9): with B the backshift operator,
//
//	phi(B) Phi(B^m) (1-B)^d (1-B^m)^D (y_t - mu_t) = theta(B) Theta(B^m) e_t,   e_t ~ N(0, sigma^2)
//
// phi(B) = 1 - phi_1 B - ... - phi_p B^p, Phi(B^m) = 1 - Phi_1 B^m - ... - Phi_P B^{Pm},
// theta(B) = 1 + theta_1 B + ..., Theta(B^m) = 1 + Theta_1 B^m + .... Constant adds mu_t: the
// mean (d+D = 0) or a linear drift mu_t = delta t (d+D = 1); it is not allowed for d+D >= 2.
type ARIMAOrder struct {
	P, D, Q    int
	SP, SD, SQ int
	Constant   bool
}

// String returns the label, e.g. "ARIMA(0,1,1)(0,1,1)12" or "ARIMA(1,1,0)+drift".
func (o ARIMAOrder) String(m int) string {
	s := "ARIMA(" + strconv.Itoa(o.P) + "," + strconv.Itoa(o.D) + "," + strconv.Itoa(o.Q) + ")"
	if m > 1 && (o.SP > 0 || o.SD > 0 || o.SQ > 0) {
		s += "(" + strconv.Itoa(o.SP) + "," + strconv.Itoa(o.SD) + "," + strconv.Itoa(o.SQ) + ")" + strconv.Itoa(m)
	}
	if o.Constant {
		if o.D+o.SD == 0 {
			s += "+mean"
		} else {
			s += "+drift"
		}
	}
	return s
}

// ARIMACoef holds the coefficients of an ARIMA model in the sign convention of ARIMAOrder:
// AR[i] = phi_{i+1}, MA[i] = theta_{i+1}, SAR[i] = Phi_{i+1}, SMA[i] = Theta_{i+1}. Constant
// is the mean mu (d+D = 0) or the drift delta per time step (d+D = 1).
type ARIMACoef struct {
	AR, MA, SAR, SMA []float64
	Constant         float64
}

// ARIMAFit is one fitted ARIMA model. It implements Fitted.
type ARIMAFit struct {
	order      ARIMAOrder
	m          int
	coef       ARIMACoef
	y          []float64
	w          []float64 // differenced series
	c          float64   // constant of the differenced series: mu, or delta*(d==1 ? 1 : m)
	loglik     float64
	sigma2     float64
	nw         int
	resid      []float64
	evals      int
	candidates []ARIMACandidate
}

// ARIMACandidate records one order tried by SelectARIMA and its AICc (+Inf when the fit
// failed or was rejected, with Err saying why).
type ARIMACandidate struct {
	Order ARIMAOrder
	AICc  float64
	Err   error
}

// Name returns the order label (ARIMAOrder.String).
func (f *ARIMAFit) Name() string { return f.order.String(f.m) }

// Order returns the fitted order.
func (f *ARIMAFit) Order() ARIMAOrder { return f.order }

// Coef returns a copy of the estimated coefficients.
func (f *ARIMAFit) Coef() ARIMACoef {
	c := f.coef
	c.AR = append([]float64(nil), c.AR...)
	c.MA = append([]float64(nil), c.MA...)
	c.SAR = append([]float64(nil), c.SAR...)
	c.SMA = append([]float64(nil), c.SMA...)
	return c
}

// Params returns phi1.., theta1.., Phi1.., Theta1.. (Box-Jenkins notation), "mean" or "drift"
// with a constant, and sigma2.
func (f *ARIMAFit) Params() map[string]float64 {
	out := map[string]float64{"sigma2": f.sigma2}
	put := func(prefix string, v []float64) {
		for i, x := range v {
			out[prefix+strconv.Itoa(i+1)] = x
		}
	}
	put("phi", f.coef.AR)
	put("theta", f.coef.MA)
	put("Phi", f.coef.SAR)
	put("Theta", f.coef.SMA)
	if f.order.Constant {
		if f.order.D+f.order.SD == 0 {
			out["mean"] = f.coef.Constant
		} else {
			out["drift"] = f.coef.Constant
		}
	}
	return out
}

// NumParams returns the number of estimated parameters counted by the information criteria:
// p + q + P + Q, one for a constant, one for sigma^2.
func (f *ARIMAFit) NumParams() int {
	k := f.order.P + f.order.Q + f.order.SP + f.order.SQ + 1
	if f.order.Constant {
		k++
	}
	return k
}

// LogLik returns the exact Gaussian log likelihood of the differenced series w (n' = n - d - mD
// values) at the estimates, concentrated over sigma^2 (Harvey 1989 section 3.4; Durbin &
// Koopman 2012 section 7.2, the prediction error decomposition):
//
//	log L = -1/2 (n' log(2 pi sigma^2) + sum_t log F_t + n'),   sigma^2 = (1/n') sum_t v_t^2 / F_t
//
// with v_t, F_t the Kalman filter's innovations and their variances (unit innovation
// variance). R's stats::arima reports the same quantity for method "ML".
func (f *ARIMAFit) LogLik() float64 { return f.loglik }

// AIC returns -2 log L + 2k with k = NumParams.
func (f *ARIMAFit) AIC() float64 { return -2*f.loglik + 2*float64(f.NumParams()) }

// AICc returns AIC + 2k(k+1)/(n' - k - 1) with n' the differenced length (Hurvich & Tsai 1989;
// the criterion of Hyndman & Khandakar 2008, section 3.2). It is +Inf when n' <= k + 1.
func (f *ARIMAFit) AICc() float64 {
	k := float64(f.NumParams())
	den := float64(f.nw) - k - 1
	if den <= 0 {
		return math.Inf(1)
	}
	return f.AIC() + 2*k*(k+1)/den
}

// BIC returns -2 log L + k log n'.
func (f *ARIMAFit) BIC() float64 {
	return -2*f.loglik + float64(f.NumParams())*math.Log(float64(f.nw))
}

// Sigma2 returns the innovation variance estimate used by the intervals,
//
//	sigma^2 = sum_t (v_t^2 / F_t) / (n' - c),   c = p + q + P + Q (+1 with a constant),
//
// the maximum likelihood estimate with a degrees-of-freedom correction, as R forecast 8.20's
// Arima reports it (R's sum also holds the d + mD residuals of its diffuse start, each about
// y_t^2 / 1e6, so the two differ slightly for differenced models).
func (f *ARIMAFit) Sigma2() float64 { return f.sigma2 }

// Residuals returns the innovations v_t of the differenced series (length n - d - mD).
func (f *ARIMAFit) Residuals() []float64 { return append([]float64(nil), f.resid...) }

// InSample returns y_t - v_t, the one-step-ahead predictions, with NaN for the first d + mD
// observations that differencing consumes.
func (f *ARIMAFit) InSample() []float64 {
	n, nd := len(f.y), len(f.y)-len(f.w)
	out := make([]float64, n)
	for t := range out {
		if t < nd {
			out[t] = math.NaN()
		} else {
			out[t] = f.y[t] - f.resid[t-nd]
		}
	}
	return out
}

// Evaluations returns the number of likelihood evaluations (the whole search for SelectARIMA).
func (f *ARIMAFit) Evaluations() int { return f.evals }

// Candidates returns the orders SelectARIMA tried, in search order (nil for a fixed order).
func (f *ARIMAFit) Candidates() []ARIMACandidate { return f.candidates }

// arimaMaxSeason is the longest season with seasonal terms: the state dimension grows with
// m (P m + p), so longer seasons are modelled without seasonal terms (common practice; the same
// cap as the ETS family; Hyndman & Athanasopoulos, FPP2 section 12.1, advise Fourier terms for
// long seasons such as weekly data's year). R forecast 8.20's auto.arima does fit them: on
// ts(y, frequency = 52) it took D = 1 on five of six generated weekly series, in 0.04 to 91 s
// per series (test/reference/r/weekly.R).
const arimaMaxSeason = 24

// checkOrder reports why an order cannot be used with season length m.
func checkOrder(o ARIMAOrder, m int) error {
	if o.P < 0 || o.D < 0 || o.Q < 0 || o.SP < 0 || o.SD < 0 || o.SQ < 0 {
		return fmt.Errorf("models: ARIMA: negative order in %+v", o)
	}
	if (o.SP > 0 || o.SD > 0 || o.SQ > 0) && (m < 2 || m > arimaMaxSeason) {
		return fmt.Errorf("models: ARIMA: seasonal terms need a season length in [2, %d], got %d", arimaMaxSeason, m)
	}
	if o.Constant && o.D+o.SD > 1 {
		return errors.New("models: ARIMA: a constant needs d + D <= 1")
	}
	return nil
}

// difference returns (1-B)^d (1-B^m)^D y.
func difference(y []float64, d, sd, m int) []float64 {
	w := append([]float64(nil), y...)
	for i := 0; i < sd; i++ {
		for t := len(w) - 1; t >= m; t-- {
			w[t] -= w[t-m]
		}
		w = w[m:]
	}
	for i := 0; i < d; i++ {
		for t := len(w) - 1; t >= 1; t-- {
			w[t] -= w[t-1]
		}
		w = w[1:]
	}
	return w
}

// diffPoly returns delta_1..delta_nd with (1-B)^d (1-B^m)^D = 1 - sum_k delta_k B^k.
func diffPoly(d, sd, m int) []float64 {
	c := []float64{1}
	mul := func(lag int) {
		out := make([]float64, len(c)+lag)
		for i, v := range c {
			out[i] += v
			out[i+lag] -= v
		}
		c = out
	}
	for i := 0; i < d; i++ {
		mul(1)
	}
	for i := 0; i < sd; i++ {
		mul(m)
	}
	out := make([]float64, len(c)-1)
	for k := 1; k < len(c); k++ {
		out[k-1] = -c[k]
	}
	return out
}

// expand writes the lag-k coefficients of the product of a non-seasonal polynomial with
// coefficients a (lags 1..len(a)) and a seasonal one with coefficients s (lags m, 2m, ...),
// in the sign convention 1 + sign * sum c_k B^k for both factors and the product; it returns
// dst[:len(a)+m*len(s)] with dst[k-1] the lag-k coefficient. sign is -1 for AR, +1 for MA.
func expand(dst, a, s []float64, m int, sign float64) []float64 {
	n := len(a) + m*len(s)
	dst = dst[:n]
	clear(dst)
	// (1 + sign A(B)) (1 + sign S(B^m)) = 1 + sign A + sign S + A S; in the product's own sign
	// convention that is c = A + S + sign * A S.
	copy(dst, a)
	for j, sv := range s {
		dst[(j+1)*m-1] += sv
		for i, av := range a {
			dst[(j+1)*m+i] += sign * av * sv
		}
	}
	return dst
}

// pacfToCoef maps u in R^k to the coefficients of a stationary AR(k) polynomial
// 1 - c_1 B - ... - c_k B^k: partial autocorrelations pi_j = tanh(u_j), then the Durbin-Levinson
// recursion c^{(j)}_j = pi_j, c^{(j)}_i = c^{(j-1)}_i - pi_j c^{(j-1)}_{j-i} (Barndorff-Nielsen &
// Schou 1973; Jones 1980, Technometrics 22(3)). Every stationary polynomial has such a u, so
// stationarity (and, with the signs flipped, invertibility) is enforced without constraints.
// tmp must have length >= k.
func pacfToCoef(dst, u, tmp []float64) {
	k := len(u)
	for j := 0; j < k; j++ {
		pj := math.Tanh(u[j])
		copy(tmp[:j], dst[:j])
		for i := 0; i < j; i++ {
			dst[i] = tmp[i] - pj*tmp[j-1-i]
		}
		dst[j] = pj
	}
}

// coefToPACF is the inverse of pacfToCoef for a stationary polynomial: the backward
// Durbin-Levinson step pi_j = c^{(j)}_j, c^{(j-1)}_i = (c^{(j)}_i + pi_j c^{(j)}_{j-i}) / (1 -
// pi_j^2). It reports false when some |pi_j| >= 1 (the polynomial is not stationary).
func coefToPACF(dst, c []float64) bool {
	k := len(c)
	cur := append([]float64(nil), c...)
	tmp := make([]float64, k)
	for j := k - 1; j >= 0; j-- {
		pj := cur[j]
		if !(math.Abs(pj) < 1) {
			return false
		}
		dst[j] = math.Atanh(pj)
		den := 1 - pj*pj
		for i := 0; i < j; i++ {
			tmp[i] = (cur[i] + pj*cur[j-1-i]) / den
		}
		copy(cur[:j], tmp[:j])
	}
	return true
}
