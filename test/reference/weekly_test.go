package reference

import (
	"math"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/numeric/classical"
	"almanac.dev/almanac/trainer/numeric/stl"
)

type weeklyCase struct {
	Name string
	Y    []float64
	M, H int
	// Theta is thetaf(ts(y, frequency = m), h, level = c(80, 95)), with thetaf's own
	// seasonality decision (Seasonal) and fitted values.
	Theta struct {
		weeklyBand
		Alpha    float64
		Seasonal bool
		Fitted   []float64
	}
	// Figure is decompose(ts(y, frequency = m), "multiplicative")$figure (n >= 2m).
	Figure []float64
	SNaive weeklyBand
	// ETS is R's automatic ets(ts(y, frequency = m)): form, estimates (Level, Slope and
	// Seasonal are fit$states[1, ], Seasonal[0] the most recent seed), criteria as R reports
	// them and the forecast.
	ETS struct {
		weeklyBand
		Method                  string
		Error, Trend, Season    string
		Alpha, Beta, Gamma, Phi float64
		Level, Slope            float64
		Seasonal                []float64
		LogLik, AICc, Sigma2    float64
	}
	// ARIMA is auto.arima(ts(y, frequency = m)) for the daily series (absent for weekly ones).
	ARIMA *arimaRefFit
	// MSTL is mstl(msts(y, seasonal.periods = periods)) with stlf's ets, forecast.mstl's
	// auto.arima and thetaf on the adjusted series; absent when R's stl stops (n <= 2m).
	MSTL *mstlCase
}

type weeklyBand struct {
	Call                         string
	Mean, Lo80, Hi80, Lo95, Hi95 []float64
}

func (b weeklyBand) simple() simpleBand {
	return simpleBand{Mean: b.Mean, Lo80: b.Lo80, Hi80: b.Hi80, Lo95: b.Lo95, Hi95: b.Hi95}
}

// loadWeekly reads testdata/weekly_r.json, made by r/weekly.R with R forecast 8.20 (Debian
// r-cran-forecast, R 4.2.2): invented weekly series (frequency 52, a yearly cycle of 52.18
// weeks, 104 to 312 weeks) and daily series (frequency 7; one with a yearly cycle too), the
// data of demand portfolios. Each block carries its R call.
func loadWeekly(t *testing.T) []weeklyCase { return loadCases[weeklyCase](t, "weekly_r.json") }

// loadCases reads a fixture of the shape {"Source": ..., "Cases": [...]} and fails on no cases.
func loadCases[C any](t *testing.T, file string) []C {
	t.Helper()
	var r struct {
		Source string
		Cases  []C
	}
	loadFixture(t, file, &r)
	if len(r.Cases) == 0 {
		t.Fatalf("%s: no cases", file)
	}
	return r.Cases
}

func (c weeklyCase) simpleCase() simpleCase {
	return simpleCase{Name: c.Name, M: c.M, H: c.H, Y: c.Y}
}

// TestWeeklySeasonalNaiveAgainstR: R forecast 8.20 snaive(ts(y, frequency = m), h) with m = 52
// and 7, closed form, so to rounding (1e-9 relative, as TestBenchmarksAgainstRForecast).
func TestWeeklySeasonalNaiveAgainstR(t *testing.T) {
	for _, c := range loadWeekly(t) {
		checkBand(t, c.simpleCase(), models.FamilySeasonalNaive, c.SNaive.simple(), 1e-9)
	}
}

