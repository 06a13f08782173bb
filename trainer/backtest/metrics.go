// Package backtest holds the point and quantile error metrics and the rolling-origin evaluation
// that scores a model on its own history.
package backtest

import (
	"fmt"
	"math"
)

// Metric names a point-forecast error measure. Lower is better for every metric except Bias,
// whose ideal is 0 (selection ranks Bias by its absolute value).
type Metric string

// The point metrics Score understands.
const (
	MASE  Metric = "MASE"
	RMSSE Metric = "RMSSE"
	SMAPE Metric = "sMAPE"
	MAPE  Metric = "MAPE"
	MAE   Metric = "MAE"
	RMSE  Metric = "RMSE"
	WAPE  Metric = "WAPE"
	Bias  Metric = "Bias"
)

// Metrics lists every point metric in a fixed order.
func Metrics() []Metric { return []Metric{MASE, RMSSE, SMAPE, MAPE, MAE, RMSE, WAPE, Bias} }

// Valid reports whether m is one of the metrics Score understands.
func (m Metric) Valid() bool {
	for _, k := range Metrics() {
		if k == m {
			return true
		}
	}
	return false
}

// Scaled reports whether the metric divides by an in-sample scale (MASE, RMSSE).
func (m Metric) Scaled() bool { return m == MASE || m == RMSSE }

// Score computes metric of forecast f against actual y (same length), using the in-sample
// history insample and season length m for the scaled metrics (MASE, RMSSE; m < 1 is taken
// as 1). It returns NaN when the metric is undefined: empty input, a zero scale (MASE, RMSSE,
// WAPE) or zero actuals (MAPE); sMAPE counts a term with y = f = 0 as 0. See each metric's
// function for its formula and source. Score panics when len(y) != len(f) or the metric is unknown.
func Score(metric Metric, y, f, insample []float64, m int) float64 {
	checkLen(y, f)
	switch metric {
	case MAE:
		return MeanAbsError(y, f)
	case RMSE:
		return RootMeanSquaredError(y, f)
	case MAPE:
		return MeanAbsPercentError(y, f)
	case SMAPE:
		return SymmetricMAPE(y, f)
	case MASE:
		return MeanAbsScaledError(y, f, insample, m)
	case RMSSE:
		return RootMeanSquaredScaledError(y, f, insample, m)
	case WAPE:
		return WeightedAbsPercentError(y, f)
	case Bias:
		return MeanError(y, f)
	}
	panic(fmt.Sprintf("backtest: unknown metric %q", metric))
}

func checkLen(y, f []float64) {
	if len(y) != len(f) {
		panic(fmt.Sprintf("backtest: actual and forecast lengths differ (%d vs %d)", len(y), len(f)))
	}
}

// MeanAbsError is the mean absolute error
//
//	MAE = (1/h) Σ_t |y_t − f_t|
//
// (Hyndman & Koehler 2006, "Another look at measures of forecast accuracy", IJF 22, section 3.1).
// NaN for empty input.
func MeanAbsError(y, f []float64) float64 {
	checkLen(y, f)
	if len(y) == 0 {
		return math.NaN()
	}
	s := 0.0
	for i := range y {
		s += math.Abs(y[i] - f[i])
	}
	return s / float64(len(y))
}

// RootMeanSquaredError is
//
//	RMSE = sqrt( (1/h) Σ_t (y_t − f_t)² )
//
// (Hyndman & Koehler 2006, section 3.1). NaN for empty input.
func RootMeanSquaredError(y, f []float64) float64 {
	checkLen(y, f)
	if len(y) == 0 {
		return math.NaN()
	}
	s := 0.0
	for i := range y {
		d := y[i] - f[i]
		s += d * d
	}
	return math.Sqrt(s / float64(len(y)))
}

// MeanAbsPercentError is the mean absolute percentage error, in percent,
//
//	MAPE = (100/h) Σ_t |y_t − f_t| / |y_t|
//
// (Hyndman & Koehler 2006, section 3.2). NaN when any y_t is 0 or the input is empty.
func MeanAbsPercentError(y, f []float64) float64 {
	checkLen(y, f)
	if len(y) == 0 {
		return math.NaN()
	}
	s := 0.0
	for i := range y {
		if y[i] == 0 {
			return math.NaN()
		}
		s += math.Abs(y[i]-f[i]) / math.Abs(y[i])
	}
	return 100 * s / float64(len(y))
}

