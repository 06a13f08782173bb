package models

import (
	"time"

	"almanac.dev/almanac/trainer/series"
)

// Inputs is what a model may know about a series besides its values: where y[0] sits on the
// calendar and the covariates. Covariates[name][i] belongs to period i (the period of y[i] for
// i < len(y)); values past len(y) are known future values (planned prices, promotions) that a
// forecast of those periods may use. The families that use Inputs implement InputModel.
type Inputs struct {
	// Horizon, when > 0, is the number of steps the fit will be asked to forecast, so a
	// direct multi-horizon model can fit them all (and report a missing future covariate) at
	// fit time; 0 leaves it to Forecast.
	Horizon    int
	Key        string
	Start      time.Time
	Freq       series.Frequency
	Covariates map[string][]float64
}

// InputsOf returns the Inputs of s (its covariates are shared, not copied).
func InputsOf(s series.Series) Inputs {
	return Inputs{Key: s.Key, Start: s.Start, Freq: s.Freq, Covariates: s.Covariates}
}

// InputModel is a Model that also uses dates and covariates. FitInputs is Fit with the
// series' Inputs; Fit alone must still work (with whatever the model can do without them) or
// return an error saying what is missing.
type InputModel interface {
	Model
	FitInputs(y []float64, m int, in Inputs) (Fitted, error)
}

// FeatureReporter is a Fitted model built on generated features; Features lists the features it
// kept after feature selection, in the order they were generated.
type FeatureReporter interface {
	Features() []string
}

// FitWith fits mod on y: through FitInputs when mod is an InputModel and in is not nil,
// otherwise through Fit. Families that ignore dates and covariates behave exactly as with Fit.
func FitWith(mod Model, y []float64, m int, in *Inputs) (Fitted, error) {
	if im, ok := mod.(InputModel); ok && in != nil {
		return im.FitInputs(y, m, *in)
	}
	return mod.Fit(y, m)
}
