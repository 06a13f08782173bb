package boost

import (
	"math"
	"slices"
)

// gradients writes the first and second derivatives of the loss at pred into g and h, for the
// rows listed (all rows when rows is nil).
//
//	squared:  g = F - y, h = 1
//	pinball:  g = 1-τ if F > y, -τ if F < y, 0 if equal; h = 1  (absolute: τ = 1/2)
//
// For the pinball losses h = 1 only weighs rows for split finding; leaf values are refitted.
func gradients(p Params, y, pred, g, h []float64) {
	if p.Loss == Squared {
		for i := range y {
			g[i] = pred[i] - y[i]
			h[i] = 1
		}
		return
	}
	tau := p.level()
	for i := range y {
		switch {
		case pred[i] > y[i]:
			g[i] = 1 - tau
		case pred[i] < y[i]:
			g[i] = -tau
		default:
			g[i] = 0
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

// pinball is ρ_τ(u) = u·(τ - 1[u<0]) (Koenker 2005, eq. 1.3).
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
