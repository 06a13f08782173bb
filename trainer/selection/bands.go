package selection

import (
	"math"
	"slices"
	"sort"

	"almanac.dev/almanac/trainer/backtest"
)

// bandBacktest keeps what CalibrateBands needs of the backtest a result's Backtest record was
// scored on (backtest.QuantilesOnBacktest): the whole series' scale s_n, each origin's s_i and
// the published forecast's errors there (shared with the assessment, not copied); errs nil
// when there is none.
type bandBacktest struct {
	scale  float64
	scales []float64
	errs   [][]float64
}

// Pooled band calibration: the published band's offsets from the mean are too narrow or too
// wide by about the same factor across similar series, and each series' rolling-origin
// backtest shows by how much. Over a pool of results (a unit of a portfolio, a category of a
// benchmark) with the same levels, every backtest point gives, for each level j, the ratio
//
//	r = u_ik / d_jk,   u_ik = e_ik / s_i,   d_jk = (q_jk − mean_k) / s_n
//
// (the error and the band offset in the naive-scale units of backtest.QuantilesOnBacktest),
// over the points on the level's side (d > 0 for τ_j > 0.5, d < 0 below). The factor c_j puts a
// share τ_j of the pooled points at or below mean + c_j·(q_j − mean): c_j is the τ_j empirical
// quantile of r for an upper level and the (1 − τ_j) quantile for a lower one (u <= c·d with
// d < 0 is r >= c). This is split-conformal calibration with a normalised score, the band's
// own offset as the normaliser (Papadopoulos, Vovk & Gammerman 2011, "Regression conformal
// prediction with nearest neighbours", JAIR 40; Lei et al. 2018, JASA 113), fitted on the
// backtest rather than on held-out series, and pooled because one series' three origins hold
// too few points to place a 2.5% quantile (Lee & Scholtes 2014, "Empirical prediction
// intervals revisited", IJF 30, pool errors across series for the same reason).
//
// A level keeps c = 1 (the band as the members give it) when the pool has fewer than
// minBandSeries series or fewer than 10/min(τ, 1 − τ) points on its side, and for τ = 0.5;
// c is kept within [1/maxBandFactor, maxBandFactor].
const (
	minBandSeries = 30
	maxBandFactor = 3.0
)

// BandFactors returns each level's factor c_j over the pool (see the comment above); nil
// when no result in the pool carries a band backtest. Results without one (no quantiles, a
// fallback forecast) do not count.
func BandFactors(pool []*Result) []float64 {
	var levels []float64
	for _, r := range pool {
		if r.band.errs != nil {
			levels = r.Levels
			break
		}
	}
	if levels == nil {
		return nil
	}
	c := make([]float64, len(levels))
	for j, tau := range levels {
		c[j] = 1
		if tau == 0.5 {
			continue
		}
		upper := tau > 0.5
		var ratios []float64
		series := 0
		for _, r := range pool {
			b := r.band
			if b.errs == nil || !slices.Equal(r.Levels, levels) || !(b.scale > 0) || math.IsInf(b.scale, 0) {
				continue
			}
			n0 := len(ratios)
			for i, si := range b.scales {
				if !(si > 0) || math.IsInf(si, 0) {
					continue
				}
				for k := 0; k < len(b.errs[i]) && k < len(r.Mean); k++ {
					u := b.errs[i][k] / si
					d := (r.Quantiles[j][k] - r.Mean[k]) / b.scale
					if math.IsNaN(u) || math.IsInf(u, 0) || d == 0 || math.IsNaN(d) || (d > 0) != upper {
						continue
					}
					ratios = append(ratios, u/d)
				}
			}
			if len(ratios) > n0 {
				series++
			}
		}
		tail := math.Min(tau, 1-tau)
		if series < minBandSeries || float64(len(ratios)) < 10/tail {
			continue
		}
		sort.Float64s(ratios)
		p := tau
		if !upper {
			p = 1 - tau
		}
		c[j] = math.Min(math.Max(sampleQuantile(ratios, p), 1/maxBandFactor), maxBandFactor)
	}
	return c
}

// ScaleBands moves r's level-j quantiles to mean + c[j]·(q_j − mean) at every step, puts each
// step's quantiles back in increasing order (a factor per level can cross two levels on one
// side), clips them at 0 when nonNegative, and scores the new band on the same backtest
// (Backtest, backtest.QuantilesOnScales), so the promise describes the band published. A
// result without a band backtest, or c of another length, is left as it is.
func ScaleBands(r *Result, c []float64, nonNegative bool) {
	b := r.band
	if b.errs == nil || len(c) != len(r.Quantiles) {
		return
	}
	scaled := make([][]float64, len(r.Quantiles)) // new rows: r's may be shared with other results
	for j := range r.Quantiles {
		scaled[j] = make([]float64, len(r.Quantiles[j]))
		for k, q := range r.Quantiles[j] {
			scaled[j][k] = r.Mean[k] + c[j]*(q-r.Mean[k])
		}
	}
	r.Quantiles = scaled
	col := make([]float64, len(r.Quantiles))
	for k := range r.Mean {
		for j := range r.Quantiles {
			col[j] = r.Quantiles[j][k]
		}
		sort.Float64s(col)
		for j := range r.Quantiles {
			r.Quantiles[j][k] = col[j]
			if nonNegative && col[j] < 0 {
				r.Quantiles[j][k] = 0
			}
		}
	}
	if rec, ok := backtest.QuantilesOnScales(b.scale, b.scales, b.errs, r.Levels, r.Mean, r.Quantiles); ok {
		r.Backtest = rec
	}
}

// CalibrateBands scales the bands of every result in pool by the pool's BandFactors and
// returns the factors (nil when the pool had no band backtest).
func CalibrateBands(pool []*Result, nonNegative bool) []float64 {
	c := BandFactors(pool)
	if c == nil {
		return nil
	}
	for _, r := range pool {
		ScaleBands(r, c, nonNegative)
	}
	return c
}