// SymmetricMAPE is the symmetric MAPE of the M3 and M4 competitions, in percent,
//
//	sMAPE = (1/h) Σ_t 200 |y_t − f_t| / (|y_t| + |f_t|)
//
// (M4 Competitor's Guide 2018, equation for sMAPE; the absolute values in the denominator are
// the M4 form and equal the M3 form 200|y−f|/(y+f) of Makridakis & Hibon 2000 for positive
// data). A term with y_t = f_t = 0 counts as 0: the forecast is exact, and the formula's 0/0
// is otherwise undefined (our choice, common practice for data with zeros; the competitions'
// data had none). Empty input gives NaN.
func SymmetricMAPE(y, f []float64) float64 {
	checkLen(y, f)
	if len(y) == 0 {
		return math.NaN()
	}
	s := 0.0
	for i := range y {
		d := math.Abs(y[i]) + math.Abs(f[i])
		if d == 0 {
			continue
		}
		s += 200 * math.Abs(y[i]-f[i]) / d
	}
	return s / float64(len(y))
}

// NaiveScale is the in-sample mean absolute seasonal-naive error (power 1) or mean squared
// seasonal-naive error (power 2) of x:
//
//	scale_p = (1/(n−m)) Σ_{t=m+1..n} |x_t − x_{t−m}|^p
//
// (Hyndman & Koehler 2006, equation (5) with m = 1 and its seasonal variant in section 4; M5
// Competitor's Guide 2020 for p = 2). m < 1 is taken as 1. NaN when n <= m.
func NaiveScale(x []float64, m, power int) float64 {
	if m < 1 {
		m = 1
	}
	if len(x) <= m {
		return math.NaN()
	}
	s := 0.0
	for t := m; t < len(x); t++ {
		d := math.Abs(x[t] - x[t-m])
		if power == 2 {
			d *= d
		}
		s += d
	}
	return s / float64(len(x)-m)
}

// ScaleLag is the lag of the naive forecast whose in-sample error scales the engine's MASE and
// RMSSE for a history of n points with season length m: m when the history holds at least two
// full seasons (n >= 2m), else 1. With n − m seasonal differences, n < 2m leaves some positions
// of the season without a single difference, so the scale measures part of a season only: a
// 60-week history scaled by its 8 lag-52 differences gave one weekly series a scale of a few
// quiet weeks and a promised MASE over 10 against a realized one under 1. The bound is our
// choice (every position of the season differenced at least once); the lag-1 fallback is the
// non-seasonal scale of Hyndman & Koehler (2006), equation (5), which the M4 Competitor's Guide
// (2018) also uses for all weekly and daily data. The competitions' own scoring (bench) keeps
// the seasonal lag whatever the length, as their definitions do. The engine decides the lag
// once per history: the backtest origins of a series all use the lag of its whole training
// history, and the later evaluation of that forecast uses the same history, so a promise and
// its realization are on one scale.
func ScaleLag(n, m int) int {
	if m > 1 && n >= 2*m {
		return m
	}
	return 1
}

// MeanAbsScaledError is the mean absolute scaled error
//
//	MASE = MAE / ( (1/(n−m)) Σ_{t=m+1..n} |x_t − x_{t−m}| )
//
// with x the in-sample history and m the season length (Hyndman & Koehler 2006, equations (5)
// and (6); m = 1 for non-seasonal data; the M4 Competitor's Guide uses the same seasonal
// scale). NaN when the scale is 0 or undefined (n <= m).
func MeanAbsScaledError(y, f, insample []float64, m int) float64 {
	return scaledScore(MASE, y, f, NaiveScale(insample, m, 1), math.NaN())
}

