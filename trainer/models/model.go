// Package models is the zoo: forecasting model families behind one interface, one file per family.
package models

import "errors"

// Forecast is a model's h-step forecast: the mean path and, for each requested quantile level,
// the quantile path. Quantiles[j][k] is the level-Levels[j] quantile at step k+1.
type Forecast struct {
	Mean      []float64
	Levels    []float64
	Quantiles [][]float64
}

// Fitted is a model fitted to one series.
type Fitted interface {
	// Name is the zoo member's display name with its chosen configuration, e.g. "ETS(M,Ad,N)".
	Name() string
	// Params returns the estimated parameters by name (smoothing weights, initial states, ...).
	Params() map[string]float64
	// Forecast returns h steps ahead. levels are quantile levels strictly inside (0,1).
	// A model without a predictive distribution returns Quantiles == nil and the caller fills
	// them from empirical backtest errors.
	Forecast(h int, levels []float64) Forecast
	// InSample returns the one-step-ahead fitted values (NaN where undefined), same length as the
	// training data.
	InSample() []float64
}

// Model fits one family (or one configuration of it) to a series.
type Model interface {
	// Family is the stable identifier of the family, e.g. "ETS", "Theta", "Croston".
	Family() string
	// MinLength is the shortest training series the model can fit.
	MinLength(seasonLength int) int
	// Fit estimates the model on y (no NaN: the caller cleans first). m is the season length
	// (1 for none). Bad data or a failed fit is an error; misuse panics.
	Fit(y []float64, m int) (Fitted, error)
}

// ErrTooShort is returned by Fit when the series is shorter than MinLength.
var ErrTooShort = errors.New("models: series too short for this model")
