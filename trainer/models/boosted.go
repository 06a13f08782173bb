package models

import (
	"gonum.org/v1/gonum/mat"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/learn/boost"
)

// FamilyGradientBoosting is the regression family of gradient-boosted regression trees
// (trainer/learn/boost) on generated features.
const FamilyGradientBoosting = "GradientBoosting"

func init() {
	Register(FamilyGradientBoosting, func(s Spec) (Model, error) { return newRegression(s) })
}

// BoostingOptions are the settings of GradientBoosting's trees that a member may set (the API's
// models[].regression.boosting); the rest of boost.Params is fixed (λ = 1, patience 20, bins
// from the row count, squared loss, seed 0).
type BoostingOptions struct {
	// Rounds is the most trees of a step model, at least 1 (boost.Params.Rounds).
	Rounds int `json:"rounds"`
	// Shrinkage is ν in (0, 1] (boost.Params.LearningRate).
	Shrinkage float64 `json:"shrinkage"`
	// TreeDepth is the depth of each tree, at least 1 (boost.Params.MaxDepth).
	TreeDepth int `json:"treeDepth"`
	// MinLeafRows is the fewest rows of a leaf, at least 1 (boost.Params.MinLeaf).
	MinLeafRows int `json:"minLeafRows"`
	// RowFraction is the fraction of rows in (0, 1] each tree is fitted on
	// (boost.Params.RowFraction).
	RowFraction float64 `json:"rowFraction"`
}

// noSplitRounds is the number of trees when a step has no validation rows to stop early on
// (at most the member's Rounds).
const noSplitRounds = 100

// DefaultBoosting returns boost.DefaultParams' values of the settings a member may set: 500
// rounds, shrinkage 0.1, depth 4, 5 rows per leaf, every row. They are what a member without
// boosting settings uses, and TestBoostingDefaultsAreTheCRDs (trainer/pipeline) holds them equal to
// the API's defaults.
func DefaultBoosting() BoostingOptions {
	p := boost.DefaultParams()
	return BoostingOptions{Rounds: p.Rounds, Shrinkage: p.LearningRate, TreeDepth: p.MaxDepth, MinLeafRows: p.MinLeaf, RowFraction: p.RowFraction}
}

// params returns boost.DefaultParams with the member's settings.
func (o BoostingOptions) params() boost.Params {
	p := boost.DefaultParams()
	p.Rounds, p.LearningRate, p.MaxDepth, p.MinLeaf, p.RowFraction = o.Rounds, o.Shrinkage, o.TreeDepth, o.MinLeafRows, o.RowFraction
	return p
}

// fitBoostStep fits one step of the GradientBoosting family (the direct strategy and feature
// selection are the regression members', see regression): boost.Params with the member's
// settings o (DefaultBoosting: squared loss, shrinkage 0.1, depth 4, at most 500 rounds) and
// rows/8 histogram bins (16 to 255: a few hundred rows cannot use 255 bins, and clearing them
// dominated the cost), early-stopped on the split's validation rows (the latest rows of each
// series; 20 rounds without improvement), then refitted on all rows with the number of rounds
// early stopping kept (common practice: the validation rows are the most recent history and too
// valuable to leave out of the final fit). Without a split, min(o.Rounds, 100) rounds. The
// recorded features are the kept columns some tree splits on (importance > 0); the trees keep
// the others as inputs, where they are never read.
func fitBoostStep(o BoostingOptions, st directStep, X *mat.Dense, y []float64, split features.Split, cols, keep []int) (directStep, error) {
	p := o.params()
	rows, _ := X.Dims()
	p.Bins = max(16, min(p.Bins, rows/8))
	rounds := min(noSplitRounds, o.Rounds)
	if split != nil {
		trX, trY := features.Rows(X, y, features.RowsWith(split, features.RowTrain))
		vaX, vaY := features.Rows(X, y, features.RowsWith(split, features.RowValidate))
		m, err := boost.Fit(trX, trY, vaX, vaY, p)
		if err != nil {
			return st, err
		}
		rounds = m.Rounds()
	}
	p.Rounds, p.EarlyStop = max(1, rounds), 0
	m, err := boost.Fit(X, y, nil, nil, p)
	if err != nil {
		return st, err
	}
	for _, j := range keep {
		st.cols = append(st.cols, cols[j])
	}
	for k, v := range m.Importance() {
		if v > 0 {
			st.splits = append(st.splits, st.cols[k])
		}
	}
	st.tree = m
	return st, nil
}