// scaledScore is Score with the in-sample scales given instead of the history: scale1 =
// NaiveScale(x, m, 1) for MASE, scale2 = NaiveScale(x, m, 2) for RMSSE (NaN when the scale is
// not positive); the other metrics ignore them.
func scaledScore(metric Metric, y, f []float64, scale1, scale2 float64) float64 {
	switch metric {
	case MASE:
		if !(scale1 > 0) {
			return math.NaN()
		}
		return MeanAbsError(y, f) / scale1
	case RMSSE:
		if !(scale2 > 0) {
			return math.NaN()
		}
		return RootMeanSquaredError(y, f) / math.Sqrt(scale2)
	}
	return Score(metric, y, f, nil, 1)
}

// RootMeanSquaredScaledError is the root mean squared scaled error of the M5 competition
//
//	RMSSE = sqrt( (1/h) Σ_t (y_t − f_t)² / ( (1/(n−m)) Σ_{t=m+1..n} (x_t − x_{t−m})² ) )
//
// (M5 Competitor's Guide 2020, equation (1), which uses m = 1; a season length m > 1 gives the
// seasonal-naive scale in the manner of MASE). NaN when the scale is 0 or undefined.
func RootMeanSquaredScaledError(y, f, insample []float64, m int) float64 {
	return scaledScore(RMSSE, y, f, math.NaN(), NaiveScale(insample, m, 2))
}

// WeightedAbsPercentError is the weighted absolute percentage error (also called the MAD/mean
// ratio), in percent,
//
//	WAPE = 100 Σ_t |y_t − f_t| / Σ_t |y_t|
//
// (Kolassa & Schütz 2007, "Advantages of the MAD/Mean ratio over the MAPE", Foresight 6).
// NaN when Σ|y_t| = 0.
func WeightedAbsPercentError(y, f []float64) float64 {
	checkLen(y, f)
	num, den := 0.0, 0.0
	for i := range y {
		num += math.Abs(y[i] - f[i])
		den += math.Abs(y[i])
	}
	if den == 0 {
		return math.NaN()
	}
	return 100 * num / den
}

// MeanError is the bias of the forecast, the mean of forecast minus actual,
//
//	Bias = (1/h) Σ_t (f_t − y_t)
//
// so that a positive value means over-forecasting (common practice; Hyndman & Koehler 2006
// section 3.1 list the mean error with the opposite sign, y − f). NaN for empty input.
func MeanError(y, f []float64) float64 {
	checkLen(y, f)
	if len(y) == 0 {
		return math.NaN()
	}
	s := 0.0
	for i := range y {
		s += f[i] - y[i]
	}
	return s / float64(len(y))
}

// Pinball is the mean pinball (quantile) loss of the level-τ quantile forecast q:
//
//	L_τ = (1/h) Σ_t [ τ (y_t − q_t)        if y_t >= q_t
//	                  (1 − τ)(q_t − y_t)   otherwise ]
//
// (Koenker & Bassett 1978, the check function; M5 uncertainty Competitor's Guide 2020,
// equation (2), before scaling). It panics when level is outside (0,1) or lengths differ.
// NaN for empty input.
func Pinball(level float64, y, q []float64) float64 {
	if !(level > 0 && level < 1) {
		panic(fmt.Sprintf("backtest: pinball level %v outside (0,1)", level))
	}
	checkLen(y, q)
	if len(y) == 0 {
		return math.NaN()
	}
	s := 0.0
	for i := range y {
		d := y[i] - q[i]
		if d >= 0 {
			s += level * d
		} else {
			s -= (1 - level) * d
		}
	}
	return s / float64(len(y))
}

// Coverage is the fraction of actuals inside the closed interval [lo_t, hi_t],
//
//	coverage = (1/h) #{ t : lo_t <= y_t <= hi_t }
//
// (common practice; the interval hit rate of Makridakis, Spiliotis & Assimakopoulos 2020 for
// M4). It panics when lengths differ. NaN for empty input.
func Coverage(y, lo, hi []float64) float64 {
	checkLen(y, lo)
	checkLen(y, hi)
	if len(y) == 0 {
		return math.NaN()
	}
	k := 0
	for i := range y {
		if y[i] >= lo[i] && y[i] <= hi[i] {
			k++
		}
	}
	return float64(k) / float64(len(y))
}
