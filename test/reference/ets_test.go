package reference

import (
	"math"
	"testing"

	"almanac.dev/almanac/trainer/models"
)

// The ETS checks compare trainer/models against R 4.2.2 with forecast 8.20 (Debian
// r-cran-forecast); the fixtures are in ets_fixtures_test.go, made by r/ets.R, and each case
// carries the exact R call.

// etsRefSeries is one R dataset: season length (frequency) and values.
type etsRefSeries struct {
	M int
	Y []float64
}

// etsRefFit is one R fit: the call, the chosen form, the estimates (Level, Slope and Seasonal
// are R's fit$states[1, ]; Seasonal[0] is R's s1, the most recent seed), the criteria as R
// reports them (LogLik without the Gaussian constant), and forecast(fit, h, level = c(80, 95))
// with h = max(10, 2m). Var is R's analytic forecast variance of the linear forms (class1 or
// class2; see r/ets.R for the zero-trend rewrite of seasonal forms without trend). For
// multiplicative-season forms Mean is R's class-3 mean, Point the point forecast and Sim* the
// bounds of forecast(..., simulate = TRUE, npaths = 5000).
type etsRefFit struct {
	Data, Call                         string
	Auto                               bool
	Error, Trend, Season               string
	Alpha, Beta, Gamma, Phi            float64
	Level, Slope                       float64
	Seasonal                           []float64
	LogLik, AIC, AICc, BIC, Sigma2     float64
	Mean, Lo80, Hi80, Lo95, Hi95       []float64
	Var, Point                         []float64
	SimLo80, SimHi80, SimLo95, SimHi95 []float64
	Millis                             float64
}

func (r etsRefFit) form() models.ETSForm {
	return models.ETSForm{Error: r.Error, Trend: r.Trend, Season: r.Season}
}

func (r etsRefFit) params() models.ETSParams {
	phi := r.Phi
	if r.Trend != "Ad" {
		phi = 1
	}
	return models.ETSParams{Alpha: r.Alpha, Beta: r.Beta, Gamma: r.Gamma, Phi: phi,
		Level: r.Level, Slope: r.Slope, Seasonal: r.Seasonal}
}

// etsRLogLik converts R's reported log likelihood (-0.5 times the criterion, HKOS 2008 eq. 5.3
// without constants) into the full Gaussian log likelihood that ETSFit.LogLik reports.
func etsRLogLik(rLogLik float64, n int) float64 {
	nf := float64(n)
	return rLogLik - 0.5*nf*(math.Log(2*math.Pi/nf)+1)
}

func etsRel(got, want float64) float64 {
	d := math.Abs(got - want)
	if s := math.Max(math.Abs(got), math.Abs(want)); s > 0 {
		return d / s
	}
	return d
}

func etsMaxRel(got, want []float64) float64 {
	worst := 0.0
	for i := range want {
		if i >= len(got) {
			return math.Inf(1)
		}
		worst = math.Max(worst, etsRel(got[i], want[i]))
	}
	return worst
}

// etsLevels are the quantile levels of R's 80% and 95% intervals.
var etsLevels = []float64{0.025, 0.1, 0.9, 0.975}