// TestWeeklyThetaAgainstR: our Theta with m = 52 and m = 7 against R forecast 8.20's
// thetaf(ts(y, frequency = m), h, level = c(80, 95)). The decomposition figure agrees with R's
// decompose to 1e-12 wherever n >= 2m. The seasonality decision agrees with thetaf's wherever
// n >= 3m. Below that SeasonalityTest (the M4 benchmark code's rule, kept for Naive2) never
// finds a season, and our Theta decides 2m < n < 3m by the STL seasonal strength (R's nsdiffs
// test = "seas", checked in seasonstrength_test.go) where thetaf runs its autocorrelation test:
// where the two decisions differ (honeyBath, 130 weeks: ours adjusts, thetaf does not) the
// forecasts are logged, not compared. Where the decisions agree, the forecasts, bounds and
// fitted values agree to 2e-4 and α to 1e-3, as in TestThetaAgainstRForecast (R's Nelder-Mead
// stops slightly short of the SSE optimum ours finds, checked there).
func TestWeeklyThetaAgainstR(t *testing.T) {
	sawBelow3m := false
	for _, c := range loadWeekly(t) {
		n := len(c.Y)
		if n >= 2*c.M {
			idx, err := classical.MultiplicativeIndices(c.Y, c.M)
			if err != nil {
				t.Fatalf("%s: %v", c.Name, err)
			}
			checkSlice(t, c.Name+" figure", idx, c.Figure, 1e-12)
		}
		seasonal := classical.SeasonalityTest(c.Y, c.M)
		if n < 3*c.M && seasonal {
			t.Errorf("%s: SeasonalityTest found a season with n = %d < 3m = %d", c.Name, n, 3*c.M)
		}
		if n >= 3*c.M && seasonal != c.Theta.Seasonal {
			t.Errorf("%s: SeasonalityTest = %v, R thetaf decided %v", c.Name, seasonal, c.Theta.Seasonal)
		}
		if n > 2*c.M {
			// Where the seasonal strength (R forecast 8.20 nsdiffs test = "seas") decides
			// otherwise than thetaf's autocorrelation test: between 2m and 3m, where the test
			// does not run here, and from 3m on, where it may only add a season a trend hides.
			sawBelow3m = sawBelow3m || n < 3*c.M
			mod, err := models.New(models.Spec{Family: models.FamilyTheta})
			if err != nil {
				t.Fatal(err)
			}
			f, err := mod.Fit(c.Y, c.M)
			if err != nil {
				t.Fatal(err)
			}
			if ours := f.Params()["seasonal"] == 1; ours != c.Theta.Seasonal {
				if n >= 3*c.M && (!ours || seasonal) {
					t.Errorf("%s: Theta seasonal %v, autocorrelation test %v, thetaf %v: only the strength may add a season", c.Name, ours, seasonal, c.Theta.Seasonal)
				}
				d, at := maxRel(f.Forecast(c.H, nil).Mean, c.Theta.Mean)
				t.Logf("%s (n = %d, m = %d): seasonal by strength %v, by thetaf's test %v; forecasts differ by up to %.3f relative (step %d)",
					c.Name, n, c.M, ours, c.Theta.Seasonal, d, at+1)
				continue
			}
		}
		f, worst := checkBand(t, c.simpleCase(), models.FamilyTheta, c.Theta.simple(), 2e-4)
		p := f.Params()
		if math.Abs(p["alpha"]-c.Theta.Alpha) > 1e-3 {
			t.Errorf("%s Theta alpha = %.6f, R thetaf %.6f", c.Name, p["alpha"], c.Theta.Alpha)
		}
		if got := p["seasonal"] == 1; got != c.Theta.Seasonal {
			t.Errorf("%s Theta seasonal = %v, R thetaf %v", c.Name, got, c.Theta.Seasonal)
		}
		fit := checkSlice(t, c.Name+" Theta fitted[1:]", f.InSample()[1:], c.Theta.Fitted[1:], 2e-4)
		t.Logf("%-14s n %3d m %2d seasonal %-5v alpha ours %.6f R %.6f; worst rel diff forecasts/bounds %.2g, fitted %.2g",
			c.Name, n, c.M, c.Theta.Seasonal, p["alpha"], c.Theta.Alpha, worst, fit)
	}
	if !sawBelow3m {
		t.Error("no case with 2m < n < 3m: the fixture no longer tests both sides of the rule")
	}
}

