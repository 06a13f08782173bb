package models

import (
	"math"
)

func init() { Register(FamilyMean, newMean) }

// meanModel is the historical-mean benchmark.
//
// Forecast and interval (Hyndman & Athanasopoulos, Forecasting: Principles and Practice, 3rd
// ed., section 5.5, table of benchmark h-step standard deviations):
//
//	ŷ_{n+h} = ȳ = (1/n) Σ y_t
//	σ̂_h    = s · √(1 + 1/n),   s² = Σ (y_t − ȳ)² / (n − 1)
//
// The bands use Student's t with n−1 degrees of freedom, as R forecast's meanf does (checked
// against forecast 8.20 in test/reference); FPP3 quotes the normal approximation, which the t
// quantile approaches for large n. Needs n >= 2 so that s is defined.
type meanModel struct{ spec Spec }

func newMean(s Spec) (Model, error) { return meanModel{spec: s}, nil }

func (meanModel) Family() string      { return FamilyMean }
func (meanModel) MinLength(m int) int { return 2 }
func (mm meanModel) Fit(y []float64, m int) (Fitted, error) {
	n := len(y)
	if n < 2 {
		return nil, tooShort(FamilyMean, n, 2)
	}
	if err := checkFinite(FamilyMean, y); err != nil {
		return nil, err
	}
	var sum float64
	for _, v := range y {
		sum += v
	}
	mu := sum / float64(n)
	var ss float64
	for _, v := range y {
		d := v - mu
		ss += d * d
	}
	return &meanFit{name: mm.spec.DisplayName(), n: n, mu: mu, sd: math.Sqrt(ss / float64(n-1))}, nil
}

type meanFit struct {
	name   string
	n      int
	mu, sd float64
}

func (f *meanFit) Name() string { return f.name }

// Params returns "mean" (ȳ) and "sigma" (s).
func (f *meanFit) Params() map[string]float64 {
	return map[string]float64{"mean": f.mu, "sigma": f.sd}
}

// InSample returns ȳ at every period, as R's meanf fitted values do (the full-sample mean, not
// a running mean).
func (f *meanFit) InSample() []float64 {
	out := make([]float64, f.n)
	for i := range out {
		out[i] = f.mu
	}
	return out
}

func (f *meanFit) Forecast(h int, levels []float64) Forecast {
	checkForecastArgs(h, levels)
	mean := make([]float64, 2*h)
	se := mean[h:]
	mean = mean[:h:h]
	w := f.sd * math.Sqrt(1+1/float64(f.n))
	for k := range mean {
		mean[k] = f.mu
		se[k] = w
	}
	nu := float64(f.n - 1)
	return Forecast{
		Mean:      mean,
		Levels:    copyLevels(levels),
		Quantiles: gaussianBands(mean, se, levels, func(p float64) float64 { return tQuantile(p, nu) }),
	}
}
