package models

import "math"

// Component codes of the ETS(error, trend, season) taxonomy (Hyndman, Koehler, Ord & Snyder 2008,
// "Forecasting with Exponential Smoothing", section 2.5, Tables 2.2 and 2.3).
const (
	etsAdd    int8 = iota + 1 // additive error, trend or season
	etsMul                    // multiplicative error or season
	etsDamped                 // additive damped trend
	etsNone   int8 = 0        // no trend or no season
)

// etsTiny is the magnitude below which a divisor is treated as zero in the recursions.
const etsTiny = 1e-10

// etsHuge replaces a ratio whose divisor is zero, so that the likelihood becomes useless
// rather than NaN.
const etsHuge = 1e10

// etsState is the seed of the recursion: smoothing weights and initial states.
// seas[j] is s_{-j}: seas[0] is the most recent seasonal state at time 0 and seas[m-1] the oldest,
// the one used by the first observation.
type etsState struct {
	alpha, beta, gamma, phi float64
	l0, b0                  float64
	seas                    []float64
}

// etsPass runs the innovations state-space recursion of one form over y and returns the
// criterion minimised by maximum likelihood (HKOS 2008 section 5.1, eq. 5.3 concentrated over
// the variance):
//
//	crit = n log(sum e_t^2) + 2 sum log|r(x_{t-1})|
//
// where e_t = y_t - mu_t for additive error, e_t = (y_t - mu_t)/mu_t and r(x) = mu_t for
// multiplicative error (the second sum is present only for multiplicative error). The log
// likelihood is -crit/2 up to the constant n(log(2 pi / n) + 1)/2 (see etsLogLik).
//
// The point recursions are written in the error-free "smoothing" form that does not depend on
// the error type (HKOS 2008 Table 2.3 rewritten with e_t = y_t - mu_t):
//
//	q   = l + phi b                         (phi b = b for A trend, 0 for no trend)
//	p   = y, y - s_{t-m} or y / s_{t-m}     (season N, A, M)
//	l'  = q + alpha (p - q)
//	b'  = phi b + beta (p - q)
//	s'  = s_{t-m} + gamma (y - q - s_{t-m})           (additive season)
//	s'  = s_{t-m} + gamma (y / q - s_{t-m})           (multiplicative season)
//
// buf is scratch of length m (unused for non-seasonal forms). When fitted or resid are
// non-nil they receive mu_t and e_t; when end is non-nil it receives the final level, slope
// and the seasonal states newest first (end[0] = l_n, end[1] = b_n, end[2+k] = s_{n-k}). The pass allocates nothing. It returns +Inf when the
// recursion breaks down (a multiplicative-error forecast at zero).
func etsPass(y []float64, m int, errT, trend, season int8, st *etsState, buf, fitted, resid, end []float64) (crit, sse float64) {
	l, b := st.l0, st.b0
	alpha, beta, gamma := st.alpha, st.beta, st.gamma
	phi := st.phi
	switch trend {
	case etsNone:
		phi, b = 0, 0
	case etsAdd:
		phi = 1
	}
	if season != etsNone {
		for j := 0; j < m; j++ {
			buf[j] = st.seas[m-1-j]
		}
	}
	j := 0
	var sumLog float64
	prod := 1.0
	for i, yt := range y {
		phib := phi * b
		q := l + phib
		var s, f float64
		switch season {
		case etsNone:
			f = q
		case etsAdd:
			s = buf[j]
			f = q + s
		default:
			s = buf[j]
			f = q * s
		}
		var e float64
		if errT == etsAdd {
			e = yt - f
		} else {
			if math.Abs(f) < etsTiny {
				return math.Inf(1), math.Inf(1)
			}
			e = (yt - f) / f
			// sum log|f| as the log of a running product, renormalised before it can
			// overflow: one multiplication per step instead of one logarithm.
			prod *= math.Abs(f)
			if prod > 1e150 || prod < 1e-150 {
				sumLog += math.Log(prod)
				prod = 1
			}
		}
		sse += e * e
		if fitted != nil {
			fitted[i] = f
			resid[i] = e
		}
		var p float64
		switch season {
		case etsNone:
			p = yt
		case etsAdd:
			p = yt - s
		default:
			if math.Abs(s) < etsTiny {
				p = etsHuge
			} else {
				p = yt / s
			}
		}
		l = q + alpha*(p-q)
		b = phib + beta*(p-q)
		if season != etsNone {
			var r float64
			if season == etsAdd {
				r = yt - q
			} else if math.Abs(q) < etsTiny {
				r = etsHuge
			} else {
				r = yt / q
			}
			buf[j] = s + gamma*(r-s)
			j++
			if j == m {
				j = 0
			}
		}
	}
	if end != nil {
		end[0], end[1] = l, b
		if season != etsNone {
			newestFirst(end[2:2+m], buf, j)
		}
	}
	crit = float64(len(y)) * math.Log(sse)
	if errT == etsMul {
		crit += 2 * (sumLog + math.Log(prod))
	}
	if math.IsNaN(crit) {
		return math.Inf(1), sse
	}
	if crit < -1e10 {
		// A perfect fit: keep the criterion finite so that comparisons stay meaningful.
		crit = -1e10
	}
	return crit, sse
}

// etsStep applies one update of the smoothing form (see etsPass) with observation yt and
// returns the new level, slope and circular index.
func etsStep(l, b float64, buf []float64, j, m int, trend, season int8, phi, alpha, beta, gamma, yt float64) (float64, float64, int) {
	phib := phi * b
	if trend == etsNone {
		phib = 0
	}
	q := l + phib
	var s, p float64
	switch season {
	case etsNone:
		p = yt
	case etsAdd:
		s = buf[j]
		p = yt - s
	default:
		s = buf[j]
		if math.Abs(s) < etsTiny {
			p = etsHuge
		} else {
			p = yt / s
		}
	}
	l = q + alpha*(p-q)
	b = phib + beta*(p-q)
	if season != etsNone {
		var r float64
		if season == etsAdd {
			r = yt - q
		} else if math.Abs(q) < etsTiny {
			r = etsHuge
		} else {
			r = yt / q
		}
		buf[j] = s + gamma*(r-s)
		j++
		if j == m {
			j = 0
		}
	}
	return l, b, j
}

// newestFirst copies a circular seasonal buffer whose oldest state sits at index j into dst,
// newest first.
func newestFirst(dst, buf []float64, j int) {
	m := len(buf)
	for k := 0; k < m; k++ {
		dst[k] = buf[(j-1-k+2*m)%m]
	}
}

// etsPoint returns the h-step point forecasts from the final states (HKOS 2008 Table 2.2,
// forecast column): mu_{n+k} = (l + phi_k b) (+ or x) s_{n+k-m}, with phi_k = phi + ... + phi^k
// (phi_k = k for an undamped trend). seas holds the seasonal states newest first.
func etsPoint(l, b float64, seas []float64, m int, trend, season int8, phi float64, dst []float64) {
	phik := 0.0
	pw := 1.0
	for k := range dst {
		switch trend {
		case etsAdd:
			phik = float64(k + 1)
		case etsDamped:
			pw *= phi
			phik += pw
		}
		f := l + phik*b
		switch season {
		case etsAdd:
			f += seas[m-1-k%m]
		case etsMul:
			f *= seas[m-1-k%m]
		}
		dst[k] = f
	}
}