// TestWeeklyETSAtRParameters: at R forecast 8.20's estimates of its automatic ets(ts(y,
// frequency = m)) fit, our recursion reproduces R's log likelihood, σ² and point forecasts to
// 1e-8 relative, and R's printed 80% and 95% bounds (forms with a trend or no season; see
// TestETSLikelihoodAtRParameters). For weekly data R fits a non-seasonal form (ets ignores
// seasons above 24), for daily data a form with the 7-day season.
func TestWeeklyETSAtRParameters(t *testing.T) {
	const tol = 1e-8
	for _, c := range loadWeekly(t) {
		r := c.ETS
		m := c.M
		if r.Season == "N" {
			m = 1
		}
		phi := r.Phi
		if r.Trend != "Ad" {
			phi = 1
		}
		form := models.ETSForm{Error: r.Error, Trend: r.Trend, Season: r.Season}
		fit, err := models.ETSAt(c.Y, m, form, models.ETSParams{Alpha: r.Alpha, Beta: r.Beta, Gamma: r.Gamma,
			Phi: phi, Level: r.Level, Slope: r.Slope, Seasonal: r.Seasonal})
		if err != nil {
			t.Errorf("%s %s: %v", c.Name, form, err)
			continue
		}
		n := len(c.Y)
		if d := etsRel(fit.LogLik(), etsRLogLik(r.LogLik, n)); d > tol {
			t.Errorf("%s %s: loglik at R's estimates %.10g, R %.10g (rel diff %.2g)", c.Name, form, fit.LogLik(), etsRLogLik(r.LogLik, n), d)
		}
		if d := etsRel(fit.Sigma2(), r.Sigma2); d > tol {
			t.Errorf("%s %s: sigma2 %.10g, R %.10g", c.Name, form, fit.Sigma2(), r.Sigma2)
		}
		fc := fit.Forecast(c.H, etsLevels)
		if d := etsMaxRel(fc.Mean, r.Mean); d > tol {
			t.Errorf("%s %s: point forecasts at R's estimates differ by %.2g relative", c.Name, form, d)
		}
		if r.Season == "M" || (r.Trend == "N" && r.Season == "A" && c.H >= c.M) {
			continue
		}
		for j, want := range [][]float64{r.Lo95, r.Lo80, r.Hi80, r.Hi95} {
			if d := etsMaxRel(fc.Quantiles[j], want); d > tol {
				t.Errorf("%s %s: level %.3f bound differs from R's by %.2g relative", c.Name, form, etsLevels[j], d)
			}
		}
	}
}

// weeklyScreenedOut lists the series where SelectETS's screening stage (etsRefined forms are
// refined after a weights-only screen, PROJECT-NOTES seventh session) ranks R's form out of the
// refined set although its refined fit beats R's, with the AICc gap of the chosen form over
// R's seen when it was recorded. They are reported, not failed; any other gap fails.
var weeklyScreenedOut = map[string]float64{
	// Screened AICc of ETS(A,A,A) 1250.34 (5th); refined 1237.95 against R's 1240.13; the
	// search keeps ETS(A,N,A) at 1240.53.
	"breadBristol": 0.41,
}

// TestWeeklyETSAutoAgainstR: our automatic search (SelectETS) with m = 52 must, like R forecast
// 8.20's ets, fit only non-seasonal forms (both model seasons up to 24), and with m = 7 may
// choose a seasonal one. Our fit of R's chosen form must reach R's AICc (within 1e-4 relative,
// R's AICc moved to the full Gaussian likelihood), and where the chosen form differs from R's,
// ours must have the smaller AICc, as in TestETSAutoAgainstR, unless weeklyScreenedOut records
// the case. The ETS zoo member (the Akaike-weighted mean of the refined forms) must likewise
// hold no seasonal form for weekly data; its forecasts against R's are logged.
func TestWeeklyETSAutoAgainstR(t *testing.T) {
	for _, c := range loadWeekly(t) {
		r := c.ETS
		rForm := models.ETSForm{Error: r.Error, Trend: r.Trend, Season: r.Season}
		if c.M > 24 && r.Season != "N" {
			t.Fatalf("%s: R fitted %s with m = %d; the fixture is not what r/weekly.R makes", c.Name, rForm, c.M)
		}
		n := float64(len(c.Y))
		rAICc := r.AICc + n*(math.Log(2*math.Pi/n)+1)
		m := c.M
		if r.Season == "N" {
			m = 1
		}
		same, err := models.FitETS(c.Y, m, rForm)
		if err != nil {
			t.Fatalf("%s %s: %v", c.Name, rForm, err)
		}
		if same.AICc() > rAICc+1e-4*math.Abs(rAICc) {
			t.Errorf("%s %s: our fit's AICc %.3f is worse than R's %.3f", c.Name, rForm, same.AICc(), rAICc)
		}
		fit, err := models.SelectETS(c.Y, c.M, nil)
		if err != nil {
			t.Errorf("%s: %v", c.Name, err)
			continue
		}
		if c.M > 24 && fit.Form().Season != "N" {
			t.Errorf("%s: SelectETS with m = %d chose %s; seasons above 24 are not modelled", c.Name, c.M, fit.Name())
		}
		if gap := fit.AICc() - rAICc; fit.Name() != rForm.String() && gap > 0 {
			if known, ok := weeklyScreenedOut[c.Name]; ok && gap <= known+0.01 {
				t.Logf("%s: screening kept %s, %.3f above R's %s (known; our refined %s: %.3f)", c.Name, fit.Name(), gap, rForm, rForm, same.AICc())
			} else {
				t.Errorf("%s: chose %s with AICc %.3f but R's %s has AICc %.3f", c.Name, fit.Name(), fit.AICc(), rForm, rAICc)
			}
		}
		mod, err := models.New(models.Spec{Family: models.FamilyETS})
		if err != nil {
			t.Fatal(err)
		}
		member, err := mod.Fit(c.Y, c.M)
		if err != nil {
			t.Fatalf("%s ETS member: %v", c.Name, err)
		}
		if c.M > 24 && (strings.Contains(member.Name(), ",A)") || strings.Contains(member.Name(), ",M)")) {
			t.Errorf("%s: ETS member %s holds a seasonal form with m = %d", c.Name, member.Name(), c.M)
		}
		d, _ := maxRel(member.Forecast(c.H, nil).Mean, r.Mean)
		t.Logf("%-14s m %2d: ours %s (AICc %.3f), R %s (AICc %.3f); member %s differs from R's forecast by up to %.3f relative",
			c.Name, c.M, fit.Name(), fit.AICc(), rForm, rAICc, member.Name(), d)
	}
}

