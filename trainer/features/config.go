// Package features turns a series, its calendar and its covariates into a design matrix for the
// regression members of the zoo, using only what is known at the forecast origin.
//
// Config is the declaration shared by the run config (trainer/runconfig), the API
// (ForecastPortfolio spec.features) and the regression models; the generators and the selection
// steps live beside it in this package.
package features

// Config declares which features are generated and how they are narrowed down. The zero value
// generates nothing; Defaults fills a broad set for the frequency.
type Config struct {
	// Calendar lists calendar features by name: dayOfWeek, weekOfYear, month, quarter, weekend,
	// positionInMonth. Features that do not fit the frequency are skipped (dayOfWeek on monthly
	// data, say).
	Calendar []string `json:"calendar,omitempty"`
	// Events is the user's holiday and event calendar.
	Events []Event `json:"events,omitempty"`
	// Fourier adds sine/cosine pairs for long seasonal periods (in periods of the series).
	Fourier []FourierTerm `json:"fourier,omitempty"`
	// Lags are target lags in periods (1 = the previous period).
	Lags []int `json:"lags,omitempty"`
	// Windows are rolling-window lengths in periods; each window yields the statistics in Stats.
	Windows []int `json:"windows,omitempty"`
	// Stats are the rolling statistics: mean, min, max, std.
	Stats []string `json:"stats,omitempty"`
	// Covariates names the covariate columns used as features (their values at the target
	// period must be known in advance: planned prices, promotions, weather forecasts).
	Covariates []string `json:"covariates,omitempty"`
	// CovariateLags adds each covariate shifted by these many periods.
	CovariateLags []int `json:"covariateLags,omitempty"`
	// Selection narrows the generated set.
	Selection Selection `json:"selection,omitempty"`
}

// Event is one named holiday or event with the days around it that it affects.
type Event struct {
	// Name identifies the event in the output ("black-friday").
	Name string `json:"name"`
	// Dates are the event's dates as YYYY-MM-DD, past and future.
	Dates []string `json:"dates"`
	// Lead is how many periods before each date are flagged too (pre-holiday stock-up).
	Lead int `json:"lead,omitempty"`
	// Lag is how many periods after each date are flagged too (post-holiday dip).
	Lag int `json:"lag,omitempty"`
}

// FourierTerm asks for Order sine/cosine pairs of the given period.
type FourierTerm struct {
	// Period in periods of the series, e.g. 365.25 for a yearly cycle in daily data.
	Period float64 `json:"period"`
	// Order is the number of harmonics (1..Period/2).
	Order int `json:"order"`
}

// Selection is the two-step narrowing: a filter ranking, then an embedded lasso path.
type Selection struct {
	// Filter ranks features against the target: "correlation", "mutualInformation" or "none".
	Filter string `json:"filter,omitempty"`
	// FilterKeep is how many top-ranked features the filter passes on (0: all).
	FilterKeep int `json:"filterKeep,omitempty"`
	// Embedded is "lasso" (penalty chosen by backtest along the path) or "none".
	Embedded string `json:"embedded,omitempty"`
	// MaxFeatures caps the features a model keeps (0: no cap). Under the direct strategy the
	// cap holds for each step's model; the member's recorded list is the union over its steps.
	MaxFeatures int `json:"maxFeatures,omitempty"`
}
