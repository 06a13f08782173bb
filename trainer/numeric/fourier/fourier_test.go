package fourier

import (
	"math"
	"strings"
	"testing"
)

// TestTermsDropDuplicatesAndZeroSines: for periods 4 and 8 with K = 2 and 4, the frequencies
// 1/4 and 2/4 of the first period reappear as 2/8 and 4/8 and are kept once; k/p = 1/2 has no
// sine (sin(pi t) = 0 at whole t), as R forecast 8.20's fourier labels show.
func TestTermsDropDuplicatesAndZeroSines(t *testing.T) {
	terms, err := Terms([]float64{4, 8}, []int{2, 4})
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, tm := range terms {
		names = append(names, tm.Name())
	}
	want := "S1-4 C1-4 C2-4 S1-8 C1-8 S3-8 C3-8"
	if got := strings.Join(names, " "); got != want {
		t.Errorf("terms %s, want %s", got, want)
	}
	if _, err := Terms([]float64{24}, []int{13}); err == nil || !strings.Contains(err.Error(), "order 13 for period 24") {
		t.Errorf("K = 13 for 24: err %v", err)
	}
}

// TestTermValues: sin(2 pi t / 4) at t = 1..4 is exactly 1, 0, -1, 0 (whole and half turns are
// exact, as with R's sinpi), and a non-integer period repeats after p.
func TestTermValues(t *testing.T) {
	s := Term{Period: 4, K: 1, Sin: true}
	for i, want := range []float64{1, 0, -1, 0} {
		if got := s.At(float64(i + 1)); got != want {
			t.Errorf("sin at t=%d: %v, want %v", i+1, got, want)
		}
	}
	c := Term{Period: 365.25, K: 2}
	if d := c.At(10) - c.At(10+365.25); math.Abs(d) > 1e-12 {
		t.Errorf("cos(4 pi t / 365.25) does not repeat after a period: %g", d)
	}
	if got, want := c.At(10), math.Cos(4*math.Pi*10/365.25); math.Abs(got-want) > 1e-14 {
		t.Errorf("cos at t=10: %v, want %v", got, want)
	}
}