// weeklyMSTLETSShortfall lists the adjusted series where our fit of R's ETS form ends below
// R's log likelihood by more than 1e-3 relative, with the gap seen when it was recorded
// (Nelder-Mead from our starts stops in another local optimum). Reported, not failed.
var weeklyMSTLETSShortfall = map[string]float64{
	// ETS(A,A,N) on the adjusted year-end-peak series: R reaches alpha = beta = 1e-4 (a
	// straight line), ours alpha = beta = 0.0085; log likelihood -335.91 against -334.12.
	"cardsHarrogate": 1.79,
}

// TestWeeklyMSTLAgainstR: the MSTL decomposition and members on msts(y, seasonal.periods =
// 52.18) and c(7, 365.25) against R forecast 8.20's mstl, stlf and forecast.mstl (see
// TestMSTLMatchesR and TestMSTLMembersMatchR for the tolerances). For weekly data our members
// take the period 52.18 and R's msts makes a ts of frequency 52 (one period); both run STL on
// period 52 with the same spans (n_l = 53, n_t = nextodd(ceil(1.5 p / (1 - 1.5/11))) = 91 for
// p = 52 and 52.18), so the decompositions agree to 1e-9. With n <= 2m (flourDerby, 104 weeks)
// R's stl stops; our decomposition reports an error and the members fit y itself.
func TestWeeklyMSTLAgainstR(t *testing.T) {
	for _, c := range loadWeekly(t) {
		if c.MSTL == nil || len(c.MSTL.Y) == 0 {
			if _, err := stl.MSTL(c.Y, []float64{52.18}, stl.MSTLOptions{}); err == nil {
				t.Errorf("%s: MSTL decomposed %d weeks, R's stl stops (n <= 2m)", c.Name, len(c.Y))
			}
			continue
		}
		t.Run(c.Name, func(t *testing.T) {
			checkMSTLDecomposition(t, *c.MSTL)
			checkMSTLMembers(t, *c.MSTL, models.FamilyMSTLARIMA, models.FamilyMSTLTheta)
			checkMSTLETSByLikelihood(t, *c.MSTL)
		})
	}
}

