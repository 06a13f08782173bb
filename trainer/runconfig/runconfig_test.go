package runconfig

import (
	"os/exec"
	"strings"
	"testing"
)

// valid returns a configuration that passes Validate (Fenwick Lane Provisions' daily demand).
func valid() Config {
	return Config{
		APIVersion: APIVersion, Kind: Kind,
		Run: "flp-daily-0001", Trigger: "Manual",
		Source: Source{URI: "file:///data/flp/in/", Format: FormatCSV, Frequency: "Daily", Partitioning: PartitionHashBuckets,
			Columns: Columns{Series: []string{"item", "depot"}, Date: "date", Value: "units"}},
		Output:           Output{URI: "file:///data/flp/out/", Format: FormatCSV},
		Horizon:          14,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    QuantileWidthBacktest,
		Models:           []Model{{Family: "Naive"}, {Family: "ETS"}},
		Selection:        Selection{Metric: "MASE", BacktestOrigins: 3, BacktestStep: 1, BacktestRefit: RefitOnce, Design: DesignAuto, DesignCostPercent: 500},
		Sharding:         Sharding{TargetSeriesPerShard: 500},
		Drift:            Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 14},
	}
}

func TestValidate(t *testing.T) {
	cases := map[string]struct {
		edit  func(*Config)
		field string // "" means valid
	}{
		"valid":                   {func(*Config) {}, ""},
		"no apiVersion":           {func(c *Config) { c.APIVersion = "" }, "apiVersion"},
		"other kind":              {func(c *Config) { c.Kind = "ForecastPortfolio" }, "kind"},
		"no run":                  {func(c *Config) { c.Run = "" }, "run:"},
		"bad source format":       {func(c *Config) { c.Source.Format = "xlsx" }, "source.format"},
		"no frequency":            {func(c *Config) { c.Source.Frequency = "" }, "source.frequency"},
		"no key column":           {func(c *Config) { c.Source.Columns.Series = nil }, "source.columns.series"},
		"repeated key column":     {func(c *Config) { c.Source.Columns.Series = []string{"item", "item"} }, "source.columns.series[1]"},
		"date and value the same": {func(c *Config) { c.Source.Columns.Value = "date" }, "source.columns"},
		"zero horizon":            {func(c *Config) { c.Horizon = 0 }, "horizon"},
		"no models":               {func(c *Config) { c.Models = nil }, "models"},
		"model without family":    {func(c *Config) { c.Models[1].Family = "" }, "models[1].family"},
		"two members one name":    {func(c *Config) { c.Models[1].Name = "Naive" }, "models[1]"},
		"quantiles unordered":     {func(c *Config) { c.QuantilePercents = []int{90, 10} }, "quantilePercents[1]"},
		"quantile 100":            {func(c *Config) { c.QuantilePercents = []int{50, 100} }, "quantilePercents[1]"},
		"no quantiles":            {func(c *Config) { c.QuantilePercents = nil }, ""},
		"quantile width model":    {func(c *Config) { c.QuantileWidth = QuantileWidthModel }, ""},
		"quantile width unset":    {func(c *Config) { c.QuantileWidth = "" }, "quantileWidth"},
		"quantile width lower":    {func(c *Config) { c.QuantileWidth = "backtest" }, "quantileWidth"},
		"no metric":               {func(c *Config) { c.Selection.Metric = "" }, "selection.metric"},
		"zero origins":            {func(c *Config) { c.Selection.BacktestOrigins = 0 }, "selection.backtestOrigins"},
		"zero step":               {func(c *Config) { c.Selection.BacktestStep = 0 }, "selection.backtestStep"},
		"refit lower case":        {func(c *Config) { c.Selection.BacktestRefit = "once" }, "selection.backtestRefit"},
		"buckets power of two":    {func(c *Config) { c.Sharding.Buckets = 64 }, ""},
		"buckets not pow2":        {func(c *Config) { c.Sharding.Buckets = 48 }, "sharding.buckets"},
		"buckets too many":        {func(c *Config) { c.Sharding.Buckets = MaxBuckets * 2 }, "sharding.buckets"},
		"buckets negative":        {func(c *Config) { c.Sharding.Buckets = -1 }, "sharding.buckets"},
		"partition objects":       {func(c *Config) { c.Source.Partitioning = PartitionObjects }, ""},
		"partition lower case":    {func(c *Config) { c.Source.Partitioning = "object" }, "source.partitioning"},
		"partition unset":         {func(c *Config) { c.Source.Partitioning = "" }, "source.partitioning"},
		"row groups need parquet": {func(c *Config) { c.Source.Partitioning = PartitionRowGroups }, "source.partitioning"},
		"row groups parquet": {func(c *Config) {
			c.Source.Partitioning = PartitionRowGroups
			c.Source.Format = FormatParquet
		}, ""},
		"zero drift threshold":  {func(c *Config) { c.Drift.ThresholdPercent = 0 }, "drift.thresholdPercent"},
		"no drift metric":       {func(c *Config) { c.Drift.Metric = "" }, "drift.metric"},
		"combine margin 10000":  {func(c *Config) { c.Selection.Combine = &Combine{Top: 2, Method: "Mean", MarginPercent: 10000} }, ""},
		"combine more than zoo": {func(c *Config) { c.Selection.Combine = &Combine{Top: 3, Method: "Mean"} }, "selection.combine.top"},
		"combine no method":     {func(c *Config) { c.Selection.Combine = &Combine{Top: 2} }, "selection.combine.method"},
		"smoothing weight": {func(c *Config) {
			c.Models[0] = Model{Family: "TSB", Smoothing: &Smoothing{Alpha: "0.1", Beta: "1.5"}}
		}, "models[0].smoothing.beta"},
		"penalty": {func(c *Config) {
			c.Models[0] = Model{Family: "Lasso", Regression: &Regression{Penalty: "-2"}}
		}, "models[0].regression.penalty"},
		"boosting settings at the limits": {trees(func(b *Boosting) {
			*b = Boosting{Rounds: 1, Shrinkage: "1", TreeDepth: 12, MinLeafRows: 1000, RowSamplePercent: 1}
		}), ""},
		"boosting rounds above 5000":    {trees(func(b *Boosting) { b.Rounds = 5001 }), "models[0].regression.boosting.rounds"},
		"boosting depth unset":          {trees(func(b *Boosting) { b.TreeDepth = 0 }), "models[0].regression.boosting.treeDepth"},
		"boosting leaf rows above 1000": {trees(func(b *Boosting) { b.MinLeafRows = 1001 }), "models[0].regression.boosting.minLeafRows"},
		"boosting row sample above 100": {trees(func(b *Boosting) { b.RowSamplePercent = 101 }), "models[0].regression.boosting.rowSamplePercent"},
		"boosting shrinkage above 1":    {trees(func(b *Boosting) { b.Shrinkage = "1.5" }), "models[0].regression.boosting.shrinkage"},
		"boosting shrinkage unset":      {trees(func(b *Boosting) { b.Shrinkage = "" }), "models[0].regression.boosting.shrinkage"},
		"features with a known covariate": {func(c *Config) {
			c.Source.Columns.Covariates = []string{"promo_flag", "price"}
			c.Features = &Features{Lags: []int{1, 52}, Covariates: []string{"price"}}
		}, ""},
		"features with an unknown covariate": {func(c *Config) {
			c.Source.Columns.Covariates = []string{"promo_flag"}
			c.Features = &Features{Covariates: []string{"promo_flag", "weather"}}
		}, "features.covariates[1]"},
		"Fourier period below 2": {func(c *Config) {
			c.Features = &Features{Fourier: []Fourier{{Period: "1.5", Order: 1}}}
		}, "features.fourier[0].period"},
		"Fourier period of 2": {func(c *Config) {
			c.Features = &Features{Fourier: []Fourier{{Period: "2", Order: 1}}}
		}, ""},
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

// TestParseIsStrict: a key the contract does not define (here the names the run configuration
// used before it took the API's: zoo, quantiles, origins) is an error naming the key and the
// file, not a silently ignored setting; so are a wrong type and trailing data.
func TestParseIsStrict(t *testing.T) {
	good, err := Encode(ptr(valid()))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Parse(good, "inline"); err != nil {
		t.Fatalf("Parse(Encode(valid())) = %v", err)
	}
	for name, tc := range map[string]struct{ from, to, want string }{
		"old zoo key":         {`"models": [`, `"zoo": [`, `unknown field "zoo"`},
		"unknown nested key":  {`"backtestOrigins": 3`, `"origins": 3`, `unknown field "origins"`},
		"unknown feature key": {`"horizon": 14`, `"horizon": 14, "features": {"lags": [1], "stats": ["mean"]}`, `unknown field "stats"`},
		"string for a number": {`"horizon": 14`, `"horizon": "14"`, `horizon`},
		"trailing data":       {"}\n", "}\n{}", "data after"},
	} {
		t.Run(name, func(t *testing.T) {
			b := strings.Replace(string(good), tc.from, tc.to, 1)
			if b == string(good) && tc.from != "}\n" {
				t.Fatalf("edit %q not applied", tc.from)
			}
			if name == "trailing data" {
				b = string(good) + "{}"
			}
			_, err := Parse([]byte(b), "/etc/almanac/run/config.json")
			if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), "/etc/almanac/run/config.json") {
				t.Fatalf("Parse = %v, want the file and %q named", err, tc.want)
			}
		})
	}
}

