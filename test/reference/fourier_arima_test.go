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
		terms, err := fourier.Terms(c.Periods, c.K) // K = 0 gives no columns, as R's filtering
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
// computes it with lm), the Fourier coefficients lie within 1% of the largest of R's joint
// estimates, and the forecasts stay within 3% of R's auto.arima with the Fourier regressors at
// every step, although R's search (approximate criteria for n > 150) picks other ARIMA orders
// on all four series. Measured with the joint refinement (models.refineJoint): coefficients
// 0.15% (depotHourly), 0.52% (tillDaily), 0.14% (palletsWeekly), 0.47% (taylor) of the largest;
// forecasts 2.2%, 1.0%, 0.16%, 2.0%. Before it, with the least-squares coefficients, the
// coefficients differed by 4.4%, 14.5%, 11.9%, 0.7% and the forecasts by 2.2%, 2.8%, 1.9%,
// 2.1%. The log prints the figures.
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
		joint, scale := jointDifference(c.Terms, p, c.ARIMA.Coef)
		if joint > 0.01*scale {
			t.Errorf("%s: Fourier coefficients differ from R's joint estimates by %.3g, above 1%% of the largest (%.3g)", c.Name, joint, scale)
		}
		got := fit.Forecast(c.H, nil).Mean
		worst := 0.0
		for k := range got {
			worst = math.Max(worst, math.Abs(got[k]-c.ARIMA.Mean[k])/math.Abs(c.ARIMA.Mean[k]))
		}
		_, arima, _ := strings.Cut(fit.Name(), ")+")
		t.Logf("%s: %s, R ARIMA%v; Fourier coefficients differ from R's joint estimates by up to %.3g (%.2g%% of the largest); forecasts by up to %.2g%%",
			c.Name, arima, c.ARIMA.Order, joint, 100*joint/scale, 100*worst)
		if worst > 0.03 {
			t.Errorf("%s: forecasts differ from R's by up to %.2g%%", c.Name, 100*worst)
		}
	}
}

// TestFourierARIMAAtROrder: at R's own pairs and ARIMA order, models.FitFourierARIMA's joint
// estimate (least squares, then iterated feasible GLS, models.refineJoint) agrees with R's
// maximum-likelihood estimate of the Fourier coefficients to 0.25% of the largest and with its
// forecasts to 0.15% at every step. Measured: coefficients 0.009% (depotHourly), 0.057%
// (tillDaily), 0.03% (palletsWeekly), 0.087% (taylor) of the largest; forecasts 0.0072%,
// 0.013%, 0.0095%, 0.058%. Without the refinement (least squares alone) the coefficients
// differ by up to 14.5% of the largest. R's arima maximises the exact
// likelihood over every coefficient at once; the remaining difference is the GLS weights (the
// innovations are not scaled by their variance in the filter's first steps) and the
// optimisers' stopping.
func TestFourierARIMAAtROrder(t *testing.T) {
	ref, series := loadFourier(t)
	for _, c := range ref.Cases {
		y := series[c.Name]
		o := models.ARIMAOrder{P: c.ARIMA.Order[0], D: c.ARIMA.Order[1], Q: c.ARIMA.Order[2]}
		_, o.Constant = c.ARIMA.Coef["drift"]
		if _, mean := c.ARIMA.Coef["intercept"]; mean {
			o.Constant = true
		}
		fit, err := models.FitFourierARIMA(y, c.Periods, c.K, o)
		if err != nil {
			t.Fatalf("%s: %v", c.Name, err)
		}
		joint, scale := jointDifference(c.Terms, fit.Params(), c.ARIMA.Coef)
		got := fit.Forecast(c.H, nil).Mean
		worst := 0.0
		for k := range got {
			worst = math.Max(worst, math.Abs(got[k]-c.ARIMA.Mean[k])/math.Abs(c.ARIMA.Mean[k]))
		}
		t.Logf("%s at R's ARIMA%v: Fourier coefficients differ by up to %.3g (%.2g%% of the largest); forecasts by up to %.2g%%",
			c.Name, c.ARIMA.Order, joint, 100*joint/scale, 100*worst)
		if joint > 0.0025*scale {
			t.Errorf("%s: Fourier coefficients differ from R's joint estimates by %.3g, above 0.25%% of the largest (%.3g)", c.Name, joint, scale)
		}
		if worst > 0.0015 {
			t.Errorf("%s: forecasts differ from R's by up to %.2g%%", c.Name, 100*worst)
		}
	}
}

// jointDifference is the largest absolute difference between our and R's coefficient of each
// term, and the largest of R's coefficients in absolute value.
func jointDifference(terms []string, ours, r map[string]float64) (diff, scale float64) {
	for _, name := range terms {
		diff = math.Max(diff, math.Abs(ours[name]-r[name]))
		scale = math.Max(scale, math.Abs(r[name]))
	}
	return diff, scale
}
