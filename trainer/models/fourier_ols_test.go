package models

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"almanac.dev/almanac/trainer/numeric/fourier"
)

// TestHarmonicOLSMatchesLm: the least-squares start of FamilyFourierARIMA (harmonicOLS, which
// also chooses K by its AICc) equals R's lm(y ~ fourier(...)) to 1e-8 on the fixtures of
// test/reference (r/fourier_arima.R, R 4.2.2 with Debian's r-cran-forecast 8.20). The fitted
// family's coefficients are the joint estimates (refineJoint), which test/reference checks
// against R's auto.arima with xreg; this keeps a check on the stage they start from.
func TestHarmonicOLSMatchesLm(t *testing.T) {
	var fx struct {
		Cases []struct {
			Name    string
			Periods []float64
			K       []int
			OLSCoef []float64
		}
	}
	var series struct {
		Cases []struct {
			Name string
			Y    []float64
		}
	}
	for path, v := range map[string]any{
		"../../test/reference/testdata/fourier_arima_r.json": &fx,
		"../../test/reference/testdata/mstl_r.json":          &series,
	} {
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(b, v); err != nil {
			t.Fatalf("%s: %v", path, err)
		}
	}
	ys := map[string][]float64{}
	for _, c := range series.Cases {
		ys[c.Name] = c.Y
	}
	if len(fx.Cases) == 0 {
		t.Fatal("no cases")
	}
	for _, c := range fx.Cases {
		terms, err := fourier.Terms(c.Periods, c.K) // K = 0 gives no columns, as R's filtering
		if err != nil {
			t.Fatal(err)
		}
		coef, _, err := harmonicOLS(ys[c.Name], terms)
		if err != nil || len(coef) != len(c.OLSCoef) {
			t.Fatalf("%s: %d coefficients (%v), lm has %d", c.Name, len(coef), err, len(c.OLSCoef))
		}
		for j := range coef {
			if d := math.Abs(coef[j] - c.OLSCoef[j]); d > 1e-8*math.Max(1, math.Abs(c.OLSCoef[j])) {
				t.Errorf("%s: coefficient %d is %v, lm's %v", c.Name, j, coef[j], c.OLSCoef[j])
			}
		}
	}
}
