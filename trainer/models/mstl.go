package models

import (
	"fmt"
	"strconv"
	"strings"

	"almanac.dev/almanac/trainer/numeric/stl"
	"almanac.dev/almanac/trainer/series"
)

// The MSTL families forecast every seasonal cycle of a series by decomposition: MSTL splits y
// into trend, one seasonal component per period and remainder (stl.MSTL, Bandara, Hyndman &
// Bergmeir 2021); a non-seasonal model forecasts the seasonally adjusted series
// a_t = T_t + R_t; each seasonal component's last cycle is repeated and added back:
//
//	yhat_{n+k} = ahat_{n+k} + sum_i S^(i)_{n - trunc(p_i) + 1 + (k-1) mod trunc(p_i)},
//
// and the quantiles of the adjusted model are shifted by the same seasonal sum (R forecast
// 8.20's stlf and forecast.mstl, whose defaults these are; checked against them in
// test/reference). The adjusted models are ETS with no seasonal component (ets model "ZZN"),
// Theta on the adjusted series as a series without season, and the non-seasonal ARIMA search
// (auto.arima with seasonal = FALSE).
//
// Periods: Spec.SeasonalPeriods when set; else Spec.SeasonLength or the run's season length
// when it is not the frequency's usual one; else series.Frequency.SeasonalPeriods (hourly 24
// and 168, daily 7 and 365.25, weekly 52.18). Periods with fewer than two full cycles in the
// training data are dropped; with none left the adjusted model fits y itself (R's stl stops
// there instead: 104 weeks or fewer for weekly data).
//
// Weekly data: R's msts(y, seasonal.periods = 52.18) with one period is a plain ts of
// frequency floor(52.18) = 52, so stlf decomposes with period 52 where we pass 52.18; STL runs
// on the integer period 52 either way and the spans derived from 52 and 52.18 are the same
// (n_l = 53, n_t = 91 with n_s = 11), so the decompositions agree with R's to 1e-9 (checked on
// seven weekly and daily series in test/reference/weekly_test.go).
const (
	FamilyMSTLETS   = "MSTLETS"
	FamilyMSTLTheta = "MSTLTheta"
	FamilyMSTLARIMA = "MSTLARIMA"
)

func init() {
	for _, f := range []string{FamilyMSTLETS, FamilyMSTLTheta, FamilyMSTLARIMA} {
		Register(f, newMSTL)
	}
}

// mstlModel is an MSTL family: the decomposition and the model of the adjusted series.
type mstlModel struct {
	spec  Spec
	inner Model
}

func newMSTL(s Spec) (Model, error) {
	if err := checkPeriods(s); err != nil {
		return nil, err
	}
	var in Spec
	switch s.Family {
	case FamilyMSTLETS:
		in = Spec{Family: FamilyETS, ETS: &ETSOptions{Seasons: []string{"N"}}}
		if s.ETS != nil {
			in.ETS = &ETSOptions{Errors: s.ETS.Errors, Trends: s.ETS.Trends, Seasons: []string{"N"}}
		}
	case FamilyMSTLTheta:
		in = Spec{Family: FamilyTheta}
	case FamilyMSTLARIMA:
		in = Spec{Family: FamilyARIMA}
	default:
		return nil, fmt.Errorf("models: %s: not an MSTL family", s.Family)
	}
	inner, err := New(in)
	if err != nil {
		return nil, fmt.Errorf("models: %s: %w", s.DisplayName(), err)
	}
	return &mstlModel{spec: s, inner: inner}, nil
}

// maxSeasonalPeriod bounds a declared period: a year of hours (8784, the bound of seasonLength).
const maxSeasonalPeriod = 8784

func (m *mstlModel) Family() string { return m.spec.Family }

// MinLength is the adjusted model's: with too short a series for any period, it fits y itself.
func (m *mstlModel) MinLength(int) int { return m.inner.MinLength(1) }

// Fit decomposes with the periods the season length m implies (see the family comment).
func (m *mstlModel) Fit(y []float64, sl int) (Fitted, error) {
	return m.fit(y, seasonalPeriods(m.spec, sl, ""))
}

// FitInputs decomposes with the periods of in.Freq when sl is its usual season length.
func (m *mstlModel) FitInputs(y []float64, sl int, in Inputs) (Fitted, error) {
	return m.fit(y, seasonalPeriods(m.spec, sl, in.Freq))
}