// TestETSLikelihoodAtRParameters is the strongest check: at R's own estimates and seed states,
// our recursion must reproduce R's log likelihood, innovation variance and point forecasts
// almost exactly, and the analytic intervals of the linear forms (R's class1/class2 formulas)
// too. Tolerance 1e-8 relative: both compute the same sums in double precision, and the
// fixtures print 15 significant digits.
func TestETSLikelihoodAtRParameters(t *testing.T) {
	const tol = 1e-8
	for _, r := range etsFitsR {
		s := etsSeriesR[r.Data]
		m := s.M
		if r.Season == "N" {
			m = 1
		}
		fit, err := models.ETSAt(s.Y, m, r.form(), r.params())
		if err != nil {
			t.Errorf("%s: %v", r.Call, err)
			continue
		}
		n := len(s.Y)
		if d := etsRel(fit.LogLik(), etsRLogLik(r.LogLik, n)); d > tol {
			t.Errorf("%s: loglik at R's estimates %.10g, R %.10g (rel diff %.2g)", r.Call, fit.LogLik(), etsRLogLik(r.LogLik, n), d)
		}
		if d := etsRel(fit.AICc()-fit.AIC(), r.AICc-r.AIC); d > tol {
			t.Errorf("%s: AICc correction %.10g, R %.10g", r.Call, fit.AICc()-fit.AIC(), r.AICc-r.AIC)
		}
		if d := etsRel(fit.Sigma2(), r.Sigma2); d > tol {
			t.Errorf("%s: sigma2 %.10g, R %.10g", r.Call, fit.Sigma2(), r.Sigma2)
		}
		fc := fit.Forecast(len(r.Mean), etsLevels)
		if r.Season == "M" {
			// The first m means equal the point forecast from R's final states (r/ets.R); the
			// class-3 correction starts at step m+1.
			if d := etsMaxRel(fc.Mean[:s.M], r.Point[:s.M]); d > tol {
				t.Errorf("%s: first-season means differ from R's point forecasts by %.2g relative", r.Call, d)
			}
			if r.Trend == "Ad" {
				// R's class3 damps the slope after the step (see ETSFit.class3Mean), so its
				// means are not the model's; only the undamped ones are compared in full.
				t.Logf("%s: class-3 means ours vs R's (damping placed differently) differ by %.2g", r.Call, etsMaxRel(fc.Mean, r.Mean))
				continue
			}
			if d := etsMaxRel(fc.Mean, r.Mean); d > tol {
				t.Errorf("%s: class-3 means at R's estimates differ by %.2g relative\n got %v\nwant %v", r.Call, d, fc.Mean, r.Mean)
			}
			continue // bounds are simulated; see TestETSSimulatedIntervals
		}
		if d := etsMaxRel(fc.Mean, r.Mean); d > tol {
			t.Errorf("%s: point forecasts at R's estimates differ by %.2g relative\n got %v\nwant %v", r.Call, d, fc.Mean, r.Mean)
		}
		// Bounds against the textbook variance as R computes it (Var) ...
		for j, p := range etsLevels {
			z := math.Sqrt2 * math.Erfinv(2*p-1)
			want := make([]float64, len(r.Var))
			for k, v := range r.Var {
				want[k] = r.Mean[k] + z*math.Sqrt(v)
			}
			if d := etsMaxRel(fc.Quantiles[j], want); d > tol {
				t.Errorf("%s: level %.3f bound differs by %.2g relative\n got %v\nwant %v", r.Call, p, d, fc.Quantiles[j], want)
			}
		}
		// ... and against R's printed bounds, all steps for forms with a trend or no season,
		// the first m-1 steps for seasonal forms without trend (see r/ets.R on R's G matrix).
		steps := len(r.Mean)
		if r.Trend == "N" && r.Season == "A" {
			steps = s.M - 1
		}
		for j, want := range [][]float64{r.Lo95, r.Lo80, r.Hi80, r.Hi95} {
			if d := etsMaxRel(fc.Quantiles[j][:steps], want[:steps]); d > tol {
				t.Errorf("%s: level %.3f bound differs from R's printed bound by %.2g relative", r.Call, etsLevels[j], d)
			}
		}
	}
}

// TestETSSimulatedIntervals compares our simulated bounds for multiplicative-season forms,
// at R's estimates, with R's simulated bounds (forecast(..., simulate = TRUE, npaths = 5000)).
// Both are Monte Carlo estimates with different generators (R: 5000 paths; ours: 2000), so the
// tolerance is 4% relative: the standard error of a 2.5% tail quantile from 2000 paths is about
// 0.7 sd of the path distribution divided by sqrt(2000 * 0.025) ~ 1% of sd-scale, and the bounds
// are compared on the level of the series, where sd is a fraction of the value.
func TestETSSimulatedIntervals(t *testing.T) {
	const tol = 0.04
	for _, r := range etsFitsR {
		if r.Season != "M" {
			continue
		}
		s := etsSeriesR[r.Data]
		fit, err := models.ETSAt(s.Y, s.M, r.form(), r.params())
		if err != nil {
			t.Fatalf("%s: %v", r.Call, err)
		}
		fc := fit.Forecast(len(r.Mean), etsLevels)
		for j, want := range [][]float64{r.SimLo95, r.SimLo80, r.SimHi80, r.SimHi95} {
			d := etsMaxRel(fc.Quantiles[j], want)
			if d > tol {
				t.Errorf("%s: simulated level %.3f bound differs by %.3f relative\n got %v\nwant %v", r.Call, etsLevels[j], d, fc.Quantiles[j], want)
			}
		}
	}
}