// TestEncodeRoundTrips: what Encode writes, Parse reads back, and encoding that again gives the
// same bytes (the controller's ConfigMap, `almanac-trainer render` and config.json agree).
func TestEncodeRoundTrips(t *testing.T) {
	c := valid()
	c.Source.Columns.Covariates = []string{"promo_flag", "price"}
	c.Models = append(c.Models, Model{Family: "Ridge", Regression: &Regression{Penalty: "0.25", Pooled: true}},
		Model{Family: "GradientBoosting", Regression: &Regression{Boosting: &Boosting{Rounds: 200, Shrinkage: "0.05", TreeDepth: 3, MinLeafRows: 8, RowSamplePercent: 80}}})
	c.Features = &Features{Calendar: []string{"WeekOfYear"}, Events: []Event{{Name: "harvest-fair", Dates: []string{"2026-09-05"}, PeriodsBefore: 1}},
		Fourier: []Fourier{{Period: "52.18", Order: 3}}, Lags: []int{1, 52}, Windows: []int{4}, WindowStatistics: []string{"Mean"},
		Covariates: []string{"promo_flag"}, Selection: &FeatureSelection{Filter: "MutualInformation", FilterKeep: 12, MaxFeatures: 6}}
	c.Selection.Combine = &Combine{Top: 2, Method: "Median", MarginPercent: 5}
	b1, err := Encode(&c)
	if err != nil {
		t.Fatal(err)
	}
	back, err := Parse(b1, "inline")
	if err != nil {
		t.Fatal(err)
	}
	b2, err := Encode(back)
	if err != nil {
		t.Fatal(err)
	}
	if string(b1) != string(b2) {
		t.Fatalf("round trip changed the file:\n%s\n---\n%s", b1, b2)
	}
}

