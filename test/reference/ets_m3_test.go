package reference

import (
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/models"
)

// etsM3Fit is one row of testdata/ets_m3_r.csv: R forecast 8.20's ets() fit of one fixed form
// to one M3 series (made by r/ets_m3.R; the series themselves are read from the M3 data).
// LogLik is R's fit$loglik, without the Gaussian constant; Seasonal[0] is R's s1.
type etsM3Fit struct {
	Series string
	Form   models.ETSForm
	LogLik float64
	Params models.ETSParams
	Millis float64
	line   int
}

// etsFormOf parses the compact labels of the fixture: ANN, AAdN, MAM.
func etsFormOf(s string) (models.ETSForm, error) {
	if len(s) < 3 {
		return models.ETSForm{}, fmt.Errorf("form %q: want e.g. ANN, AAdN or MAM", s)
	}
	f := models.ETSForm{Error: s[:1], Trend: s[1:2], Season: s[2:]}
	if strings.HasPrefix(s[1:], "Ad") {
		f.Trend, f.Season = "Ad", s[3:]
	}
	return f, nil
}

// readETSM3Fixture reads testdata/ets_m3_r.csv (readCSV: its # lines name the source); errors
// name the line.
func readETSM3Fixture(t *testing.T) []etsM3Fit {
	t.Helper()
	num := func(s string) (float64, error) {
		if s == "" {
			return 0, nil
		}
		return strconv.ParseFloat(s, 64)
	}
	var out []etsM3Fit
	err := readCSV("testdata/ets_m3_r.csv", "series,form,loglik,alpha,beta,gamma,phi,l0,b0,seeds,cpu_ms", func(line int, f []string) error {
		if len(f) != 11 {
			return fmt.Errorf("%d fields, want 11", len(f))
		}
		form, err := etsFormOf(f[1])
		if err != nil {
			return err
		}
		v := make([]float64, 11)
		var errs []error
		for _, i := range []int{2, 3, 4, 5, 6, 7, 8, 10} {
			var e error
			v[i], e = num(f[i])
			errs = append(errs, e)
		}
		r := etsM3Fit{Series: f[0], Form: form, LogLik: v[2], Millis: v[10], line: line,
			Params: models.ETSParams{Alpha: v[3], Beta: v[4], Gamma: v[5], Phi: v[6], Level: v[7], Slope: v[8]}}
		if form.Trend != "Ad" {
			r.Params.Phi = 1
		}
		for _, s := range strings.Fields(f[9]) {
			x, e := strconv.ParseFloat(s, 64)
			errs = append(errs, e)
			r.Params.Seasonal = append(r.Params.Seasonal, x)
		}
		if err := errors.Join(errs...); err != nil {
			return err
		}
		out = append(out, r)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// Bounds for TestETSOptimiserAgainstRM3, per form: the share of fits where our log likelihood
// is below R's by more than 0.1 and by more than 1. Measured when the fixture was made (go test
// ./test/reference/ -run OptimiserAgainstRM3 -v; PROJECT-NOTES, tenth session): ETS(A,N,N)
// 0.8% / 0%, ETS(A,Ad,N) 3.6% / 0.4%, ETS(M,A,M) 5.1% / 1.9%; ours is above R's by more than
// 0.1 on 10%, 68% and 91%. The bounds add margin; an optimiser that stops early or misses the
// seeds' optimum exceeds them (one with a quarter of the evaluation budget did, see the notes).
var etsM3Bounds = map[string][2]float64{
	"ETS(A,N,N)":  {0.02, 0.005},
	"ETS(A,Ad,N)": {0.06, 0.01},
	"ETS(M,A,M)":  {0.08, 0.03},
}

// TestETSOptimiserAgainstRM3 compares our maximum-likelihood search with R forecast 8.20's
// ets() on the same forms, on every 3rd M3 series (Makridakis & Hibon 2000; the sample rule and
// forms are in r/ets_m3.R). First the likelihood definitions: at R's estimates our recursion
// must give R's log likelihood (relative 1e-8), so the comparison is of optimisers. Then each
// form is fitted by FitETS and the gap R - ours is measured: per form, the share of fits below
// R's by more than 0.1 and by more than 1 must stay within etsM3Bounds, and the median gap must
// not be positive (ours at least as high as R's on the typical series). Skipped without the M3
// data.
func TestETSOptimiserAgainstRM3(t *testing.T) {
	dir := m3Dir()
	if dir == "" {
		t.Skip("M3 data not found (set ALMANAC_M3_DIR or provide ../shared/datasets/m3)")
	}
	set := loadM3(t, dir)
	fits := readETSM3Fixture(t)
	gaps := map[string][]float64{}
	rMillis := map[string]float64{}
	evals := map[string]int{}
	for _, r := range fits {
		s := set[r.Series]
		if s == nil {
			t.Fatalf("testdata/ets_m3_r.csv:%d: series %s is not in the M3 data", r.line, r.Series)
		}
		m := s.m
		if r.Form.Season == "N" {
			m = 1
		}
		want := etsRLogLik(r.LogLik, len(s.y))
		at, err := models.ETSAt(s.y, m, r.Form, r.Params)
		if err != nil {
			t.Errorf("%s %s at R's estimates: %v", r.Series, r.Form, err)
			continue
		}
		if d := etsRel(at.LogLik(), want); d > 1e-8 {
			t.Errorf("%s %s: loglik at R's estimates %.10g, R %.10g (rel diff %.2g)", r.Series, r.Form, at.LogLik(), want, d)
		}
		fit, err := models.FitETS(s.y, m, r.Form)
		if err != nil {
			t.Errorf("%s %s: %v", r.Series, r.Form, err)
			continue
		}
		name := r.Form.String()
		gaps[name] = append(gaps[name], want-fit.LogLik())
		rMillis[name] += r.Millis
		evals[name] += fit.Evaluations()
	}
	// share returns the fraction of v with sign*g > x.
	share := func(v []float64, sign, x float64) float64 {
		c := 0
		for _, g := range v {
			if sign*g > x {
				c++
			}
		}
		return float64(c) / float64(len(v))
	}
	for _, name := range []string{"ETS(A,N,N)", "ETS(A,Ad,N)", "ETS(M,A,M)"} {
		v := gaps[name]
		if len(v) == 0 {
			t.Errorf("%s: no fits", name)
			continue
		}
		sorted := slices.Clone(v)
		slices.Sort(sorted)
		med := sorted[len(sorted)/2]
		below01, below1, above01 := share(v, 1, 0.1), share(v, 1, 1), share(v, -1, 0.1)
		t.Logf("%-12s %4d fits: ours below R's by > 0.1 on %.1f%%, by > 1 on %.1f%%, above by > 0.1 on %.1f%%; median R - ours %+.4f, worst %+.2f; %.0f evaluations per fit, R %.2f ms per fit",
			name, len(v), 100*below01, 100*below1, 100*above01, med, sorted[len(sorted)-1], float64(evals[name])/float64(len(v)), rMillis[name]/float64(len(v)))
		b := etsM3Bounds[name]
		if below01 > b[0] || below1 > b[1] {
			t.Errorf("%s: ours below R's by > 0.1 on %.1f%% (bound %.1f%%), by > 1 on %.1f%% (bound %.1f%%)", name, 100*below01, 100*b[0], 100*below1, 100*b[1])
		}
		if med > 0 {
			t.Errorf("%s: median gap R - ours %+.4f: ours below R's on the typical series", name, med)
		}
	}
}
