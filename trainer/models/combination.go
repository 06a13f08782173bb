package models

import (
	"errors"
	"fmt"
	"sort"
	"strings"
)

func init() {
	for _, c := range combinations {
		Register(c.family, func(s Spec) (Model, error) { return newCombination(s, c) })
	}
}

// Fixed combinations of families, each fitted to a series as one zoo member.
//
// Choice recorded in PROJECT-NOTES.md: selection.Config's CombineTop (with a large
// CombineMargin) already averages the best members of a zoo after backtesting them, but only
// across the whole zoo; these members make a published combination a candidate that per-series
// selection can weigh against the others, and a model a portfolio can ask for by name.
const (
	// FamilyETSARIMATheta is the equal-weight mean of the ETS, ARIMA and Theta families.
	FamilyETSARIMATheta = "ETSARIMATheta"
	// FamilyETSARIMADOTMCESMedian is the median of the ETS, ARIMA, DOTM and CES families, the
	// combination Petropoulos & Svetunkov (2020, "A simple combination of univariate models",
	// International Journal of Forecasting 36(1), 110-115) entered in the M4 competition
	// (sixth of the methods ranked).
	FamilyETSARIMADOTMCESMedian = "ETSARIMADOTMCESMedian"
	// FamilyETSARIMADOTMCESMean is the equal-weight mean of the same four families.
	FamilyETSARIMADOTMCESMean = "ETSARIMADOTMCESMean"
)

// combination declares a fixed combination: its family, its members' families and whether
// it takes the median (else the mean).
type combination struct {
	family  string
	members []string
	median  bool
}

var combinations = []combination{
	{FamilyETSARIMATheta, []string{FamilyETS, FamilyARIMA, FamilyTheta}, false},
	{FamilyETSARIMADOTMCESMedian, []string{FamilyETS, FamilyARIMA, FamilyDOTM, FamilyCES}, true},
	{FamilyETSARIMADOTMCESMean, []string{FamilyETS, FamilyARIMA, FamilyDOTM, FamilyCES}, false},
}

// combinationModel fits its members and combines them.
type combinationModel struct {
	name    string
	kind    combination
	members []Model
}

func newCombination(s Spec, c combination) (Model, error) {
	var ms []Model
	for _, f := range c.members {
		m, err := New(Spec{Family: f, SeasonLength: s.SeasonLength})
		if err != nil {
			return nil, fmt.Errorf("models: %s: %w", s.DisplayName(), err)
		}
		ms = append(ms, m)
	}
	return &combinationModel{name: s.DisplayName(), kind: c, members: ms}, nil
}

// Family returns the combination's family.
func (c *combinationModel) Family() string { return c.kind.family }

// MinLength returns the shortest series some member can fit.
func (c *combinationModel) MinLength(m int) int {
	best := c.members[0].MinLength(m)
	for _, mm := range c.members[1:] {
		best = min(best, mm.MinLength(m))
	}
	return best
}

// Fit fits every member; members that fail or need a longer series are left out of the
// combination (the fit's name lists those used). It fails only when no member fits.
func (c *combinationModel) Fit(y []float64, m int) (Fitted, error) {
	var fits []Fitted
	var used []Model
	var errs []error
	for _, mm := range c.members {
		if len(y) < mm.MinLength(m) {
			continue
		}
		f, err := mm.Fit(y, m)
		if err != nil {
			errs = append(errs, err)
			continue
		}
		fits = append(fits, f)
		used = append(used, mm)
	}
	if len(fits) == 0 {
		if len(errs) == 0 {
			return nil, tooShort(c.name, len(y), c.MinLength(m))
		}
		return nil, fmt.Errorf("models: %s: no member could be fitted: %w", c.name, errors.Join(errs...))
	}
	return &combinationFit{kind: c.kind, fits: fits, models: used, n: len(y), m: m}, nil
}

// combinationFit is the combination of the fitted members. It implements Fitted.
type combinationFit struct {
	kind   combination
	fits   []Fitted
	models []Model // models[i] fitted fits[i]
	n, m   int     // observations fitted, season length
}