// TestNoEngineImports: the contract links none of the engine (the controller imports it).
func TestNoEngineImports(t *testing.T) {
	out, err := exec.Command("go", "list", "-deps", ".").Output()
	if err != nil {
		t.Skipf("go list: %v", err)
	}
	for _, p := range strings.Fields(string(out)) {
		if strings.Contains(p, "gonum.org/") || strings.HasPrefix(p, "almanac.dev/almanac/") && p != "almanac.dev/almanac/trainer/runconfig" {
			t.Errorf("runconfig depends on %s", p)
		}
	}
}

func ptr[T any](v T) *T { return &v }

// Issue 18 case 5: output under the input prefix made every later run read its own outputs.
func TestOverlap(t *testing.T) {
	for _, c := range []struct {
		source, output string
		want           bool
	}{
		{"s3://fenwick/demand/", "s3://fenwick/forecasts/", false},
		{"s3://fenwick/demand/", "s3://fenwick/demand/forecasts/", true},                 // output inside the input prefix
		{"s3://fenwick/demand/", "s3://fenwick/demand", true},                            // the same prefix
		{"s3://fenwick/demand/", "s3://fenwick/", true},                                  // input inside the output prefix
		{"s3://fenwick/demand.csv", "s3://fenwick/out/", false},                          // one object beside the output
		{"s3://fenwick/demand.csv", "s3://fenwick/", true},                               // one object inside it
		{"s3://fenwick/demand/", "s3://fenwick/demand-out/", false},                      // a shared name start is not a prefix
		{"s3://fenwick/demand/?endpoint=x", "s3://fenwick/demand/out/?endpoint=x", true}, // queries ignored
	} {
		if got := Overlap(c.source, c.output); got != c.want {
			t.Errorf("Overlap(%q, %q) = %v, want %v", c.source, c.output, got, c.want)
		}
	}
}

// trees returns an edit that makes models[0] a GradientBoosting member with the API's default
// boosting settings changed by edit.
func trees(edit func(*Boosting)) func(*Config) {
	return func(c *Config) {
		b := Boosting{Rounds: 500, Shrinkage: "0.1", TreeDepth: 4, MinLeafRows: 5, RowSamplePercent: 100}
		edit(&b)
		c.Models[0] = Model{Family: "GradientBoosting", Regression: &Regression{Boosting: &b}}
	}
}
