package runconfig

import (
	"math"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/features"
	"almanac.dev/almanac/trainer/models"
)

// valid returns a configuration that passes Validate (Fenwick Lane Provisions' daily demand).
func valid() Config {
	return Config{
		Run: "flp-daily-0001",
		Source: Source{URI: "file:///data/flp/in/", Format: "csv", Frequency: "daily",
			Columns: Columns{Series: []string{"item", "depot"}, Date: "date", Value: "units"}},
		Output:    Output{URI: "file:///data/flp/out/", Format: "csv"},
		Horizon:   14,
		Quantiles: []float64{0.1, 0.5, 0.9},
		Zoo:       []models.Spec{{Family: "Naive"}},
		Sharding:  Sharding{TargetSeriesPerShard: 500},
	}
}

func TestValidate(t *testing.T) {
	cases := map[string]struct {
		edit  func(*Config)
		field string // "" means valid
	}{
		"valid":                   {func(*Config) {}, ""},
		"no run":                  {func(c *Config) { c.Run = "" }, "run:"},
		"bad source format":       {func(c *Config) { c.Source.Format = "xlsx" }, "source.format"},
		"no key column":           {func(c *Config) { c.Source.Columns.Series = nil }, "source.columns.series"},
		"zero horizon":            {func(c *Config) { c.Horizon = 0 }, "horizon"},
		"empty zoo":               {func(c *Config) { c.Zoo = nil }, "zoo"},
		"quantiles unordered":     {func(c *Config) { c.Quantiles = []float64{0.9, 0.1} }, "quantiles[1]"},
		"buckets power of two":    {func(c *Config) { c.Sharding.Buckets = 64 }, ""},
		"buckets not pow2":        {func(c *Config) { c.Sharding.Buckets = 48 }, "sharding.buckets"},
		"buckets too many":        {func(c *Config) { c.Sharding.Buckets = MaxBuckets * 2 }, "sharding.buckets"},
		"buckets negative":        {func(c *Config) { c.Sharding.Buckets = -1 }, "sharding.buckets"},
		"partition object":        {func(c *Config) { c.Source.Partitioning = PartitionObject }, ""},
		"partition unknown":       {func(c *Config) { c.Source.Partitioning = "series" }, "source.partitioning"},
		"row groups need parquet": {func(c *Config) { c.Source.Partitioning = PartitionRowGroup }, "source.partitioning"},
		"design unknown":          {func(c *Config) { c.Selection.Design = "Auto" }, "selection.design"},
		"design cost below 1":     {func(c *Config) { c.Selection.DesignCostLimit = 0.5 }, "selection.designCostLimit"},
		"design cost NaN":         {func(c *Config) { c.Selection.DesignCostLimit = math.NaN() }, "selection.designCostLimit"},
		"row groups parquet": {func(c *Config) {
			c.Source.Partitioning = PartitionRowGroup
			c.Source.Format = "parquet"
		}, ""},
		"negative drift ratio": {func(c *Config) { c.Drift.ThresholdRatio = -1 }, "drift"},
		"combine margin 100":   {func(c *Config) { c.Selection.CombineMargin = 100 }, ""},
		"features with a known covariate": {func(c *Config) {
			c.Source.Columns.Covariates = []string{"promo_flag", "price"}
			c.Features = &features.Config{Lags: []int{1, 52}, Covariates: []string{"price"}}
		}, ""},
		"features with an unknown covariate": {func(c *Config) {
			c.Source.Columns.Covariates = []string{"promo_flag"}
			c.Features = &features.Config{Covariates: []string{"promo_flag", "weather"}}
		}, "features.covariates[1]"},
		"features with a zero lag": {func(c *Config) {
			c.Features = &features.Config{Lags: []int{0}}
		}, "features.lags[0]"},
		"member features with an unknown covariate": {func(c *Config) {
			c.Zoo = append(c.Zoo, models.Spec{Family: "Ridge", Features: &features.Config{Covariates: []string{"price"}}})
		}, "zoo[1].features.covariates[0]"},
	}
	for name, tc := range cases {
		t.Run(name, func(t *testing.T) {
			c := valid()
			tc.edit(&c)
			err := c.Validate()
			switch {
			case tc.field == "" && err != nil:
				t.Fatalf("Validate() = %v, want nil", err)
			case tc.field != "" && (err == nil || !strings.HasPrefix(err.Error(), tc.field)):
				t.Fatalf("Validate() = %v, want an error starting with %q", err, tc.field)
			}
		})
	}
}

func TestParseNamesTheFile(t *testing.T) {
	_, err := Parse([]byte(`{"run": "x"`), "/etc/almanac/run/config.json")
	if err == nil || !strings.Contains(err.Error(), "/etc/almanac/run/config.json") {
		t.Fatalf("Parse(truncated) = %v, want the file named", err)
	}
	b := []byte(`{"run":"r1","source":{"uri":"mem://in/","format":"csv","partitioning":"object",
		"columns":{"series":["item"],"date":"date","value":"units"},"frequency":"daily"},
		"output":{"uri":"mem://out/"},"horizon":7,"zoo":[{"family":"Naive"}],
		"selection":{"combineMargin":0.25},
		"sharding":{"targetSeriesPerShard":10,"buckets":8}}`)
	c, err := Parse(b, "inline")
	if err != nil {
		t.Fatal(err)
	}
	if c.Source.Partitioning != PartitionObject || c.Sharding.Buckets != 8 || c.Selection.CombineMargin != 0.25 {
		t.Fatalf("new fields not decoded: %+v %+v %+v", c.Source, c.Sharding, c.Selection)
	}
}

// TestFeaturesRoundTrip: the features block survives the ConfigMap's JSON, and a bad one is
// refused by Parse with the file and the field named.
func TestFeaturesRoundTrip(t *testing.T) {
	b := []byte(`{"run":"r1","source":{"uri":"mem://in/","format":"csv",
		"columns":{"series":["item"],"date":"week_start","value":"units","covariates":["promo_flag","price"]},"frequency":"weekly"},
		"output":{"uri":"mem://out/"},"horizon":8,"zoo":[{"family":"ETS"}],"sharding":{"targetSeriesPerShard":10},
		"features":{"lags":[1,52],"covariates":["promo_flag","price"],"covariateLags":[1],
			"events":[{"name":"harvest-fair","dates":["2026-09-05"],"lead":1}],
			"fourier":[{"period":52.18,"order":3}],"selection":{"filter":"correlation","maxFeatures":8}}}`)
	c, err := Parse(b, "inline")
	if err != nil {
		t.Fatal(err)
	}
	f := c.Features
	if f == nil || len(f.Lags) != 2 || f.Events[0].Lead != 1 || f.Fourier[0].Period != 52.18 || f.Selection.MaxFeatures != 8 {
		t.Fatalf("features not decoded: %+v", f)
	}
	bad := strings.Replace(string(b), `"lead":1`, `"lead":-1`, 1)
	if _, err := Parse([]byte(bad), "/etc/almanac/run/config.json"); err == nil ||
		!strings.Contains(err.Error(), "/etc/almanac/run/config.json: features.events[0]") {
		t.Fatalf("Parse(negative lead) = %v, want the file and features.events[0] named", err)
	}
}
