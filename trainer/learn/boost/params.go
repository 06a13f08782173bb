package boost

import (
	"fmt"
	"math"
)

// Loss is the loss a model minimises.
type Loss int

const (
	// Squared is the squared error (y-F)²/2; the model estimates the conditional mean.
	Squared Loss = iota
	// Absolute is the absolute error |y-F|; the model estimates the conditional median.
	Absolute
	// Pinball is the pinball (quantile) loss at Params.Level τ:
	//	ρ_τ(u) = τ·u if u >= 0, (τ-1)·u otherwise, u = y - F;
	// the model estimates the conditional τ-quantile.
	Pinball
)

// String returns the loss's name.
func (l Loss) String() string {
	switch l {
	case Squared:
		return "squared"
	case Absolute:
		return "absolute"
	case Pinball:
		return "pinball"
	}
	return fmt.Sprintf("Loss(%d)", int(l))
}

// Params configures a fit. DefaultParams gives a working set; the zero value is refused.
type Params struct {
	// Rounds is the maximum number of boosting rounds (trees), at least 1.
	Rounds int
	// LearningRate is the shrinkage ν in (0, 1] applied to every tree.
	LearningRate float64
	// MaxDepth limits the depth of each tree, at least 1 (1 grows stumps); trees grow depth
	// limited, not by a leaf count.
	MaxDepth int
	// MinLeaf is the minimum number of rows in a leaf, at least 1.
	MinLeaf int
	// Bins is the number of histogram bins per feature, 2..255. A feature with at most Bins
	// distinct values gets one bin per value (cut halfway between neighbours), so splits on it
	// are exact.
	Bins int
	// L2 is the penalty λ >= 0 on leaf values in -G/(H+λ) and in the split gain. The absolute
	// and pinball losses use it in the split gain only: their leaves are refitted quantiles.
	L2 float64
	// EarlyStop stops the fit after this many rounds without a lower validation loss and keeps
	// the best round (0: off, all Rounds are kept). It needs validation rows.
	EarlyStop int
	// RowFraction is the fraction of rows, in (0, 1], drawn without replacement for each
	// round's tree (1: every row, no sampling).
	RowFraction float64
	// Seed seeds the row sampling.
	Seed uint64
	// Loss is the loss minimised (Squared, Absolute or Pinball).
	Loss Loss
	// Level is the quantile level τ in (0, 1) of the Pinball loss; ignored otherwise.
	Level float64
}

// DefaultParams returns common starting values (common practice for boosted trees: small
// shrinkage with many rounds stopped early, shallow trees): 500 rounds, learning rate 0.1,
// depth 4, 5 rows per leaf, 255 bins, λ = 1, early stop after 20 rounds, no row sampling,
// squared loss.
func DefaultParams() Params {
	return Params{
		Rounds:       500,
		LearningRate: 0.1,
		MaxDepth:     4,
		MinLeaf:      5,
		Bins:         255,
		L2:           1,
		EarlyStop:    20,
		RowFraction:  1,
		Loss:         Squared,
	}
}

// maxDepthLimit bounds MaxDepth so node indices and the recursion stay small.
const maxDepthLimit = 30

// Validate returns an error naming the first field out of range (Fit calls it first).
func (p Params) Validate() error {
	switch {
	case p.Rounds < 1:
		return fmt.Errorf("boost: Params.Rounds is %d, want at least 1", p.Rounds)
	case !(p.LearningRate > 0 && p.LearningRate <= 1):
		return fmt.Errorf("boost: Params.LearningRate is %v, want a value in (0, 1]", p.LearningRate)
	case p.MaxDepth < 1 || p.MaxDepth > maxDepthLimit:
		return fmt.Errorf("boost: Params.MaxDepth is %d, want 1..%d", p.MaxDepth, maxDepthLimit)
	case p.MinLeaf < 1:
		return fmt.Errorf("boost: Params.MinLeaf is %d, want at least 1", p.MinLeaf)
	case p.Bins < 2 || p.Bins > 255:
		return fmt.Errorf("boost: Params.Bins is %d, want 2..255 (one byte per cell)", p.Bins)
	case !(p.L2 >= 0) || math.IsInf(p.L2, 1):
		return fmt.Errorf("boost: Params.L2 is %v, want a finite value >= 0", p.L2)
	case p.EarlyStop < 0:
		return fmt.Errorf("boost: Params.EarlyStop is %d, want at least 0", p.EarlyStop)
	case !(p.RowFraction > 0 && p.RowFraction <= 1):
		return fmt.Errorf("boost: Params.RowFraction is %v, want a value in (0, 1]", p.RowFraction)
	case p.Loss != Squared && p.Loss != Absolute && p.Loss != Pinball:
		return fmt.Errorf("boost: Params.Loss is %v, want Squared, Absolute or Pinball", p.Loss)
	case p.Loss == Pinball && !(p.Level > 0 && p.Level < 1):
		return fmt.Errorf("boost: Params.Level is %v, want a value in (0, 1) for the pinball loss", p.Level)
	}
	return nil
}

// level returns the quantile level of a quantile loss (0.5 for Absolute).
func (p Params) level() float64 {
	if p.Loss == Absolute {
		return 0.5
	}
	return p.Level
}