// Update carries the combination forward to y, a longer history of which the fitted one is a
// prefix (backtest.Updater): members whose fits can be updated (ETS, ARIMA, CES) keep their
// estimates, the others (Theta, DOTM: cheap to fit) are refitted on y. The members stay those
// of the fit; one that fails on y is left out, as in Fit, and the update fails only when none is
// left.
func (f *combinationFit) Update(y []float64) (Fitted, error) {
	if len(y) < f.n {
		return nil, fmt.Errorf("models: %s: update needs at least the %d fitted observations, got %d", f.kind.family, f.n, len(y))
	}
	out := &combinationFit{kind: f.kind, n: len(y), m: f.m}
	var errs []error
	for i, fit := range f.fits {
		var g Fitted
		var err error
		if u, ok := fit.(interface {
			Update([]float64) (Fitted, error)
		}); ok {
			g, err = u.Update(y)
		} else {
			g, err = f.models[i].Fit(y, f.m)
		}
		if err != nil {
			errs = append(errs, err)
			continue
		}
		out.fits = append(out.fits, g)
		out.models = append(out.models, f.models[i])
	}
	if len(out.fits) == 0 {
		return nil, fmt.Errorf("models: %s: no member could be updated: %w", f.kind.family, errors.Join(errs...))
	}
	return out, nil
}

// Name lists the members, e.g. "mean(ETS(M,A,N),ARIMA(0,1,1),Theta)" or "median(...)".
func (f *combinationFit) Name() string {
	names := make([]string, len(f.fits))
	for i, m := range f.fits {
		names[i] = m.Name()
	}
	return f.kind.how() + "(" + strings.Join(names, ",") + ")"
}

func (c combination) how() string {
	if c.median {
		return "median"
	}
	return "mean"
}

// Params returns the members' parameters prefixed by their index, "0.alpha", "1.phi1", ...
func (f *combinationFit) Params() map[string]float64 {
	out := map[string]float64{}
	for i, m := range f.fits {
		for k, v := range m.Params() {
			out[fmt.Sprint(i)+"."+k] = v
		}
	}
	return out
}

// Forecast combines the members' means and, level by level, their quantiles: the mean (the
// quantile average, Lichtendahl, Grushka-Cockayne & Winkler 2013) or the median (of an even
// number of members, the mean of the middle two), step by step. When a member gives no
// quantiles the combination gives none, and the caller fills them empirically.
func (f *combinationFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	fcs := make([]Forecast, len(f.fits))
	withQ := len(levels) > 0
	for i, m := range f.fits {
		fcs[i] = m.Forecast(h, levels)
		withQ = withQ && fcs[i].Quantiles != nil
	}
	out := Forecast{Mean: make([]float64, h), Levels: copyLevels(levels)}
	col := make([]float64, len(fcs))
	combine := func(pick func(Forecast) []float64, dst []float64) {
		for k := range dst {
			for i, fc := range fcs {
				col[i] = pick(fc)[k]
			}
			dst[k] = f.kind.reduce(col)
		}
	}
	combine(func(fc Forecast) []float64 { return fc.Mean }, out.Mean)
	if withQ {
		out.Quantiles = make([][]float64, len(levels))
		for j := range levels {
			out.Quantiles[j] = make([]float64, h)
			combine(func(fc Forecast) []float64 { return fc.Quantiles[j] }, out.Quantiles[j])
		}
	}
	return out
}

// reduce returns the mean or the median of v (reordering v); NaN when any value is NaN.
func (c combination) reduce(v []float64) float64 {
	var sum float64
	for _, x := range v {
		sum += x
	}
	if !c.median || sum != sum {
		return sum / float64(len(v))
	}
	sort.Float64s(v)
	n := len(v)
	if n%2 == 1 {
		return v[n/2]
	}
	return (v[n/2-1] + v[n/2]) / 2
}

// InSample combines the members' one-step predictions (NaN where any is NaN).
func (f *combinationFit) InSample() []float64 {
	ins := make([][]float64, len(f.fits))
	for i, m := range f.fits {
		ins[i] = m.InSample()
	}
	out := make([]float64, f.n)
	col := make([]float64, len(ins))
	for t := range out {
		for i, v := range ins {
			col[i] = v[t]
		}
		out[t] = f.kind.reduce(col)
	}
	return out
}