// seasonalPeriods is the period rule of the multi-seasonal families: s.SeasonalPeriods; else
// f's periods when sl is f's usual season length (f empty: the frequency whose usual season
// length sl is); else sl alone (none when sl < 2).
func seasonalPeriods(s Spec, sl int, f series.Frequency) []float64 {
	if f == "" {
		f = frequencyOfSeason(sl)
	}
	if len(s.SeasonalPeriods) > 0 {
		return s.SeasonalPeriods
	}
	if s.SeasonLength == 0 && sl == f.SeasonLength() {
		return f.SeasonalPeriods()
	}
	if sl >= 2 {
		return []float64{float64(sl)}
	}
	return nil
}

func (m *mstlModel) fit(y []float64, periods []float64) (Fitted, error) {
	out, adj := m.decompose(y, periods)
	if len(adj) < m.inner.MinLength(1) {
		return nil, ErrTooShort
	}
	f, err := m.inner.Fit(adj, 1)
	if err != nil {
		return nil, fmt.Errorf("models: %s: adjusted series: %w", m.spec.DisplayName(), err)
	}
	out.inner = f
	return out, nil
}

// decompose returns a fit holding the MSTL of y (none when no period is kept) and the
// seasonally adjusted series (y itself when none).
func (m *mstlModel) decompose(y []float64, periods []float64) (*mstlFit, []float64) {
	out := &mstlFit{model: m, periods: periods, n: len(y)}
	if len(periods) > 0 {
		if d, err := stl.MSTL(y, periods, stl.MSTLOptions{}); err == nil {
			out.dec = &d
			return out, d.Adjusted()
		}
	}
	return out, y
}

// mstlFit is a fitted MSTL member.
type mstlFit struct {
	model   *mstlModel
	periods []float64              // the periods asked for
	n       int                    // observations fitted
	dec     *stl.MSTLDecomposition // nil when no period was kept
	inner   Fitted
}

// Update carries the fit forward to y, a longer history of which the fitted one is a prefix
// (backtest.Updater): MSTL is run again on y (it has no estimates to keep; the earlier
// components move a little, as a two-sided smoother's do), and the adjusted model keeps its
// estimates when it can (ETS, ARIMA) or is refitted (Theta, cheap).
func (f *mstlFit) Update(y []float64) (Fitted, error) {
	if len(y) < f.n {
		return nil, fmt.Errorf("models: %s: update needs at least the %d fitted observations, got %d", f.model.spec.DisplayName(), f.n, len(y))
	}
	out, adj := f.model.decompose(y, f.periods)
	var err error
	if u, ok := f.inner.(interface {
		Update([]float64) (Fitted, error)
	}); ok {
		out.inner, err = u.Update(adj)
	} else {
		out.inner, err = f.model.inner.Fit(adj, 1)
	}
	if err != nil {
		return nil, fmt.Errorf("models: %s: adjusted series: %w", f.model.spec.DisplayName(), err)
	}
	return out, nil
}

// Name is "MSTL(p1,p2)+<adjusted model>", MSTL() when no period was kept.
func (f *mstlFit) Name() string {
	return "MSTL(" + strings.Join(f.periodNames(), ",") + ")+" + f.inner.Name()
}

func (f *mstlFit) periodNames() []string {
	if f.dec == nil {
		return nil
	}
	var out []string
	for _, p := range f.dec.Periods {
		out = append(out, strconv.FormatFloat(p, 'f', -1, 64))
	}
	return out
}

// Params are the adjusted model's, with "period<i>" for the periods kept.
func (f *mstlFit) Params() map[string]float64 {
	p := f.inner.Params()
	if p == nil {
		p = map[string]float64{}
	}
	if f.dec != nil {
		for i, v := range f.dec.Periods {
			p["period"+strconv.Itoa(i+1)] = v
		}
	}
	return p
}

// InSample is the adjusted model's fitted values plus every seasonal component.
func (f *mstlFit) InSample() []float64 {
	out := f.inner.InSample()
	if f.dec != nil {
		for _, s := range f.dec.Seasonal {
			for t := range out {
				out[t] += s[t]
			}
		}
	}
	return out
}

// Forecast adds the repeated last cycles to the adjusted model's mean and quantiles.
func (f *mstlFit) Forecast(h int, levels []float64) Forecast {
	fc := f.inner.Forecast(h, levels)
	if f.dec == nil {
		return fc
	}
	s := f.dec.SeasonalForecast(h)
	for k := range fc.Mean {
		fc.Mean[k] += s[k]
	}
	for _, q := range fc.Quantiles {
		for k := range q {
			q[k] += s[k]
		}
	}
	return fc
}
