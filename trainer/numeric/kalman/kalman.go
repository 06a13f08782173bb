// Package kalman evaluates the exact Gaussian likelihood of a zero-mean ARMA process by the
// Kalman filter on its state-space form (Harvey 1989, "Forecasting, Structural Time Series
// Models and the Kalman Filter"; Gardner, Harvey & Phillips 1980, Applied Statistics 29(3),
// algorithm AS 154; Durbin & Koopman 2012, "Time Series Analysis by State Space Methods", 2nd
// ed.), and leaves the filtered state for forecasting. The innovation variance is 1: the
// likelihood is concentrated over sigma^2, so for n observations
//
//	-2 log L = n log(ssq / n) + sumLog + const,   ssq = sum v_t^2 / F_t,  sumLog = sum log F_t.
package kalman

import "math"

// ARMA is the state-space form of a zero-mean ARMA(p, q) process
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
type ARMA struct {
	r           int
	phi, theta  []float64 // length r (phi) and r (theta[0] = 1), zero-padded
	phiNZ, thNZ []int     // lags k >= 1 with phi_k != 0, and lags k >= 0 with theta_k != 0
	gamma, psi  []float64 // autocovariances gamma(0..r) and psi weights psi_0..psi_r
	a, pa       []float64 // state and scratch
	P           []float64 // r x r covariance, row-major
	sys         []float64 // (p+1) x (p+2) augmented system for the autocovariances
}

// Dim returns r = max(p, q+1), the state dimension.
func (s *ARMA) Dim() int { return s.r }

// Phi returns phi_0..phi_r (phi_0 = 0, zero-padded; phi_1..phi_r is T's first column). It
// aliases s.
func (s *ARMA) Phi() []float64 { return s.phi }

// Theta returns theta_0..theta_r (theta_0 = 1, zero-padded; theta_0..theta_{r-1} is R). It
// aliases s.
func (s *ARMA) Theta() []float64 { return s.theta }

// State returns the state a_{n+1} left by the last Filter. It aliases s and is valid until the
// next call.
func (s *ARMA) State() []float64 { return s.a }

// Cov returns the r x r state covariance, row-major: P_1 in full after InitCov, P_{n+1} (upper
// triangle only) after Filter. It aliases s and is valid until the next call.
func (s *ARMA) Cov() []float64 { return s.P }