// checkMSTLETSByLikelihood fits R's ETS form of stlf (forecast.mstl with ets, model "ZZN") to
// the adjusted series, as the MSTLETS member does, and compares as TestETSFixedFormsAgainstR
// does: our log likelihood must not be below R's by more than 1e-3 relative (unless
// weeklyMSTLETSShortfall records it); where the two are within 0.5 the member's forecasts
// agree with stlf's to 1e-3 relative; where ours is clearly higher they are only logged.
func checkMSTLETSByLikelihood(t *testing.T, c mstlCase) {
	t.Helper()
	fit, err := models.FitETS(c.Adjusted, 1, stlfETSForm(t, c))
	if err != nil {
		t.Fatal(err)
	}
	want, got := etsRLogLik(c.ETS.LogLik, len(c.Adjusted)), fit.LogLik()
	mod, err := models.New(models.Spec{Family: models.FamilyMSTLETS, SeasonalPeriods: c.Periods, ETS: stlfETSOptions(t, c)})
	if err != nil {
		t.Fatal(err)
	}
	member, err := mod.Fit(c.Y, 1)
	if err != nil {
		t.Fatal(err)
	}
	fc := member.Forecast(c.H, nil).Mean
	d, _ := maxRel(fc, c.ETS.Mean)
	t.Logf("%s %s: loglik ours %.3f R %.3f (ours-R %+.3f); forecasts differ by up to %.4f relative", c.Name, member.Name(), got, want, got-want, d)
	switch {
	case got < want-1e-3*math.Abs(want):
		if gap, ok := weeklyMSTLETSShortfall[c.Name]; !ok || want-got > gap+0.01 {
			t.Errorf("%s: our log likelihood %.3f is below R's %.3f", c.Name, got, want)
		}
	case math.Abs(got-want) <= 0.5:
		closeAll(t, c.Name+" "+member.Name(), fc, c.ETS.Mean, 1e-3)
	}
}

// TestWeeklyARIMAAgainstR: daily series (m = 7) against R forecast 8.20's auto.arima(ts(y,
// frequency = 7)): at R's coefficients our likelihood, forecasts and bounds agree as in
// TestARIMALikelihoodAtRCoefficients; our fit of R's order reaches R's maximum (our log
// likelihood at least that at R's estimates minus 1e-4, forecasts within 1e-3, as
// TestARIMAFitMatchesR); SelectARIMA's choice is logged with R's. Measured: breadBristol the
// same order and forecasts; on milkLeeds (n = 900) R's search fits by CSS (its approximation
// for n > 150) and continues from the start (2,0,2)(1,1,1) that our exact fit rejects (a root
// within 1% of the unit circle), so ours ends at (1,0,0)(2,1,2), AICc 5.9 above R's order
// refitted by us, forecasts 2.7% apart. Weekly series (m = 52): our
// search fits no seasonal terms (arimaMaxSeason = 24, the advice of Hyndman & Athanasopoulos,
// FPP2 section 12.1, to model long seasons with Fourier terms), where R's auto.arima
// seasonally differences at lag 52 (r/weekly.R lists its choices); checked, not compared.
func TestWeeklyARIMAAgainstR(t *testing.T) {
	for _, c := range loadWeekly(t) {
		if c.M > 24 {
			fit, err := models.SelectARIMA(c.Y, c.M, models.ARIMABounds{})
			if err != nil {
				t.Fatalf("%s: %v", c.Name, err)
			}
			if o := fit.Order(); o.SP+o.SD+o.SQ > 0 {
				t.Errorf("%s: SelectARIMA with m = %d chose seasonal terms: %s", c.Name, c.M, fit.Name())
			}
			continue
		}
		if c.ARIMA == nil || len(c.ARIMA.Order) != 3 {
			t.Fatalf("%s: no auto.arima fit for m = %d in the fixture", c.Name, c.M)
		}
		r := *c.ARIMA
		r.Call = c.Name + ": " + r.Call
		checkARIMAAtR(t, c.Y, c.M, r)
		at, err := models.ARIMAAt(c.Y, c.M, r.order(), r.coef())
		if err != nil {
			t.Fatal(err)
		}
		own, err := models.FitARIMA(c.Y, c.M, r.order())
		if err != nil {
			t.Fatalf("%s: %v", r.Call, err)
		}
		if own.LogLik() < at.LogLik()-1e-4 {
			t.Errorf("%s: our fit of %s: loglik %.6f below that at R's estimates %.6f", c.Name, own.Name(), own.LogLik(), at.LogLik())
		}
		if d := etsMaxRel(own.Forecast(c.H, nil).Mean, r.Mean); d > 1e-3 {
			t.Errorf("%s: our fit of %s forecasts %.2g relative from R's", c.Name, own.Name(), d)
		}
		sel, err := models.SelectARIMA(c.Y, c.M, models.ARIMABounds{})
		if err != nil {
			t.Fatalf("%s: %v", c.Name, err)
		}
		d, _ := maxRel(sel.Forecast(c.H, nil).Mean, r.Mean)
		t.Logf("%-14s ours %s (AICc %.3f), R %s (AICc of our fit %.3f); forecasts differ by up to %.3f relative",
			c.Name, sel.Name(), sel.AICc(), r.order().String(c.M), own.AICc(), d)
	}
}
