package reference

import (
	"math"
	"slices"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/numeric/stl"
)

// mstlRef is testdata/mstl_r.json, made by r/mstl.R with R forecast 8.20's mstl and
// forecast.mstl (Debian r-cran-forecast, R 4.2.2): invented hourly, daily and weekly series
// (two, two and one non-integer season), the first 1344 half-hours of R's taylor (periods 48
// and 336) and log AirPassengers (12).
type mstlRef struct {
	Source string
	Cases  []mstlCase
}

type mstlCase struct {
	Name      string
	Y         []float64
	Periods   []float64
	H         int
	Call      string
	Kept      []float64
	Trend     []float64
	Remainder []float64
	Seasonal  [][]float64
	Adjusted  []float64
	ETS       mstlForecast
	ARIMA     mstlForecast
	Theta     mstlForecast
}

type mstlForecast struct {
	Method   string
	Mean     []float64
	Seasonal []float64
	// LogLik is R's log likelihood of the ETS fit as R reports it (weekly_r.json only).
	LogLik float64
}

func loadMSTL(t testing.TB) mstlRef {
	var r mstlRef
	loadFixture(t, "mstl_r.json", &r)
	if len(r.Cases) == 0 {
		t.Fatal("no MSTL cases")
	}
	return r
}

// closeAll reports the first element of got further than tol (relative to max(1, |want|))
// from want.
func closeAll(t *testing.T, what string, got, want []float64, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Errorf("%s: length %d, want %d", what, len(got), len(want))
		return
	}
	for i := range want {
		if !(math.Abs(got[i]-want[i]) <= tol*math.Max(1, math.Abs(want[i]))) {
			t.Errorf("%s[%d] = %.12g, want %.12g (tol %g)", what, i, got[i], want[i], tol)
			return
		}
	}
}

// TestMSTLMatchesR: the decomposition agrees with R's mstl to 1e-9 on every case, including
// the non-integer periods 365.25 and 52.18 and a period dropped for having fewer than two
// cycles; the seasonal part of the forecast (the last cycles repeated) agrees as well.
func TestMSTLMatchesR(t *testing.T) {
	for _, c := range loadMSTL(t).Cases {
		t.Run(c.Name, func(t *testing.T) { checkMSTLDecomposition(t, c) })
	}
}

// checkMSTLDecomposition compares stl.MSTL on c.Y with R's mstl to 1e-9. R labels a period
// by the frequency of the series it decomposed: msts(y, seasonal.periods = 52.18) with one
// period is a plain ts of frequency floor(52.18) = 52 (forecast 8.20's msts), so a kept
// period p matches R's label p or floor(p).
func checkMSTLDecomposition(t *testing.T, c mstlCase) {
	t.Helper()
	d, err := stl.MSTL(c.Y, c.Periods, stl.MSTLOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if len(d.Periods) != len(c.Kept) {
		t.Fatalf("kept periods %v, R kept %v", d.Periods, c.Kept)
	}
	for i := range c.Kept {
		if d.Periods[i] != c.Kept[i] && math.Floor(d.Periods[i]) != c.Kept[i] {
			t.Fatalf("kept periods %v, R kept %v", d.Periods, c.Kept)
		}
		closeAll(t, "seasonal", d.Seasonal[i], c.Seasonal[i], 1e-9)
	}
	closeAll(t, "trend", d.Trend, c.Trend, 1e-9)
	closeAll(t, "remainder", d.Remainder, c.Remainder, 1e-9)
	closeAll(t, "adjusted", d.Adjusted(), c.Adjusted, 1e-9)
	closeAll(t, "seasonal forecast", d.SeasonalForecast(c.H), c.Theta.Seasonal, 1e-9)
}

// TestMSTLMembersMatchR: the MSTL members against forecast.mstl's ets and auto.arima forecasts
// and thetaf on the adjusted series (see r/mstl.R), the seasonal part re-added. Theta has no
// search and agrees to 1e-5 (relative). ETS is given R's chosen form (the member's own search
// forecasts with the Akaike-weighted mean of its refined forms, which R does not, so only
// R's form can be compared) and agrees to 1e-3. ARIMA agrees to 1e-3 where the search picks
// R's order, otherwise within 5%: our ARIMA search, which has no equivalent of auto.arima's
// approximation (CSS-based criteria during the search for n > 150), picks R's order on 1 of 6
// (measured when the fixture was made). Before the Akaike weights our ETS search picked R's
// form on 4 of 6 (A,N,N where R picks A,A,N on the other 2).
func TestMSTLMembersMatchR(t *testing.T) {
	for _, c := range loadMSTL(t).Cases {
		checkMSTLMembers(t, c, models.FamilyMSTLETS, models.FamilyMSTLARIMA, models.FamilyMSTLTheta)
	}
}

// checkMSTLMembers compares the MSTL members named on c.Y with R's forecasts (see
// TestMSTLMembersMatchR for the tolerances).
func checkMSTLMembers(t *testing.T, c mstlCase, families ...string) {
	t.Helper()
	for _, m := range []struct {
		family string
		ref    mstlForecast
	}{{models.FamilyMSTLETS, c.ETS}, {models.FamilyMSTLARIMA, c.ARIMA}, {models.FamilyMSTLTheta, c.Theta}} {
		if !slices.Contains(families, m.family) {
			continue
		}
		spec := models.Spec{Family: m.family, SeasonalPeriods: c.Periods}
		if m.family == models.FamilyMSTLETS {
			spec.ETS = stlfETSOptions(t, c)
		}
		mod, err := models.New(spec)
		if err != nil {
			t.Fatal(err)
		}
		fit, err := mod.Fit(c.Y, 1)
		if err != nil {
			t.Fatalf("%s %s: %v", c.Name, m.family, err)
		}
		got := fit.Forecast(c.H, nil).Mean
		_, form, _ := strings.Cut(fit.Name(), ")+")
		rForm := strings.ReplaceAll(strings.TrimPrefix(m.ref.Method, "STL +  "), " with drift", "+drift")
		tol := 1e-3
		switch {
		case m.family == models.FamilyMSTLTheta:
			tol = 1e-5
		case form != rForm:
			tol = 0.05
			t.Logf("%s %s: %s, R chose %s", c.Name, m.family, fit.Name(), m.ref.Method)
		}
		closeAll(t, c.Name+" "+fit.Name(), got, m.ref.Mean, tol)
	}
}

// stlfETSForm reads the ETS form R's stlf chose on c from its method name ("STL +  ETS(A,Ad,N)").
func stlfETSForm(t *testing.T, c mstlCase) models.ETSForm {
	t.Helper()
	form := strings.TrimSuffix(strings.TrimPrefix(c.ETS.Method, "STL +  ETS("), ")")
	parts := strings.Split(form, ",")
	if len(parts) != 3 {
		t.Fatalf("%s: cannot read R's ETS form from %q", c.Name, c.ETS.Method)
	}
	return models.ETSForm{Error: parts[0], Trend: parts[1], Season: parts[2]}
}

// stlfETSOptions restricts the ETS search to the form R's stlf chose on c (stlfETSForm).
func stlfETSOptions(t *testing.T, c mstlCase) *models.ETSOptions {
	t.Helper()
	f := stlfETSForm(t, c)
	return &models.ETSOptions{Errors: []string{f.Error}, Trends: []string{f.Trend}, Seasons: []string{f.Season}}
}