// etsKnownShortfall lists fixed-form fits where our optimiser is known to end below R's
// likelihood by more than the tolerance, with the gap seen when it was recorded. They are
// reported, not failed; any other shortfall fails.
var etsKnownShortfall = map[string]float64{
	// The evaluation budget runs out in a 10-dimensional search on a strongly multiplicative
	// series fitted with additive season: ours -610.2, R -604.7.
	`ets(UKgas, model = "MAA", damped = FALSE)`: 5.6,
}

// TestETSFixedFormsAgainstR fits each fixed form with our optimiser and compares with R's
// fit of the same form. Likelihood optimisers differ (R's ets runs optim's Nelder-Mead from
// one simplex whose step is 10% of the largest starting value; ours runs a weights-only stage
// from two starts, then a joint search with restarts), so neither is the exact maximum: we
// require our log likelihood to be no worse than R's by more than 1e-3 of |log L| and report
// the difference. Where the two optima agree (log likelihoods within 0.5) the point
// forecasts must agree within 3% relative over two seasons (or 10 steps); where ours is
// clearly higher the forecasts come from a different optimum and are only reported.
func TestETSFixedFormsAgainstR(t *testing.T) {
	for _, r := range etsFitsR {
		if r.Auto {
			continue
		}
		s := etsSeriesR[r.Data]
		m := s.M
		if r.Season == "N" {
			m = 1
		}
		fit, err := models.FitETS(s.Y, m, r.form())
		if err != nil {
			t.Errorf("%s: %v", r.Call, err)
			continue
		}
		want := etsRLogLik(r.LogLik, len(s.Y))
		got := fit.LogLik()
		fc := fit.Forecast(len(r.Mean), nil)
		d := etsMaxRel(fc.Mean, r.Mean)
		t.Logf("%-48s loglik ours %10.3f R %10.3f (ours-R %+7.3f), forecasts differ <= %.3f, %d evaluations", r.Call, got, want, got-want, d, fit.Evaluations())
		if got < want-1e-3*math.Abs(want) {
			if gap, known := etsKnownShortfall[r.Call]; known && want-got <= gap+0.1 {
				t.Logf("%s: known shortfall %.3f", r.Call, want-got)
			} else {
				t.Errorf("%s: our log likelihood %.4f is worse than R's %.4f", r.Call, got, want)
			}
			continue
		}
		if math.Abs(got-want) <= 0.5 && d > 0.03 {
			t.Errorf("%s: same optimum but point forecasts differ by %.3f relative\n got %v\nwant %v", r.Call, d, fc.Mean, r.Mean)
		}
	}
}

// TestETSAutoAgainstR runs the automatic AICc search on each series and compares the chosen
// form with R's ets(y). Where the choice differs, our choice must have a smaller AICc than
// R's choice has by R's own fit (R's AICc moved to the full Gaussian likelihood): the search
// then found a better-scoring model, usually because our optimiser reached a higher
// likelihood for some form (see TestETSFixedFormsAgainstR). Both AICc values are logged. A
// majority of the 9 series must agree.
func TestETSAutoAgainstR(t *testing.T) {
	agree, total := 0, 0
	for _, r := range etsFitsR {
		if !r.Auto {
			continue
		}
		total++
		s := etsSeriesR[r.Data]
		fit, err := models.SelectETS(s.Y, s.M, nil)
		if err != nil {
			t.Errorf("%s: %v", r.Call, err)
			continue
		}
		n := float64(len(s.Y))
		rAICc := r.AICc + n*(math.Log(2*math.Pi/n)+1)
		rName := r.form().String()
		if fit.Name() == rName {
			agree++
			t.Logf("%-22s both choose %s (AICc ours %.3f, R %.3f)", r.Call, rName, fit.AICc(), rAICc)
			continue
		}
		t.Logf("%-22s ours %s (AICc %.3f), R %s (AICc %.3f by R's fit)", r.Call, fit.Name(), fit.AICc(), rName, rAICc)
		if !(fit.AICc() <= rAICc) {
			t.Errorf("%s: chose %s with AICc %.3f but R's %s has AICc %.3f", r.Call, fit.Name(), fit.AICc(), rName, rAICc)
		}
	}
	t.Logf("automatic choice agrees with R on %d of %d series", agree, total)
	if 2*agree <= total {
		t.Errorf("automatic choice agrees with R on only %d of %d series", agree, total)
	}
}
