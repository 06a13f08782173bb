package models

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// zQuantile returns the standard normal quantile Φ⁻¹(p) = −√2 · erfc⁻¹(2p). Go's math.Erfcinv
// follows Wichura (1988), Algorithm AS 241, so the result is accurate to about 1e-15 in both
// tails. p must lie strictly inside (0,1).
func zQuantile(p float64) float64 {
	return -math.Sqrt2 * math.Erfcinv(2*p)
}

// tQuantile returns the quantile of Student's t distribution with nu degrees of freedom.
func tQuantile(p, nu float64) float64 {
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(p)
}

// checkForecastArgs panics when a caller misuses Forecast: a negative horizon or a quantile
// level outside the open interval (0,1).
func checkForecastArgs(h int, levels []float64) {
	if h < 0 {
		panic(fmt.Sprintf("models: negative forecast horizon %d", h))
	}
	for _, l := range levels {
		if !(l > 0 && l < 1) {
			panic(fmt.Sprintf("models: quantile level %v outside (0,1)", l))
		}
	}
}

// checkFinite returns an error naming the family and the first index whose value is NaN or
// infinite. The caller cleans series before fitting; this guards against a cleaning gap so one
// bad series reports itself instead of poisoning the shard.
func checkFinite(family string, y []float64) error {
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("models: %s: y[%d] = %v is not a finite number", family, i, v)
		}
	}
	return nil
}

// tooShort wraps ErrTooShort with the family, the length and the requirement.
func tooShort(family string, n, need int) error {
	return fmt.Errorf("%w: %s needs %d observations, got %d", ErrTooShort, family, need, n)
}

// gaussianBands fills q[j][k] = mean[k] + quant(levels[j]) · se[k] for each level. quant maps a
// probability to the standardised quantile (zQuantile, or a Student-t quantile).
func gaussianBands(mean, se, levels []float64, quant func(float64) float64) [][]float64 {
	if len(levels) == 0 {
		return nil
	}
	h := len(mean)
	buf := make([]float64, h*len(levels))
	out := make([][]float64, len(levels))
	for j, l := range levels {
		z := quant(l)
		row := buf[j*h : (j+1)*h : (j+1)*h]
		for k := range row {
			row[k] = mean[k] + z*se[k]
		}
		out[j] = row
	}
	return out
}

// nanSlice returns a slice of n NaNs.
func nanSlice(n int) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = math.NaN()
	}
	return s
}

// copyLevels returns an owned copy of the requested levels (nil for none).
func copyLevels(levels []float64) []float64 {
	if len(levels) == 0 {
		return nil
	}
	return append([]float64(nil), levels...)
}
