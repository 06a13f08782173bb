package backtest

import "math"

// QuantileRecord counts how a set of quantile forecasts fared on some actuals, in sums that
// add across series: Below[j] actuals were at or below the level-j quantile, PinballSum[j] adds
// their pinball losses and BiasSum their errors forecast − actual, both scaled by the series'
// in-sample mean absolute (seasonal) naive error; Points actuals in all.
type QuantileRecord struct {
	Points     int
	Below      []int
	PinballSum []float64
	BiasSum    float64
}

// QuantilesOnBacktest scores a published band on the rolling-origin backtest of the forecast
// that published it. The band is the offset of each published quantile from the published
// mean at step k, d_jk = q_jk − mean_k, in units of the scale of the whole series s_n; the
// backtest error at origin i (fitted on y[:t_i]), step k, e_ik = actual − forecast
// (Assessment.Errors), is taken in units of that origin's own scale s_i. Over every origin and
// every step k the backtest reached (k < len(errs[i]) and k < len(mean)):
//
//	u_ik           = e_ik / s_i,   d_jk = (q_jk − mean_k) / s_n
//	Below[j]      += 1 if u_ik <= d_jk           (the actual at or below the level-j quantile)
//	PinballSum[j] += ρ_τj(u_ik − d_jk)           (ρ_τ(r) = τ·r for r >= 0, (τ − 1)·r otherwise:
//	                                              Koenker & Bassett 1978's check function)
//	BiasSum       += −u_ik                       ((forecast − actual) / scale)
//
// with s the in-sample mean absolute seasonal-naive error (NaiveScale, power 1; Hyndman &
// Koehler 2006's MASE scale) at lag ScaleLag(len(y), m) for s_n and every s_i, so the record
// is in the units pipeline.Calibrate measures new actuals in. Taking the band in scale units
// carries its width from the end of the history to each origin in proportion to the series'
// typical naive step there (our own choice; the published model is not refitted at each
// origin for its quantiles, which would cost another backtest of the chosen members).
// Quantiles built from the same backtest errors (selection's empirical quantiles) score close
// to their nominal levels here by construction; model quantiles (ETS, ARIMA) get a real
// out-of-sample check.
//
// ok is false when no point has a positive finite scale at its origin or the whole series'
// scale is not positive and finite, or q does not have one row per level of len(mean) steps.
func QuantilesOnBacktest(y []float64, m int, origins []int, errs [][]float64, levels []float64, mean []float64, q [][]float64) (QuantileRecord, bool) {
	if len(origins) != len(errs) {
		return QuantileRecord{Below: make([]int, len(levels)), PinballSum: make([]float64, len(levels))}, false
	}
	sn, scales := BandScales(y, m, origins)
	return QuantilesOnScales(sn, scales, errs, levels, mean, q)
}

// BandScales are the scales QuantilesOnBacktest takes a band and its backtest errors in: sn =
// NaiveScale(y, ScaleLag(len(y), m), 1) for the whole series and scales[i] the same of y up to
// origins[i] (NaN for an origin past the end).
func BandScales(y []float64, m int, origins []int) (sn float64, scales []float64) {
	m = ScaleLag(len(y), m)
	scales = make([]float64, len(origins))
	for i, t := range origins {
		scales[i] = math.NaN()
		if t <= len(y) {
			scales[i] = NaiveScale(y[:t], m, 1)
		}
	}
	return NaiveScale(y, m, 1), scales
}

// QuantilesOnScales is QuantilesOnBacktest with the scales given: sn the whole series' and
// scales[i] origin i's (an origin whose scale is not positive and finite is skipped). The
// hierarchy's reconcile step scores reconciled bands with it on the reconciled backtest
// errors, from the scales the train step recorded.
func QuantilesOnScales(sn float64, scales []float64, errs [][]float64, levels []float64, mean []float64, q [][]float64) (QuantileRecord, bool) {
	rec := QuantileRecord{Below: make([]int, len(levels)), PinballSum: make([]float64, len(levels))}
	if len(levels) == 0 || len(q) != len(levels) || len(scales) != len(errs) {
		return rec, false
	}
	for j := range q {
		if len(q[j]) != len(mean) {
			return rec, false
		}
	}
	if !(sn > 0) || math.IsInf(sn, 0) {
		return rec, false
	}
	for i, si := range scales {
		if !(si > 0) || math.IsInf(si, 0) {
			continue
		}
		for k := 0; k < len(errs[i]) && k < len(mean); k++ {
			u := errs[i][k] / si
			if math.IsNaN(u) || math.IsInf(u, 0) {
				continue
			}
			rec.Points++
			rec.BiasSum -= u
			for j, tau := range levels {
				r := u - (q[j][k]-mean[k])/sn
				if r <= 0 {
					rec.Below[j]++
				}
				if r >= 0 {
					rec.PinballSum[j] += tau * r
				} else {
					rec.PinballSum[j] += (tau - 1) * r
				}
			}
		}
	}
	return rec, rec.Points > 0
}
