// Package boost fits gradient-boosted regression trees on histogram-binned features.
//
// The method is gradient boosting (Friedman 2001, "Greedy function approximation: a gradient
// boosting machine", Ann. Statist. 29(5), Algorithm 1): start from a constant F_0 and, at each
// round m, fit a regression tree to the per-row gradients of the loss at F_{m-1} and add it with
// shrinkage ν:
//
//	F_m(x) = F_{m-1}(x) + ν · T_m(x)
//
// Trees are grown with second-order statistics (Chen & Guestrin 2016, KDD paper on scalable
// tree boosting, eq. 5 and 7; equation, algorithm and section numbers in this package are from
// memory). With g_i and h_i the first and second derivatives of the loss at row i, G and H
// their sums over a node and λ the L2 penalty, a leaf gets the value
//
//	w = -G / (H + λ)
//
// and a split of a node into L and R scores
//
//	gain = 1/2 [ G_L²/(H_L+λ) + G_R²/(H_R+λ) - G²/(H+λ) ]
//
// Candidate splits come from histograms (Ke et al. 2017, NeurIPS paper on efficient gradient
// boosting trees, Algorithm 1 and the histogram-subtraction remark beside it): every feature is
// cut once, before the first round, at quantiles of its values into at most Params.Bins bins and
// coded as one byte per cell; a node's histogram holds per-bin sums of g, h and the row count,
// and of two sibling nodes only the smaller one is counted, the larger being its parent's
// histogram minus it.
//
// A split's cut is the edge between two bins, halfway between the largest value of the one and
// the smallest of the other over all training rows (not over the node's rows, as an exact
// regression tree would place it); with at most Bins distinct values per feature the
// partitions, and so the fitted values, equal those of an exact least-squares tree.
//
// Trees grow depth-limited: a node splits when its best gain is above a rounding floor and both
// children keep at least Params.MinLeaf rows, down to Params.MaxDepth levels (at most
// 2^MaxDepth leaves).
// Because every node is split or not on its own statistics, the grown tree does not depend on
// the order nodes are visited; they are visited depth first, which keeps only one histogram per
// level alive.
//
// Missing values (NaN) in the features are allowed and get their own bin; each split learns the
// side missing values go to, the side with the larger gain (the sparsity-aware split finding of
// Chen & Guestrin 2016, Algorithm 3). A feature value that is ±Inf is refused with an error
// naming its row and column.
//
// Losses: squared error (Newton step as above), and the absolute and pinball (quantile) losses,
// for which the tree is grown on the gradient signs and every leaf value is then replaced by the
// sample quantile of the residuals y - F_{m-1} of its rows (Friedman 2001, Algorithm 3,
// LAD_TreeBoost; the quantile version is the same with the τ-quantile; Koenker 2005, "Quantile
// Regression", ch. 1, for the quantile as the minimiser of the pinball loss).
//
// Optional row sampling per round follows Friedman 2002, "Stochastic gradient boosting",
// Comput. Stat. Data Anal. 38(4); it is driven by a PCG generator seeded from Params.Seed, so a
// fit is deterministic given its data and Params.
//
// Early stopping: with validation rows, the validation loss is measured after every round; the
// fit stops after Params.EarlyStop rounds without improvement and keeps the rounds up to the
// best one (common practice).
package boost
