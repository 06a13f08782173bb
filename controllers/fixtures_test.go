package controllers

import (
	"almanac.dev/almanac/api/render/rendertest"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// fenwickPortfolio is the demo scenario's weekly portfolio with the CRD's defaults, as the
// apiserver gives it to the controller; its last published run is fenwick-weekly-29000000.
func fenwickPortfolio() *forecastingv1alpha1.ForecastPortfolio {
	fp := rendertest.Default(rendertest.FenwickWeekly())
	fp.Status.LastSuccessfulRun = "fenwick-weekly-29000000"
	return fp
}

func fenwickRun(name string) *forecastingv1alpha1.ForecastRun { return rendertest.FenwickRun(name) }
