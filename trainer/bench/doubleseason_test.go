package bench

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// Hourly demand made of a fixed daily profile, a fixed effect per weekday and Gaussian noise
// (invented, 30 days of history, h = 48): the one-week seasonal naive forecast (the value 168
// hours earlier) has twice the noise variance as its expected squared error, 2σ² (the
// difference of two independent N(0, σ²) draws; common practice), and a forecast with only the
// 24-hour cycle misses the weekday effects altogether. The default design (Auto over the whole
// zoo) must model both cycles (the MSTL members, FourierARIMA; issue 16's multiple seasonality)
// well enough to stay at or below the one-week seasonal naive forecast's squared error on the
// same test points. Measured when the test was written (2 cores), as a share of the seasonal
// naive's: the default 0.970 when the design pilot drops FourierARIMA for cost (its cost on
// 720-hour histories sits near the budget, so a run may keep or drop it) and 0.757 when it is
// kept (CostLimit 1000); with backtest origins 60 hours apart instead of 1, 0.615 (not the
// default: PROJECT-NOTES, thirteenth session); since the hourly default zoo holds the pooled
// Ridge (sixteenth session), 0.797, the pooled Ridge in 15 of the 20 chosen combinations. A zoo without the two-cycle members misses the
// weekday effects: the inner holdout scores ets-theta-dotm at twice the chosen design's MASE,
// and seasonal naive at 24 hours is 4.5 of the one-week one. The bound is no better than the
// one-week seasonal naive because a backtest whose three origins lie an hour apart sees the same
// two days and may still pick a 24-hour-only combination for a series (one of the 20 here).
func TestDefaultDesignModelsBothHourlyCycles(t *testing.T) {
	if testing.Short() {
		t.Skip("fits the whole zoo on 20 hourly series")
	}
	es := ovenHours()
	n := len(es[0].Train)
	ratio, chosen := defaultDesignSquaredErrorRatio(t, es, func(e Entry, k int) float64 { return e.Train[n-168+k%168] })
	t.Logf("squared error %.3f of the one-week seasonal naive's; chosen %v", ratio, chosen)
	if math.IsNaN(ratio) || ratio > 1 {
		t.Errorf("the default design's squared error is %.3f of the one-week seasonal naive forecast's, want at most 1 (chosen %v)", ratio, chosen)
	}
}

// ovenHours is the invented data of TestDefaultDesignModelsBothHourlyCycles: 20 series of 720
// training hours and 48 test hours, a daily profile, a weekday effect and noise.
func ovenHours() []Entry {
	rng := rand.New(rand.NewPCG(44, 7))
	const n, h = 720, 48
	var es []Entry
	for k := range 20 {
		sd := 5 + 10*rng.Float64()
		day := make([]float64, 24)
		for i := range day {
			day[i] = 40 * math.Sin(2*math.Pi*float64(i)/24+0.3*rng.Float64())
		}
		week := make([]float64, 7)
		for i := range week {
			week[i] = 20 * rng.NormFloat64()
		}
		y := make([]float64, n+h)
		for i := range y {
			y[i] = 300 + day[i%24] + week[(i/24)%7] + sd*rng.NormFloat64()
		}
		es = append(es, heldOutEntry(fmt.Sprintf("oven-%02d", k), series.Hourly, time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC), y, h))
	}
	return es
}

// The pooled Ridge of the hourly default zoo (selection.PooledRidge, features.PooledDefaults),
// alone on the same invented series: its lags 168 and 336 hours back at the same hour of the
// week see the weekday effect twice, so the best linear forecast from them alone averages the
// two, with expected squared error σ²(1 + 1/2) against the one-week seasonal naive's 2σ²
// (common practice: the variance of a mean of two independent draws); the other columns (the
// daily lags, the Fourier terms of both cycles, the trailing means) can only lower that. So the
// ratio to the one-week seasonal naive must stay at or below 0.75 plus the estimation error of
// one pooled model (Ridge's penalty, 20 series with other profiles): the bound is 0.85.
// Measured when written: 0.676; with features.Defaults instead (a lag of 24 hours, narrowed to
// 20 columns per step) the same pooled Ridge scores 2.158.
func TestPooledRidgeModelsBothHourlyCycles(t *testing.T) {
	es := ovenHours()
	n := len(es[0].Train)
	in := make([]series.Series, len(es))
	for i, e := range es {
		in[i] = e.Series()
	}
	means := make([][]float64, len(es))
	cfg := selection.Config{Horizon: es[0].Horizon, Zoo: []models.Spec{selection.PooledRidge()}}
	if err := selection.ForecastMany(context.Background(), in, cfg, 2, func(i int, r selection.Result, err error) {
		if err != nil {
			t.Errorf("%s: %v", es[i].ID, err)
		}
		means[i] = r.Mean
	}); err != nil {
		t.Fatal(err)
	}
	var ours, base float64
	for i, e := range es {
		for k, a := range e.Test {
			b := e.Train[n-168+k%168]
			ours += (a - means[i][k]) * (a - means[i][k])
			base += (a - b) * (a - b)
		}
	}
	t.Logf("pooled Ridge: squared error %.3f of the one-week seasonal naive's", ours/base)
	if r := ours / base; math.IsNaN(r) || r > 0.85 {
		t.Errorf("pooled Ridge: squared error %.3f of the one-week seasonal naive's, want at most 0.85", r)
	}
}
