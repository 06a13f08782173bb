// Package rendertest holds test fixtures for the render: ForecastPortfolios built in Go, with the
// generated CRD's schema defaults applied through api/offline as the apiserver applies them to
// every object it stores, so tests read the defaults from the CRD rather than spelling them again.
package rendertest

import (
	"fmt"
	"time"

	structuralschema "k8s.io/apiextensions-apiserver/pkg/apiserver/schema"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/utils/ptr"

	"almanac.dev/almanac/api/offline"
	forecastingv1alpha1 "almanac.dev/almanac/api/v1alpha1"
)

// Schema returns the structural schema of the ForecastPortfolio CRD, the one api/offline checks
// files with.
func Schema() (*structuralschema.Structural, error) { return offline.PortfolioSchema() }

// Default applies the CRD's defaults to fp in place (api/offline.DefaultPortfolio: structural
// defaulting, as the apiserver runs it) and returns fp. It panics when the CRD cannot be read: it
// is for test fixtures.
func Default(fp *forecastingv1alpha1.ForecastPortfolio) *forecastingv1alpha1.ForecastPortfolio {
	if _, err := offline.DefaultPortfolio(fp); err != nil {
		panic(fmt.Sprintf("rendertest: %v", err))
	}
	return fp
}

// FenwickWeekly is the demo scenario's portfolio as a user would write it (Fenwick Lane
// Provisions, an invented regional distributor): weekly demand per item and depot, with only
// the fields the render and controller tests need; Default adds the rest.
func FenwickWeekly() *forecastingv1alpha1.ForecastPortfolio {
	return &forecastingv1alpha1.ForecastPortfolio{
		ObjectMeta: metav1.ObjectMeta{Name: "fenwick-weekly", Namespace: "planning", Generation: 4},
		Spec: forecastingv1alpha1.ForecastPortfolioSpec{
			Schedule: "30 4 * * 1",
			TimeZone: ptr.To("Europe/London"),
			Source: forecastingv1alpha1.DataSource{
				URI:       "s3://fenwick-planning/demand/weekly/",
				Frequency: forecastingv1alpha1.Weekly,
				Columns: forecastingv1alpha1.ColumnMapping{
					Series: []string{"item", "depot"}, Date: "week_start", Value: "units",
				},
				CredentialsSecretRef: &forecastingv1alpha1.SecretReference{Name: "fenwick-s3"},
			},
			Output:           forecastingv1alpha1.DataOutput{URI: "s3://fenwick-planning/forecasts/"},
			Horizon:          12,
			QuantilePercents: []int32{5, 50, 95},
			Models: []forecastingv1alpha1.ModelSpec{
				{Family: forecastingv1alpha1.FamilyNaive},
				{Family: forecastingv1alpha1.FamilyETS, ETS: &forecastingv1alpha1.ETSSettings{Trends: []forecastingv1alpha1.ETSComponent{"N", "Ad"}}},
				{Family: forecastingv1alpha1.FamilyTSB, Name: "tsb-slow", SeasonLength: ptr.To[int32](1),
					Smoothing: &forecastingv1alpha1.SmoothingSettings{Alpha: "0.1", Beta: ".05"}},
			},
			Selection: forecastingv1alpha1.SelectionSpec{Combine: &forecastingv1alpha1.CombineSpec{Top: 2}},
			Drift:     forecastingv1alpha1.DriftSpec{ThresholdPercent: 125},
			Trainer:   forecastingv1alpha1.TrainerSpec{Image: "registry.example/almanac-trainer:test"},
		},
	}
}

// FenwickRun is a scheduled run of FenwickWeekly.
func FenwickRun(name string) *forecastingv1alpha1.ForecastRun {
	return &forecastingv1alpha1.ForecastRun{
		ObjectMeta: metav1.ObjectMeta{Name: name, Namespace: "planning"},
		Spec: forecastingv1alpha1.ForecastRunSpec{
			PortfolioName: "fenwick-weekly",
			Trigger:       forecastingv1alpha1.TriggerSchedule,
			ScheduledTime: &metav1.Time{Time: time.Date(2026, 11, 30, 4, 30, 0, 0, time.UTC)},
		},
	}
}
