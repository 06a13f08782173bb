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

// fitBoostStep fits one step of the GradientBoosting family (the direct strategy and feature
// selection are the regression members', see regression): boost.DefaultParams (squared loss,
// shrinkage 0.1, depth 4, at most 500 rounds) with rows/8 histogram bins (16 to 255: a few
// hundred rows cannot use 255 bins, and clearing them dominated the cost), early-stopped on the split's validation rows (the
// latest rows of each series; 20 rounds without improvement), then refitted on all rows with the
// number of rounds early stopping kept (common practice: the validation rows are the most recent
// history and too valuable to leave out of the final fit). Without a split, 100 rounds. The
// recorded features are the kept columns some tree splits on (importance > 0); the trees keep
// the others as inputs, where they are never read.
func fitBoostStep(st directStep, X *mat.Dense, y []float64, split features.Split, cols, keep []int) (directStep, error) {
	p := boost.DefaultParams()
	rows, _ := X.Dims()
	p.Bins = max(16, min(p.Bins, rows/8))
	rounds := 100
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
