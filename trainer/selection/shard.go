package selection

import (
	"fmt"
	"math"
	"sync"
	"time"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/series"
)

// shardModels fits the zoo members marked regression.acrossShard once for all series of a
// shard (models.FitShared) and hands each series a per-series view of them, so that they are
// backtested and chosen per series like every other member.
//
// Backtests stay honest across series: the shared model a series sees at an origin is fitted
// on every series' history up to the same calendar period (the origin's period), never on
// another series' later values. Fits are made once per (member, frequency, cutoff period) and
// shared by the workers, so the result does not depend on their number.
type shardModels struct {
	cfg    Config
	series []series.Series // cleaned copies; Values nil when cleaning failed
	byKey  map[string]int  // -1 for a key seen twice
	mu     sync.Mutex
	fits   map[shardKey]*shardFit
}

type shardKey struct {
	member string
	freq   series.Frequency
	cutoff int64 // Unix seconds of the first period not seen
}

type shardFit struct {
	once   sync.Once
	shared *models.Shared
	pos    map[int]int // series index -> position in the fit
	err    error
}

// acrossShard reports whether a member is fitted across the shard.
func acrossShard(sp models.Spec) bool { return sp.Regression != nil && sp.Regression.AcrossShard }

// hasAcrossShard reports whether any zoo member is fitted across the shard.
func hasAcrossShard(zoo []models.Spec) bool {
	for _, sp := range zoo {
		if acrossShard(sp) {
			return true
		}
	}
	return false
}

// newShardModels cleans every series with cfg.Clean (the same cleaning forecast applies).
func newShardModels(in []series.Series, cfg Config) *shardModels {
	sm := &shardModels{cfg: cfg, byKey: map[string]int{}, fits: map[shardKey]*shardFit{}}
	for i, s := range in {
		s.Values = append([]float64(nil), s.Values...)
		s.Notes = nil
		if err := series.Clean(&s, cfg.Clean); err != nil {
			s.Values = nil
		}
		sm.series = append(sm.series, s)
		if _, dup := sm.byKey[s.Key]; dup {
			sm.byKey[s.Key] = -1
		} else {
			sm.byKey[s.Key] = i
		}
	}
	return sm
}

// member returns the per-series view of spec for the series key.
func (sm *shardModels) member(sp models.Spec, key string, base models.Model) models.Model {
	return &sharedMember{sm: sm, spec: sp, key: key, base: base}
}

// fit returns the shared fit of sp for the series of freq, cut at the period cutoff.
func (sm *shardModels) fit(sp models.Spec, m int, freq series.Frequency, cutoff time.Time) *shardFit {
	k := shardKey{member: sp.DisplayName(), freq: freq, cutoff: cutoff.Unix()}
	sm.mu.Lock()
	f, ok := sm.fits[k]
	if !ok {
		f = &shardFit{}
		sm.fits[k] = f
	}
	sm.mu.Unlock()
	f.once.Do(func() {
		var ys [][]float64
		var ins []models.Inputs
		f.pos = map[int]int{}
		for i, s := range sm.series {
			if s.Values == nil || s.Freq != freq {
				continue
			}
			t := periodsBefore(s, cutoff)
			if t < 1 {
				continue
			}
			f.pos[i] = len(ys)
			ys = append(ys, s.Values[:t])
			ins = append(ins, models.InputsOf(s))
		}
		f.shared, f.err = models.FitShared(sp, m, ys, ins, sm.cfg.Horizon)
	})
	return f
}

// periodsBefore is the number of s's observations before the period cutoff (at most all).
func periodsBefore(s series.Series, cutoff time.Time) int {
	cal := series.Calendar{Freq: s.Freq, Anchor: s.Start.Weekday()}
	t := int(cal.Ordinal(cutoff) - cal.Ordinal(s.Start))
	return max(0, min(t, len(s.Values)))
}

// sharedMember is a shard-wide member seen from one series.
type sharedMember struct {
	sm   *shardModels
	spec models.Spec
	key  string
	base models.Model // the per-series model of the same spec, for MinLength
}

func (a *sharedMember) Family() string      { return a.spec.Family }
func (a *sharedMember) MinLength(m int) int { return a.base.MinLength(m) }
func (a *sharedMember) Fit(y []float64, m int) (models.Fitted, error) {
	i, ok := a.sm.byKey[a.key]
	if !ok || i < 0 {
		return nil, fmt.Errorf("series key %q is not unique in the shard", a.key)
	}
	s := a.sm.series[i]
	if s.Values == nil || len(y) > len(s.Values) {
		return nil, fmt.Errorf("series %s is not in the shard's cleaned input", a.key)
	}
	f := a.sm.fit(a.spec, m, s.Freq, s.PeriodAt(len(y)))
	if f.err != nil {
		return nil, f.err
	}
	pos, ok := f.pos[i]
	if !ok {
		return nil, fmt.Errorf("series %s has no history before the shared cutoff", a.key)
	}
	mean, err := f.shared.Forecast(pos, f.shared.Steps())
	if err != nil {
		return nil, err
	}
	return &sharedFitted{family: a.spec.Family, shared: f.shared, pos: pos, mean: mean, n: len(y)}, nil
}

// sharedFitted is one series' forecast from a shared fit.
type sharedFitted struct {
	family string
	shared *models.Shared
	pos    int // the series' position in the shared fit
	mean   []float64
	n      int
}

func (f *sharedFitted) Name() string {
	return fmt.Sprintf("%s(direct,shard,features=%d)", f.family, len(f.shared.Features()))
}
func (f *sharedFitted) Params() map[string]float64 { return f.shared.Params() }
func (f *sharedFitted) Features() []string         { return f.shared.Features() }

// InSample is all NaN: a shared fit keeps no per-series one-step fitted values (its quantiles
// come from its own step residuals, Forecast, or else from its backtest errors alone).
func (f *sharedFitted) InSample() []float64 {
	out := make([]float64, f.n)
	for i := range out {
		out[i] = math.NaN()
	}
	return out
}

// Forecast returns the first h steps (NaN beyond the shard's fitted horizon), with the shared
// model's own quantiles of the series' step errors (models.Shared.Quantiles) when it has them
// for every step; otherwise none, and selection takes them from the backtest errors.
func (f *sharedFitted) Forecast(h int, levels []float64) models.Forecast {
	out := models.Forecast{Mean: make([]float64, h), Levels: levels}
	for k := range out.Mean {
		out.Mean[k] = math.NaN()
		if k < len(f.mean) {
			out.Mean[k] = f.mean[k]
		}
	}
	if h <= len(f.mean) {
		out.Quantiles = f.shared.Quantiles(f.pos, out.Mean, levels)
	}
	return out
}
