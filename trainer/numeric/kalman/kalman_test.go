package kalman

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestMA1InitialCovariance: for MA(1), r = 2 and the state (x_t, theta e_t) has covariance
// [[1+theta^2, theta], [theta, theta^2]] (from the representation in ARMA's comment).
func TestMA1InitialCovariance(t *testing.T) {
	var s ARMA
	const th = -0.4
	s.Setup(nil, []float64{th})
	if !s.InitCov() {
		t.Fatal("InitCov failed")
	}
	want := []float64{1 + th*th, th, th, th * th}
	for i, w := range want {
		if math.Abs(s.P[i]-w) > 1e-15 {
			t.Errorf("P = %v, want %v", s.P, want)
			break
		}
	}
}

// TestInitialCovarianceSolvesLyapunov: for a seasonal ARMA the stationary covariance must
// satisfy P = T P T' + R R' (Gardner, Harvey & Phillips 1980), checked elementwise with an
// explicit dense T.
func TestInitialCovarianceSolvesLyapunov(t *testing.T) {
	// (1 - 0.5B + 0.2B^2)(1 - 0.3B^4 - 0.2B^8) x_t = (1 + 0.4B)(1 - 0.5B^4) e_t, expanded by
	// hand: phi_k and theta_k are the lag-k coefficients of x_t = sum phi_k x_{t-k} + ... .
	phi := []float64{0.5, -0.2, 0, 0.3, -0.15, 0.06, 0, 0.2, -0.1, 0.04}
	theta := []float64{0.4, 0, 0, -0.5, -0.2}
	var s ARMA
	s.Setup(phi, theta)
	if !s.InitCov() {
		t.Fatal("InitCov failed")
	}
	r := s.r
	T := make([]float64, r*r)
	for i := 0; i < r; i++ {
		T[i*r] = s.phi[i+1]
		if i+1 < r {
			T[i*r+i+1] = 1
		}
	}
	for i := 0; i < r; i++ {
		for j := 0; j < r; j++ {
			v := s.theta[i] * s.theta[j]
			for k := 0; k < r; k++ {
				for l := 0; l < r; l++ {
					v += T[i*r+k] * s.P[k*r+l] * T[j*r+l]
				}
			}
			if math.Abs(v-s.P[i*r+j]) > 1e-12*math.Max(1, math.Abs(v)) {
				t.Fatalf("P[%d,%d] = %v, T P T' + R R' = %v", i, j, s.P[i*r+j], v)
			}
		}
	}
}

// TestAR1Likelihood: for AR(1) the exact likelihood has a closed form (Hamilton 1994, "Time
// Series Analysis", section 5.2, from memory): x_1 ~ N(0, 1/(1-phi^2)) and x_t | x_{t-1} ~
// N(phi x_{t-1}, 1), so F_1 = 1/(1-phi^2), F_t = 1 after, and
//
//	ssq = (1-phi^2) x_1^2 + sum_{t>=2} (x_t - phi x_{t-1})^2,  sumLog = -log(1-phi^2).
func TestAR1Likelihood(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	const phi = 0.7
	x := make([]float64, 50)
	x[0] = rng.NormFloat64() / math.Sqrt(1-phi*phi)
	for i := 1; i < len(x); i++ {
		x[i] = phi*x[i-1] + rng.NormFloat64()
	}
	ssq := (1 - phi*phi) * x[0] * x[0]
	for i := 1; i < len(x); i++ {
		e := x[i] - phi*x[i-1]
		ssq += e * e
	}
	var s ARMA
	s.Setup([]float64{phi}, nil)
	resid := make([]float64, len(x))
	r := s.Filter(x, resid)
	if !r.OK || r.N != len(x) {
		t.Fatalf("Filter = %+v", r)
	}
	if math.Abs(r.SSQ-ssq) > 1e-12*ssq || math.Abs(r.SumLog+math.Log(1-phi*phi)) > 1e-12 {
		t.Errorf("ssq %v sumLog %v, want %v %v", r.SSQ, r.SumLog, ssq, -math.Log(1-phi*phi))
	}
	if math.Abs(resid[5]-(x[5]-phi*x[4])) > 1e-12 {
		t.Errorf("innovation v_6 = %v, want %v", resid[5], x[5]-phi*x[4])
	}
	// The forecast state is E[x_{n+1} | x_1..x_n] = phi x_n.
	if a := s.State()[0]; math.Abs(a-phi*x[len(x)-1]) > 1e-12 {
		t.Errorf("a_{n+1} = %v, want %v", a, phi*x[len(x)-1])
	}
}

// TestNonStationaryRejected: a unit root has no stationary covariance, so the filter reports
// not OK instead of a likelihood.
func TestNonStationaryRejected(t *testing.T) {
	var s ARMA
	s.Setup([]float64{1}, nil)
	if r := s.Filter([]float64{1, 2, 3}, nil); r.OK {
		t.Errorf("random walk filtered: %+v", r)
	}
}

// TestFilterAllocatesNothing: repeated evaluations reuse the scratch.
func TestFilterAllocatesNothing(t *testing.T) {
	x := make([]float64, 96)
	for i := range x {
		x[i] = math.Sin(float64(i))
	}
	var s ARMA
	phi, theta := []float64{0.5, -0.2}, []float64{0.3}
	s.Setup(phi, theta)
	s.Filter(x, nil)
	if n := testing.AllocsPerRun(50, func() { s.Setup(phi, theta); s.Filter(x, nil) }); n != 0 {
		t.Errorf("Filter allocates %v times", n)
	}
}
