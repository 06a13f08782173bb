package reference

import (
	"math"
	"strconv"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/numeric/fourier"
)

// fourierRef is testdata/fourier_arima_r.json, made by r/fourier_arima.R with R forecast 8.20's
// fourier and auto.arima(y, xreg = fourier(...), seasonal = FALSE) (Debian r-cran-forecast, R
// 4.2.2) on the mstl_r.json series with two cycles of some period.
type fourierRef struct {
	Source string
	Cases  []struct {
		Name    string
		Periods []float64
		K       []int
		H       int
		Call    string
		Terms   []string
		X1, Xh  []float64
		OLSCoef []float64
		ARIMA   struct {
			Order []int
			Coef  map[string]float64
			Mean  []float64
		}
	}
}

// loadFourier returns the fixture and its series (from mstl_r.json) by name.
func loadFourier(t *testing.T) (fourierRef, map[string][]float64) {
	var ref fourierRef
	loadFixture(t, "fourier_arima_r.json", &ref)
	series := map[string][]float64{}
	for _, c := range loadMSTL(t).Cases {
		series[c.Name] = c.Y
	}
	return ref, series
}

// TestFourierTermsMatchR: the columns, their R labels and values at t = 1 and t = n + h agree
// with R's fourier to 1e-12 (duplicated frequencies dropped, as for 24 and 168).
func TestFourierTermsMatchR(t *testing.T) {
	ref, series := loadFourier(t)
	for _, c := range ref.Cases {
		var periods []float64
		var K []int
		for i, k := range c.K {
			if k > 0 {
				periods, K = append(periods, c.Periods[i]), append(K, k)
			}
		}
		terms, err := fourier.Terms(periods, K)
		if err != nil {
			t.Fatal(err)
		}
		if len(terms) != len(c.Terms) {
			t.Fatalf("%s: %d terms, R has %d", c.Name, len(terms), len(c.Terms))
		}
		n := float64(len(series[c.Name]))
		for j, term := range terms {
			if term.Name() != c.Terms[j] {
				t.Errorf("%s: term %d is %s, R's %s", c.Name, j, term.Name(), c.Terms[j])
			}
			if d1, dh := math.Abs(term.At(1)-c.X1[j]), math.Abs(term.At(n+float64(c.H))-c.Xh[j]); d1 > 1e-12 || dh > 1e-12 {
				t.Errorf("%s %s: differs from R by %g at t=1, %g at t=n+h", c.Name, term.Name(), d1, dh)
			}
		}
	}
}

// TestFourierARIMAMatchesR: K per period is R's under the same AICc rule (r/fourier_arima.R
// computes it with lm), the least-squares coefficients are lm's to 1e-8, and the forecasts of
// our two-stage estimate (least-squares Fourier coefficients, then the ARIMA search on the
// rest) stay within 3% of R's auto.arima with the Fourier regressors at every step. R estimates
// the coefficients jointly with the ARIMA errors and its search (approximate criteria for
// n > 150) picks other orders on all four series; measured when the fixture was made: worst
// step 2.2% (depotHourly), 2.8% (tillDaily), 1.9% (palletsWeekly), 2.1% (taylor). The Fourier
// coefficients must lie within 15% of the largest of R's joint estimates (measured: 4.4%,
// 14.5%, 11.9%, 0.7% of it; R's errors are differenced, so its generalised least squares
// weights the observations differently from our ordinary least squares). The log prints the
// figures.
func TestFourierARIMAMatchesR(t *testing.T) {
	ref, series := loadFourier(t)
	for _, c := range ref.Cases {
		y := series[c.Name]
		mod, err := models.New(models.Spec{Family: models.FamilyFourierARIMA, SeasonalPeriods: c.Periods})
		if err != nil {
			t.Fatal(err)
		}
		fit, err := mod.Fit(y, 1)
		if err != nil {
			t.Fatalf("%s: %v", c.Name, err)
		}
		p := fit.Params()
		for i, k := range c.K {
			if got := int(p["harmonics"+strconv.Itoa(i+1)]); got != k {
				t.Errorf("%s: K for period %v = %d, R's lm gives %d", c.Name, c.Periods[i], got, k)
			}
		}
		worstCoef := 0.0
		for j, name := range c.Terms {
			worstCoef = math.Max(worstCoef, math.Abs(p[name]-c.OLSCoef[j+1]))
		}
		if worstCoef > 1e-8 {
			t.Errorf("%s: least-squares coefficients differ from R's lm by up to %g", c.Name, worstCoef)
		}
		joint, scale := 0.0, 0.0
		for _, name := range c.Terms {
			joint = math.Max(joint, math.Abs(p[name]-c.ARIMA.Coef[name]))
			scale = math.Max(scale, math.Abs(c.ARIMA.Coef[name]))
		}
		if joint > 0.15*scale {
			t.Errorf("%s: Fourier coefficients differ from R's joint estimates by %.3g, above 15%% of the largest (%.3g)", c.Name, joint, scale)
		}
		got := fit.Forecast(c.H, nil).Mean
		worst := 0.0
		for k := range got {
			worst = math.Max(worst, math.Abs(got[k]-c.ARIMA.Mean[k])/math.Abs(c.ARIMA.Mean[k]))
		}
		_, arima, _ := strings.Cut(fit.Name(), ")+")
		t.Logf("%s: %s, R ARIMA%v; Fourier coefficients differ from R's joint estimates by up to %.3g; forecasts by up to %.2g%%",
			c.Name, arima, c.ARIMA.Order, joint, 100*worst)
		if worst > 0.03 {
			t.Errorf("%s: forecasts differ from R's by up to %.2g%%", c.Name, 100*worst)
		}
	}
}
