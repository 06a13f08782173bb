package classical

import (
	"math"
	"math/rand/v2"
	"testing"
)

// Worked by hand from the classical decomposition steps in the MultiplicativeIndices doc
// comment (FPP3 section 3.4).
func TestMultiplicativeIndicesWorked(t *testing.T) {
	// Even m = 2: the 2×2 MA of 2,4,2,4,... is 3 everywhere, ratios 2/3 and 4/3.
	idx, err := MultiplicativeIndices([]float64{2, 4, 2, 4, 2, 4}, 2)
	if err != nil {
		t.Fatal(err)
	}
	wantNear(t, "idx[0]", idx[0], 2.0/3, 1e-15)
	wantNear(t, "idx[1]", idx[1], 4.0/3, 1e-15)

	// Odd m = 3: the 3-MA of 1,2,3,... is 2, ratios 0.5, 1, 1.5 (already averaging 1).
	idx, err = MultiplicativeIndices([]float64{1, 2, 3, 1, 2, 3, 1, 2, 3}, 3)
	if err != nil {
		t.Fatal(err)
	}
	for j, want := range []float64{0.5, 1, 1.5} {
		wantNear(t, "idx", idx[j], want, 1e-15)
	}

	// Indices are aligned with the first observation, not the calendar: shifting the start
	// by one rotates them.
	idx, _ = MultiplicativeIndices([]float64{2, 3, 1, 2, 3, 1, 2, 3, 1}, 3)
	for j, want := range []float64{1, 1.5, 0.5} {
		wantNear(t, "shifted idx", idx[j], want, 1e-15)
	}
}

func TestMultiplicativeIndicesErrors(t *testing.T) {
	if _, err := MultiplicativeIndices([]float64{1, 2, 3}, 2); err == nil {
		t.Error("n < 2m: no error")
	}
	if _, err := MultiplicativeIndices([]float64{-1, -2, -1, -2, -1, -2}, 2); err == nil {
		t.Error("negative data: no error")
	}
	defer func() {
		if recover() == nil {
			t.Error("m = 1 did not panic")
		}
	}()
	MultiplicativeIndices([]float64{1, 2, 3}, 1)
}

func TestSeasonalityTest(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	seasonal := make([]float64, 48)
	for i := range seasonal {
		seasonal[i] = 100 + 20*math.Sin(2*math.Pi*float64(i)/12) + rng.NormFloat64()
	}
	if !SeasonalityTest(seasonal, 12) {
		t.Error("sinusoid with period 12 not found seasonal")
	}
	if SeasonalityTest(seasonal[:35], 12) {
		t.Error("n = 35 < 3m = 36 must not be seasonal")
	}
	if SeasonalityTest(seasonal, 1) {
		t.Error("m = 1 must not be seasonal")
	}
	constant := make([]float64, 48)
	if SeasonalityTest(constant, 12) {
		t.Error("constant series must not be seasonal")
	}
	if _, ok := SeasonalIndices(seasonal, 12); !ok {
		t.Error("SeasonalIndices: seasonal series reported non-seasonal")
	}
}

// Hand check of the test statistic on a short series: y = 1,2,1,2,... (n = 6, m = 2) has
// ȳ = 1.5, every deviation ±0.5, c0 = 6·0.25 = 1.5, r_1 = −1.25/1.5 = −5/6, r_2 = 1/1.5 = 2/3.
// Bound 1.645·√((1 + 2·25/36)/6) = 1.038 > 2/3, so not seasonal despite the pattern.
// With n = 16: c0 = 4, r_1 = −3.75/4 = −0.9375, r_2 = 3.5/4 = 0.875 and the bound is
// 1.645·√((1 + 2·0.9375²)/16) = 0.683 < 0.875, so seasonal.
func TestSeasonalityTestStatisticWorked(t *testing.T) {
	y := []float64{1, 2, 1, 2, 1, 2}
	if SeasonalityTest(y, 2) {
		t.Error("n = 6 alternating series: want not seasonal (bound 1.038 > r_2 = 0.667)")
	}
	y = append(y, 1, 2, 1, 2, 1, 2, 1, 2, 1, 2)
	if !SeasonalityTest(y, 2) {
		t.Error("n = 16 alternating series: want seasonal")
	}
}

func wantNear(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol*math.Max(1, math.Abs(want)) {
		t.Errorf("%s = %.12g, want %.12g (tol %g)", what, got, want, tol)
	}
}
