package models

import "math"

// armaSpace is the state-space form of a zero-mean ARMA(p, q) process
//
//	x_t = phi_1 x_{t-1} + ... + phi_p x_{t-p} + e_t + theta_1 e_{t-1} + ... + theta_q e_{t-q}
//
// in the form of Harvey (1989) used by Gardner, Harvey & Phillips (1980) and Durbin & Koopman
// (2012, section 3.4): with r = max(p, q+1), phi_i = 0 for i > p and theta_j = 0 for j > q,
//
//	x_t     = Z a_t,                 Z = (1, 0, ..., 0)
//	a_{t+1} = T a_t + R e_{t+1},     T = [phi | I_{r-1} over 0'],  R = (1, theta_1, ..., theta_{r-1})'
//
// so a_t[i] = sum_{k>i} phi_k x_{t-(k-i)} + sum_{k>=i} theta_k e_{t-(k-i)}. The innovation variance
// is 1 throughout: the likelihood is concentrated over sigma^2 (Harvey 1989 section 3.4).
// phi and theta are the expanded (seasonal times non-seasonal) polynomials. All scratch is held
// here, so that repeated evaluations allocate nothing.
type armaSpace struct {
	r           int
	phi, theta  []float64 // length r (phi) and r (theta[0] = 1), zero-padded
	phiNZ, thNZ []int     // lags k >= 1 with phi_k != 0, and lags k >= 0 with theta_k != 0
	gamma, psi  []float64 // autocovariances gamma(0..r) and psi weights psi_0..psi_r
	a, pa       []float64 // state and scratch
	P, Pn       []float64 // r x r covariance, row-major, and scratch
	sys         []float64 // (p+1) x (p+2) augmented system for the autocovariances
}

// setup sizes the scratch for orders (p, q) and copies the coefficients in: phi[k-1] = phi_k,
// theta[k-1] = theta_k.
func (s *armaSpace) setup(phi, theta []float64) {
	p, q := len(phi), len(theta)
	r := max(p, q+1)
	if cap(s.phi) < r+1 {
		s.phi = make([]float64, r+1)
		s.theta = make([]float64, r+1)
		s.gamma = make([]float64, r+2)
		s.psi = make([]float64, r+2)
		s.a = make([]float64, r)
		s.pa = make([]float64, r)
	}
	if cap(s.P) < r*r {
		s.P = make([]float64, r*r)
		s.Pn = make([]float64, r*r)
	}
	s.r = r
	s.phi, s.theta = s.phi[:r+1], s.theta[:r+1]
	s.gamma, s.psi = s.gamma[:r+2], s.psi[:r+2]
	s.a, s.pa = s.a[:r], s.pa[:r]
	s.P, s.Pn = s.P[:r*r], s.Pn[:r*r]
	clear(s.phi)
	clear(s.theta)
	s.theta[0] = 1
	s.phiNZ, s.thNZ = s.phiNZ[:0], s.thNZ[:0]
	s.thNZ = append(s.thNZ, 0)
	for k := 1; k <= p; k++ {
		s.phi[k] = phi[k-1]
		if phi[k-1] != 0 {
			s.phiNZ = append(s.phiNZ, k)
		}
	}
	for k := 1; k <= q; k++ {
		s.theta[k] = theta[k-1]
		if theta[k-1] != 0 {
			s.thNZ = append(s.thNZ, k)
		}
	}
}

