package models

import (
	"fmt"
	"math"
)

func init() {
	Register(FamilyNaive, func(s Spec) (Model, error) { return walkModel{spec: s, family: FamilyNaive}, nil })
	Register(FamilySeasonalNaive, func(s Spec) (Model, error) {
		return walkModel{spec: s, family: FamilySeasonalNaive, seasonal: true}, nil
	})
	Register(FamilyDrift, func(s Spec) (Model, error) {
		return walkModel{spec: s, family: FamilyDrift, drift: true}, nil
	})
}

// seasonFor returns the season length a spec asks for: its SeasonLength override when set,
// else the m the caller passes (from the series frequency), never less than 1.
func seasonFor(s Spec, m int) int {
	if s.SeasonLength > 0 {
		m = s.SeasonLength
	}
	if m < 1 {
		m = 1
	}
	return m
}

// walkModel is the random-walk benchmark family: Naive (lag 1), SeasonalNaive (lag m) and
// Drift (lag 1 plus a constant drift).
//
// Point forecasts and h-step standard deviations (Hyndman & Athanasopoulos, Forecasting:
// Principles and Practice, 3rd ed., section 5.5, table of benchmark-method σ̂_h), with
// k = ⌊(h−1)/m⌋:
//
//	Naive:          ŷ_{n+h} = y_n                          σ̂_h = σ̂ √h
//	SeasonalNaive:  ŷ_{n+h} = y_{n+h−m(k+1)}               σ̂_h = σ̂ √(k+1)
//	Drift:          ŷ_{n+h} = y_n + h b,  b = (y_n−y_1)/(n−1)
//	                                                       σ̂_h = σ̂ √(h (1 + h/(n−1)))
//
// σ̂² is the mean squared one-step residual e_t = y_t − ŷ_{t|t−1}: Σe²/(n−lag) for Naive and
// SeasonalNaive, and Σe²/(n−2) for Drift (the residual variance of regressing the n−1
// differences on a constant; the h²/(n−1) term is the variance of b). This is exactly what R
// forecast 8.20's lagwalk/forecast.lagwalk compute. Bands are normal: ŷ ± Φ⁻¹(p) σ̂_h.
//
// Preconditions: Naive n >= 2, SeasonalNaive n >= m+1 (one full season plus one residual),
// Drift n >= 3 (so that n−2 > 0). SeasonalNaive with m = 1 is Naive.
type walkModel struct {
	spec     Spec
	family   string
	seasonal bool
	drift    bool
}

func (w walkModel) Family() string { return w.family }

func (w walkModel) MinLength(m int) int {
	switch {
	case w.drift:
		return 3
	case w.seasonal:
		return seasonFor(w.spec, m) + 1
	}
	return 2
}

func (w walkModel) Fit(y []float64, m int) (Fitted, error) {
	lag := 1
	if w.seasonal {
		lag = seasonFor(w.spec, m)
	}
	n := len(y)
	if need := w.MinLength(m); n < need {
		return nil, tooShort(w.family, n, need)
	}
	if err := checkFinite(w.family, y); err != nil {
		return nil, err
	}
	f := &walkFit{name: w.spec.DisplayName(), lag: lag, n: n, drift: w.drift}
	if w.drift {
		f.b = (y[n-1] - y[0]) / float64(n-1)
	}
	f.last = append([]float64(nil), y[n-lag:]...)
	var ss float64
	for t := lag; t < n; t++ {
		e := y[t] - y[t-lag] - f.b
		ss += e * e
	}
	if w.drift {
		f.sigma = math.Sqrt(ss / float64(n-2))
	} else {
		f.sigma = math.Sqrt(ss / float64(n-lag))
	}
	f.fitted = nanSlice(n)
	for t := lag; t < n; t++ {
		f.fitted[t] = y[t-lag] + f.b
	}
	return f, nil
}

// walkFit is a fitted Naive, SeasonalNaive or Drift model.
type walkFit struct {
	name   string
	lag, n int
	drift  bool
	b      float64   // drift per period (0 without drift)
	sigma  float64   // σ̂, the one-step residual standard deviation
	last   []float64 // the last lag observations
	fitted []float64
}

func (f *walkFit) Name() string {
	if f.lag > 1 {
		return fmt.Sprintf("%s(m=%d)", f.name, f.lag)
	}
	return f.name
}

// Params returns "sigma" (σ̂), "lag" and, for Drift, "drift" (b).
func (f *walkFit) Params() map[string]float64 {
	p := map[string]float64{"sigma": f.sigma, "lag": float64(f.lag)}
	if f.drift {
		p["drift"] = f.b
	}
	return p
}

// InSample returns ŷ_{t|t−1} = y_{t−lag} + b, NaN for the first lag periods.
func (f *walkFit) InSample() []float64 { return append([]float64(nil), f.fitted...) }

func (f *walkFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	buf := make([]float64, 2*h)
	mean, se := buf[:h:h], buf[h:]
	n1 := float64(f.n - 1)
	for k := range mean {
		steps := float64(k/f.lag + 1) // k+1 for lag 1; ⌊(h−1)/m⌋+1 for lag m
		hh := float64(k + 1)
		mean[k] = f.last[k%f.lag] + hh*f.b
		if f.drift {
			se[k] = f.sigma * math.Sqrt(hh*(1+hh/n1))
		} else {
			se[k] = f.sigma * math.Sqrt(steps)
		}
	}
	return Forecast{Mean: mean, Levels: copyLevels(levels), Quantiles: gaussianBands(mean, se, levels, zQuantile)}
}
