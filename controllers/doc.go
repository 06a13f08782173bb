// Package controllers holds almanac's two reconcilers and their pure planners.
//
// The ForecastPortfolio reconciler (portfolio_controller.go) starts scheduled and drift runs,
// applies the concurrency policy and history limits, and keeps the portfolio status current; its
// decisions come from planPortfolio (portfolio.go), which uses the schedule planner
// (schedule.go) and the drift verdict (drift.go). The ForecastRun reconciler
// (run_controller.go) renders the run configuration (render.go), creates the plan, train and
// publish Jobs (jobs.go), folds each finished shard's termination-message summary into the run
// status exactly once (fold.go, indexset.go) and shares the manager's budget of train pods
// among active runs (scaling.go). setup.go wires both into a manager; metrics.go holds the
// Prometheus series.
package controllers