// autocov fills s.psi with the psi weights psi_0..psi_r of x_t = sum psi_j e_{t-j} and s.gamma
// with the autocovariances gamma(0..r+1) for unit innovation variance, by the linear system of
// Brockwell & Davis (1991, "Time Series: Theory and Methods", section 3.3, eq. 3.3.8):
//
//	gamma(k) - sum_{i=1}^p phi_i gamma(|k-i|) = sum_{j=k}^q theta_j psi_{j-k},   k = 0..p,
//
// solved by Gaussian elimination with partial pivoting, then the same recursion for k > p.
// It reports false when the system is singular (a unit root).
func (s *armaSpace) autocov() bool {
	r := s.r
	phi, th, psi := s.phi, s.theta, s.psi
	p := 0
	if len(s.phiNZ) > 0 {
		p = s.phiNZ[len(s.phiNZ)-1]
	}
	for j := 0; j <= r+1 && j < len(psi); j++ {
		v := 0.0
		if j < len(th) {
			v = th[j]
		}
		for _, i := range s.phiNZ {
			if i <= j {
				v += phi[i] * psi[j-i]
			}
		}
		psi[j] = v
	}
	rhs := func(k int) float64 {
		v := 0.0
		for _, j := range s.thNZ {
			if j >= k {
				v += th[j] * psi[j-k]
			}
		}
		return v
	}
	w := p + 2
	if cap(s.sys) < (p+1)*w {
		s.sys = make([]float64, (p+1)*w)
	}
	A := s.sys[:(p+1)*w]
	clear(A)
	for k := 0; k <= p; k++ {
		row := A[k*w : (k+1)*w]
		row[k] += 1
		for _, i := range s.phiNZ {
			row[abs(k-i)] -= phi[i]
		}
		row[p+1] = rhs(k)
	}
	// Gaussian elimination with partial pivoting on the (p+1) x (p+2) augmented matrix.
	for c := 0; c <= p; c++ {
		piv := c
		for i := c + 1; i <= p; i++ {
			if math.Abs(A[i*w+c]) > math.Abs(A[piv*w+c]) {
				piv = i
			}
		}
		if math.Abs(A[piv*w+c]) < 1e-12 {
			return false
		}
		if piv != c {
			for j := c; j < w; j++ {
				A[c*w+j], A[piv*w+j] = A[piv*w+j], A[c*w+j]
			}
		}
		d := A[c*w+c]
		for i := c + 1; i <= p; i++ {
			f := A[i*w+c] / d
			if f == 0 {
				continue
			}
			for j := c; j < w; j++ {
				A[i*w+j] -= f * A[c*w+j]
			}
		}
	}
	g := s.gamma
	for c := p; c >= 0; c-- {
		v := A[c*w+p+1]
		for j := c + 1; j <= p; j++ {
			v -= A[c*w+j] * g[j]
		}
		g[c] = v / A[c*w+c]
	}
	for k := p + 1; k < len(g); k++ {
		v := rhs(k)
		for _, i := range s.phiNZ {
			v += phi[i] * g[k-i]
		}
		g[k] = v
	}
	return g[0] > 0 && !math.IsInf(g[0], 0) && !math.IsNaN(g[0])
}

func abs(i int) int {
	if i < 0 {
		return -i
	}
	return i
}

// initCov sets s.P to the stationary covariance P_1 = E[a_t a_t'] of the state (unit innovation
// variance), the solution of P = T P T' + R R' that Gardner, Harvey & Phillips (1980) compute.
// It is computed directly from the representation of a_t[i] in armaSpace's doc comment, with
// E[x_{t-u} x_{t-v}] = gamma(u-v), E[x_{t-u} e_{t-v}] = psi_{v-u} (v >= u, else 0) and
// E[e_{t-u} e_{t-v}] = [u = v], summing over the non-zero coefficients only. It reports false
// when the process is not stationary.
func (s *armaSpace) initCov() bool {
	if !s.autocov() {
		return false
	}
	r := s.r
	phi, th, g, psi := s.phi, s.theta, s.gamma, s.psi
	cxe := func(u, v int) float64 { // E[x_{t-u} e_{t-v}]
		if v >= u {
			return psi[v-u]
		}
		return 0
	}
	for i := 0; i < r; i++ {
		for j := i; j < r; j++ {
			v := 0.0
			for _, k := range s.phiNZ {
				if k <= i {
					continue
				}
				u := k - i
				for _, l := range s.phiNZ {
					if l <= j {
						continue
					}
					v += phi[k] * phi[l] * g[abs(u-(l-j))]
				}
				for _, l := range s.thNZ {
					if l < j {
						continue
					}
					v += phi[k] * th[l] * cxe(u, l-j)
				}
			}
			for _, k := range s.thNZ {
				if k < i {
					continue
				}
				u := k - i
				for _, l := range s.phiNZ {
					if l <= j {
						continue
					}
					v += th[k] * phi[l] * cxe(l-j, u)
				}
				if l := u + j; l < r {
					v += th[k] * th[l]
				}
			}
			s.P[i*r+j] = v
			s.P[j*r+i] = v
		}
	}
	return true
}

