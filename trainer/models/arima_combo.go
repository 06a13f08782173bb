package models

import (
	"errors"
	"fmt"
	"strings"
)

func init() { Register(FamilyETSARIMATheta, newTrio) }

// FamilyETSARIMATheta is the equal-weight combination of the ETS, ARIMA and Theta families,
// fitted to each series as one zoo member.
//
// Choice recorded in PROJECT-NOTES.md: selection.Config's CombineTop (with a large
// CombineMargin) already averages the best members of a zoo after backtesting them, but only
// across the whole zoo; this member makes "the mean of ETS, ARIMA and Theta" a candidate that
// per-series selection can weigh against the others, and the model a portfolio can ask for by
// name.
const FamilyETSARIMATheta = "ETSARIMATheta"

// trioModel fits its members and averages them.
type trioModel struct {
	name    string
	members []Model
}

func newTrio(s Spec) (Model, error) {
	var ms []Model
	for _, f := range []string{FamilyETS, FamilyARIMA, FamilyTheta} {
		m, err := New(Spec{Family: f, SeasonLength: s.SeasonLength})
		if err != nil {
			return nil, fmt.Errorf("models: %s: %w", s.DisplayName(), err)
		}
		ms = append(ms, m)
	}
	return &trioModel{name: s.DisplayName(), members: ms}, nil
}

// Family returns FamilyETSARIMATheta.
func (t *trioModel) Family() string { return FamilyETSARIMATheta }

// MinLength returns the shortest series some member can fit.
func (t *trioModel) MinLength(m int) int {
	best := t.members[0].MinLength(m)
	for _, mm := range t.members[1:] {
		best = min(best, mm.MinLength(m))
	}
	return best
}

// Fit fits every member; members that fail are left out of the average (the fit's name lists
// those used). It fails only when no member fits.
func (t *trioModel) Fit(y []float64, m int) (Fitted, error) {
	var fits []Fitted
	var used []Model
	var errs []error
	for _, mm := range t.members {
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
			return nil, tooShort(t.name, len(y), t.MinLength(m))
		}
		return nil, fmt.Errorf("models: %s: no member could be fitted: %w", t.name, errors.Join(errs...))
	}
	return &trioFit{fits: fits, models: used, n: len(y), m: m}, nil
}

// trioFit is the combination of the fitted members. It implements Fitted.
type trioFit struct {
	fits   []Fitted
	models []Model // models[i] fitted fits[i]
	n, m   int     // observations fitted, season length
}

// Update carries the combination forward to y, a longer history of which the fitted one is a
// prefix (backtest.Updater): members whose fits can be updated (ETS, ARIMA) keep their
// estimates, the others (Theta, cheap to fit) are refitted on y. The members stay those of the
// fit; one that fails on y is left out, as in Fit, and the update fails only when none is left.
func (f *trioFit) Update(y []float64) (Fitted, error) {
	if len(y) < f.n {
		return nil, fmt.Errorf("models: %s: update needs at least the %d fitted observations, got %d", FamilyETSARIMATheta, f.n, len(y))
	}
	out := &trioFit{n: len(y), m: f.m}
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
		return nil, fmt.Errorf("models: %s: no member could be updated: %w", FamilyETSARIMATheta, errors.Join(errs...))
	}
	return out, nil
}

// Name lists the members, e.g. "mean(ETS(M,A,N),ARIMA(0,1,1),Theta)".
func (f *trioFit) Name() string {
	names := make([]string, len(f.fits))
	for i, m := range f.fits {
		names[i] = m.Name()
	}
	return "mean(" + strings.Join(names, ",") + ")"
}

// Params returns the members' parameters prefixed by their index, "0.alpha", "1.phi1", ...
func (f *trioFit) Params() map[string]float64 {
	out := map[string]float64{}
	for i, m := range f.fits {
		for k, v := range m.Params() {
			out[fmt.Sprint(i)+"."+k] = v
		}
	}
	return out
}

// Forecast averages the members' means and, level by level, their quantiles (the quantile
// average, Lichtendahl, Grushka-Cockayne & Winkler 2013). When a member gives no quantiles
// the combination gives none, and the caller fills them empirically.
func (f *trioFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	out := Forecast{Mean: make([]float64, h), Levels: copyLevels(levels)}
	withQ := len(levels) > 0
	if withQ {
		out.Quantiles = make([][]float64, len(levels))
		for j := range out.Quantiles {
			out.Quantiles[j] = make([]float64, h)
		}
	}
	w := 1 / float64(len(f.fits))
	for _, m := range f.fits {
		fc := m.Forecast(h, levels)
		for k, v := range fc.Mean {
			out.Mean[k] += w * v
		}
		if !withQ {
			continue
		}
		if fc.Quantiles == nil {
			out.Quantiles, withQ = nil, false
			continue
		}
		for j := range levels {
			for k, v := range fc.Quantiles[j] {
				out.Quantiles[j][k] += w * v
			}
		}
	}
	return out
}

// InSample averages the members' one-step predictions (NaN where any is NaN).
func (f *trioFit) InSample() []float64 {
	out := make([]float64, f.n)
	w := 1 / float64(len(f.fits))
	for _, m := range f.fits {
		for t, v := range m.InSample() {
			out[t] += w * v
		}
	}
	return out
}
