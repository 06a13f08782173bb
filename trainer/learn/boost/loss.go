package boost

import (
	"math"
	"slices"
)

// roundoff is the relative size below which a residual or a mean difference is rounding
// error: far above the float64 epsilon (2.2e-16), far below any meaningful demand effect.
const roundoff = 1e-10

// scale returns the root mean square of y, the unit residuals are judged in.
func scale(y []float64) float64 {
	var s float64
	for _, v := range y {
		s += v * v
	}
	return math.Sqrt(s / float64(len(y)))
}

// gainFloor returns the split gain below which a split only separates rounding error. A split
// of n rows into halves whose mean gradients differ by δ gains about n δ²/8, so the floor
// n (roundoff·unit)² refuses δ below about 3·roundoff in the gradient's unit: the target's scale
// for squared loss, 1 for the pinball losses (gradients are -τ, 0 or 1-τ).
func gainFloor(p Params, n int, yScale float64) float64 {
	unit := 1.0
	if p.Loss == Squared {
		unit = yScale
	}
	return float64(n) * (roundoff * unit) * (roundoff * unit)
}

// gradients writes the first and second derivatives of the loss at pred into g and h.
//
//	squared:  g = F - y, h = 1
//	pinball:  g = 1-τ if F > y, -τ if F < y, 0 if equal; h = 1  (absolute: τ = 1/2)
//
// For the pinball losses h = 1 only weighs rows for split finding; leaf values are refitted.
// A pinball residual within roundoff·yScale of zero counts as equal (otherwise a fitted row's
// rounding error would carry a full-size sign).
func gradients(p Params, yScale float64, y, pred, g, h []float64) {
	if p.Loss == Squared {
		for i := range y {
			g[i] = pred[i] - y[i]
			h[i] = 1
		}
		return
	}
	tau := p.level()
	tol := roundoff * yScale
	for i := range y {
		switch {
		case math.Abs(pred[i]-y[i]) <= tol:
			g[i] = 0
		case pred[i] > y[i]:
			g[i] = 1 - tau
		default:
			g[i] = -tau
		}
		h[i] = 1
	}
}

// meanLoss returns the mean loss of pred against y: (y-F)²/2 for squared, ρ_τ(y-F) for pinball
// (|y-F|/2 for absolute, the pinball loss at τ = 1/2).
func meanLoss(p Params, y, pred []float64) float64 {
	var s float64
	if p.Loss == Squared {
		for i := range y {
			d := y[i] - pred[i]
			s += d * d / 2
		}
		return s / float64(len(y))
	}
	tau := p.level()
	for i := range y {
		s += pinball(tau, y[i]-pred[i])
	}
	return s / float64(len(y))
}

// pinball is ρ_τ(u) = u·(τ - 1[u<0]) (Koenker 2005, ch. 1).
func pinball(tau, u float64) float64 {
	if u < 0 {
		return (tau - 1) * u
	}
	return tau * u
}

// start returns the constant F_0 minimising the loss: the mean for squared, the τ-quantile
// otherwise. It reorders buf, which holds a copy of y.
func start(p Params, buf []float64) float64 {
	if p.Loss == Squared {
		var s float64
		for _, v := range buf {
			s += v
		}
		return s / float64(len(buf))
	}
	return orderQuantile(buf, p.level())
}

// orderQuantile returns the order statistic u_(k), k = ceil(τn), of vals (sorted in place); it
// minimises Σ ρ_τ(u_i - c) over c (Koenker 2005, section 1.2).
func orderQuantile(vals []float64, tau float64) float64 {
	slices.Sort(vals)
	k := int(math.Ceil(tau*float64(len(vals)))) - 1
	k = max(0, min(k, len(vals)-1))
	return vals[k]
}