// Setup sizes the scratch for orders (p, q) and copies the coefficients in: phi[k-1] = phi_k,
// theta[k-1] = theta_k.
func (s *ARMA) Setup(phi, theta []float64) {
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
	}
	s.r = r
	s.phi, s.theta = s.phi[:r+1], s.theta[:r+1]
	s.gamma, s.psi = s.gamma[:r+2], s.psi[:r+2]
	s.a, s.pa = s.a[:r], s.pa[:r]
	s.P = s.P[:r*r]
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
func (s *ARMA) autocov() bool {
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
			row[iabs(k-i)] -= phi[i]
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

func iabs(i int) int {
	if i < 0 {
		return -i
	}
	return i
}

// InitCov sets s.P to the stationary covariance P_1 = E[a_t a_t'] of the state (unit innovation
// variance), the solution of P = T P T' + R R' that Gardner, Harvey & Phillips (1980) compute.
// Here the first row comes from the representation in ARMA's doc comment, with
// E[x_t x_{t-u}] = gamma(u) and E[x_t e_{t-u}] = psi_u:
//
//	P[0,j] = sum_{k>j} phi_k gamma(k-j) + sum_{k>=j} theta_k psi_{k-j},
//
// and the rest from the same equation read element by element, upwards from the last row,
//
//	P[i,j] = phi_{i+1} phi_{j+1} P[0,0] + phi_{i+1} P[0,j+1] + phi_{j+1} P[0,i+1] + P[i+1,j+1] + theta_i theta_j
//
// (index r reads 0), O(r^2) work in all. It reports false when the process is not stationary.
func (s *ARMA) InitCov() bool {
	if !s.autocov() {
		return false
	}
	r := s.r
	phi, th, g, psi, P := s.phi, s.theta, s.gamma, s.psi, s.P
	for j := 0; j < r; j++ {
		v := 0.0
		for _, k := range s.phiNZ {
			if k > j {
				v += phi[k] * g[k-j]
			}
		}
		for _, k := range s.thNZ {
			if k >= j {
				v += th[k] * psi[k-j]
			}
		}
		P[j] = v
		P[j*r] = v
	}
	at := func(i, j int) float64 {
		if i >= r || j >= r {
			return 0
		}
		return P[i*r+j]
	}
	p00 := P[0]
	for i := r - 1; i >= 1; i-- {
		for j := r - 1; j >= i; j-- {
			v := phi[i+1]*phi[j+1]*p00 + phi[i+1]*at(0, j+1) + phi[j+1]*at(0, i+1) + at(i+1, j+1) + th[i]*th[j]
			P[i*r+j] = v
			P[j*r+i] = v
		}
	}
	return true
}

// Result is the outcome of one pass of the Kalman filter.
type Result struct {
	SSQ    float64 // sum v_t^2 / F_t
	SumLog float64 // sum log F_t
	N      int     // observations filtered
	OK     bool    // false when the process is not stationary or F_t stopped being positive
}

// steadyTol is the bound on trace(P_t - R R') below which the filter switches to the steady
// state: the state is then known from the past up to rounding, F_t = 1 and the gain is R, so the
// update needs O(r) work (Durbin & Koopman 2012, section 4.3.4, on steady-state filtering).
const steadyTol = 1e-10

// Filter runs the Kalman filter (Durbin & Koopman 2012, section 4.3, eqs. 4.24-4.26) on the
// zero-mean series x, from a_1 = 0 and P_1 = InitCov(). For each t, with k = P_t[., 0],
//
//	v_t = x_t - a_t[0],  F_t = P_t[0,0],
//	a_{t+1} = T (a_t + k v_t / F_t),   P_{t+1} = T (P_t - k k' / F_t) T' + R R'.
//
// The updated covariance P_t - k k'/F_t has a zero first row and column (x_t is then known),
// so with T's companion structure the covariance step needs neither phi nor a matrix product:
//
//	P_{t+1}[i,j] = P_t[i+1,j+1] - k_{i+1} k_{j+1} / F_t + theta_i theta_j   (index r reads 0),
//
// which is done in place on the upper triangle (only it is kept). When resid is non-nil it
// receives v_t. The state a_{n+1} and P_{n+1} are left in s.a and s.P (upper triangle) for
// forecasting. It allocates nothing.
func (s *ARMA) Filter(x, resid []float64) Result {
	var out Result
	if !s.InitCov() {
		return out
	}
	r := s.r
	a, P, k, phi, th := s.a, s.P, s.pa, s.phi, s.theta
	clear(a)
	steady := false
	for t, xt := range x {
		if steady {
			// F_t = 1 and k = R: a <- T (a + R v).
			v := xt - a[0]
			out.SSQ += v * v
			if resid != nil {
				resid[t] = v
			}
			for i := 0; i < r-1; i++ {
				a[i] = phi[i+1]*xt + a[i+1] + th[i+1]*v
			}
			a[r-1] = phi[r] * xt // theta_r = 0 as q < r
			continue
		}
		F := P[0]
		if !(F > 0) || math.IsInf(F, 0) {
			return out
		}
		v := xt - a[0]
		out.SSQ += v * v / F
		out.SumLog += math.Log(F)
		if resid != nil {
			resid[t] = v
		}
		copy(k, P[:r]) // row 0 of the upper triangle is column 0
		g := v / F
		// a <- T (a + k g); the first element of a + k g is x_t.
		for i := 0; i < r-1; i++ {
			a[i] = phi[i+1]*xt + a[i+1] + k[i+1]*g
		}
		a[r-1] = phi[r] * xt
		tr := 0.0
		for i := 0; i < r; i++ {
			row := P[i*r : (i+1)*r]
			if i+1 < r {
				next := P[(i+1)*r : (i+2)*r]
				ki := k[i+1] / F
				for j := i; j < r-1; j++ {
					row[j] = next[j+1] - ki*k[j+1] + th[i]*th[j]
				}
				row[r-1] = th[i] * th[r-1]
			} else {
				row[r-1] = th[i] * th[r-1]
			}
			tr += row[i] - th[i]*th[i]
		}
		if tr < steadyTol {
			steady = true
			// Leave P at its limit R R' for forecasting.
			for i := 0; i < r; i++ {
				for j := i; j < r; j++ {
					P[i*r+j] = th[i] * th[j]
				}
			}
		}
	}
	out.N = len(x)
	out.OK = true
	return out
}
