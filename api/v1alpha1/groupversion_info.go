// Package v1alpha1 holds the forecasting.almanac.dev/v1alpha1 API: ForecastPortfolio, which
// declares a portfolio of series to keep forecast, and ForecastRun, one retraining of it.
// +kubebuilder:object:generate=true
// +groupName=forecasting.almanac.dev
package v1alpha1

import (
	"k8s.io/apimachinery/pkg/runtime/schema"
	"sigs.k8s.io/controller-runtime/pkg/scheme"
)

var (
	// GroupVersion is the group and version of this API.
	GroupVersion = schema.GroupVersion{Group: "forecasting.almanac.dev", Version: "v1alpha1"}

	// SchemeBuilder registers the types of this API with a scheme.
	SchemeBuilder = &scheme.Builder{GroupVersion: GroupVersion}

	// AddToScheme adds the types of this API to a scheme.
	AddToScheme = SchemeBuilder.AddToScheme
)