// armaFilter is the outcome of one pass of the Kalman filter.
type armaFilter struct {
	ssq    float64 // sum v_t^2 / F_t
	sumLog float64 // sum log F_t
	n      int
	ok     bool
}

// steadyTol is the bound on trace(P_t - R R') below which the filter switches to the steady
// state: the state is then known from the past up to rounding, F_t = 1 and the gain is R, so the
// update needs O(r) work (Durbin & Koopman 2012, section 4.3.4, on steady-state filtering).
const steadyTol = 1e-10

// filter runs the Kalman filter (Durbin & Koopman 2012, section 4.3, eqs. 4.24-4.26) on the
// zero-mean series x, from a_1 = 0 and P_1 = initCov(). For each t
//
//	v_t = x_t - a_t[0],  F_t = P_t[0,0],
//	a_{t|t} = a_t + P_t[.,0] v_t / F_t,   P_{t|t} = P_t - P_t[.,0] P_t[0,.] / F_t,
//	a_{t+1} = T a_{t|t},                 P_{t+1} = T P_{t|t} T' + R R',
//
// with the products by T done in O(r^2) from its companion structure. When resid is non-nil it
// receives v_t. The state a_{n+1} and P_{n+1} are left in s.a and s.P for forecasting. It
// allocates nothing.
func (s *armaSpace) filter(x, resid []float64) armaFilter {
	var out armaFilter
	if !s.initCov() {
		return out
	}
	r := s.r
	a, P, Pn, phi, th := s.a, s.P, s.Pn, s.phi, s.theta
	clear(a)
	steady := false
	for t, xt := range x {
		if steady {
			v := xt - a[0]
			out.ssq += v * v
			if resid != nil {
				resid[t] = v
			}
			// a <- T (a + R v)
			u0 := a[0] + v
			for i := 0; i < r-1; i++ {
				a[i] = phi[i+1]*u0 + a[i+1] + th[i+1]*v
			}
			a[r-1] = phi[r] * u0 // theta_r = 0 as q < r
			continue
		}
		F := P[0]
		if !(F > 0) || math.IsInf(F, 0) {
			return out
		}
		v := xt - a[0]
		out.ssq += v * v / F
		out.sumLog += math.Log(F)
		if resid != nil {
			resid[t] = v
		}
		// Update: a += P[.,0] v / F; P -= P[.,0] P[0,.] / F.
		for i := 0; i < r; i++ {
			a[i] += P[i*r] * v / F
		}
		for i := 0; i < r; i++ {
			pi0 := P[i*r] / F
			for j := 0; j < r; j++ {
				Pn[i*r+j] = P[i*r+j] - pi0*P[j*r]
			}
		}
		// Predict: a <- T a; P <- T Pn T' + R R'. (T a)_i = phi_{i+1} a_0 + a_{i+1};
		// (T Pn T')_{ij} = phi_{i+1} phi_{j+1} Pn00 + phi_{i+1} Pn_{0,j+1} + phi_{j+1} Pn_{i+1,0} + Pn_{i+1,j+1}.
		a0 := a[0]
		for i := 0; i < r-1; i++ {
			a[i] = phi[i+1]*a0 + a[i+1]
		}
		a[r-1] = phi[r] * a0
		p00 := Pn[0]
		tr := 0.0
		for i := 0; i < r; i++ {
			fi := phi[i+1]
			var pi1 []float64
			if i+1 < r {
				pi1 = Pn[(i+1)*r : (i+2)*r]
			}
			for j := i; j < r; j++ {
				fj := phi[j+1]
				v := fi*fj*p00 + th[i]*th[j]
				if j+1 < r {
					v += fi * Pn[j+1]
				}
				if i+1 < r {
					v += fj * pi1[0]
					if j+1 < r {
						v += pi1[j+1]
					}
				}
				P[i*r+j] = v
				P[j*r+i] = v
			}
			tr += P[i*r+i] - th[i]*th[i]
		}
		if tr < steadyTol {
			steady = true
			// Leave P at its limit R R' for forecasting.
			for i := 0; i < r; i++ {
				for j := 0; j < r; j++ {
					P[i*r+j] = th[i] * th[j]
				}
			}
		}
	}
	out.n = len(x)
	out.ok = true
	return out
}
