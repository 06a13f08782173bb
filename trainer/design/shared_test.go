package design

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"almanac.dev/almanac/trainer/backtest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// famFlaky is a test-only family that fails every fit on an odd number of observations and
// otherwise forecasts the straight line through the last two values: on some inner series
// it fails at some backtest origins, on others not at all.
const famFlaky = "design.Flaky"

func init() {
	models.Register(famFlaky, func(models.Spec) (models.Model, error) { return flaky{}, nil })
}

type flaky struct{}

func (flaky) Family() string    { return famFlaky }
func (flaky) MinLength(int) int { return 2 }
func (flaky) Fit(y []float64, m int) (models.Fitted, error) {
	if len(y)%2 == 1 {
		return nil, errors.New("design test: odd length")
	}
	return fitted{famFlaky, y[len(y)-1], y[len(y)-1] - y[len(y)-2], len(y)}, nil
}

// ownScores is the inner MASE of each candidate run on its own (one selection run per
// candidate, with its own zoo), scored as scoreInner scores; results[c][j] is candidate c's
// selection result on inner series j.
func ownScores(t *testing.T, inner []innerSeries, cands []Candidate) ([][]float64, [][]selection.Result) {
	t.Helper()
	sub := make([]series.Series, len(inner))
	for j, is := range inner {
		sub[j] = is.train
	}
	scores := make([][]float64, len(cands))
	results := make([][]selection.Result, len(cands))
	for ci, c := range cands {
		cfg := c.Config
		cfg.Levels, cfg.ErrorOrigins, cfg.Horizon = nil, 0, len(inner[0].test)
		scores[ci] = make([]float64, len(inner))
		results[ci] = make([]selection.Result, len(inner))
		if err := selection.ForecastMany(context.Background(), sub, cfg, 1, func(j int, r selection.Result, err error) {
			is := inner[j]
			results[ci][j] = r
			scores[ci][j] = math.NaN()
			if !is.scaled {
				return
			}
			f := r.Mean
			if err != nil || len(f) != len(is.test) || !finite(f) {
				f = make([]float64, len(is.test))
				for k := range f {
					f[k] = is.train.Values[len(is.train.Values)-1]
				}
			}
			scores[ci][j] = backtest.Score(backtest.MASE, is.test, f, is.train.Values, is.m)
		}); err != nil {
			t.Fatal(err)
		}
	}
	return scores, results
}

// scoreInner shares one backtest and refit of each member per inner series among every
// candidate; each candidate's inner MASE must be bit for bit what a run of its own
// configuration gives, so that the designs chosen do not change. Invented monthly demand of
// Fenwick Lane Provisions' items (trend, a 12-month season, noise) from 24 to 60 months, some
// so short that the full zoo's backtest plan (its floor is its most demanding member's
// MinLength) is shorter than ets-theta's; exact lines, which Drift backtests perfectly (score
// 0, so the top-k candidates keep the single best member: alwaysCombine); a member that fails
// on odd lengths; and a combination that lists its families against the zoo's order. A third
// of the series carry the member fits of the cost pilot into the scoring (innerSeries.fits).
func TestScoreInnerSharedEqualsOwnRuns(t *testing.T) {
	rng := rand.New(rand.NewPCG(16, 4))
	const h, m = 6, 12
	var inner []innerSeries
	for k := 0; k < 30; k++ {
		n := 24 + k
		y := make([]float64, n)
		for i := range y {
			y[i] = 80 + float64(k) + 0.5*float64(i) + 10*math.Sin(2*math.Pi*float64(i)/m) + rng.NormFloat64()*4
			if k%7 == 6 {
				y[i] = 20 + 3*float64(i) // an exact line
			}
		}
		s := series.Series{Key: fmt.Sprintf("item-%d", k), Start: start(), Freq: series.Monthly, Values: y}
		inner = append(inner, holdOut(s, h, m))
	}
	base := selection.Config{Horizon: h, Zoo: specs(models.FamilyNaive, models.FamilySeasonalNaive, models.FamilyDrift,
		models.FamilyTheta, models.FamilyETS, famFlaky)}
	combos := append(append([]Combination(nil), Combinations[slices.IndexFunc(Combinations, func(c Combination) bool { return c.Name == "ets-theta" })]),
		Combination{Name: "flaky-ets", Families: []string{famFlaky, models.FamilyETS}, Method: selection.CombineMean},
		Combination{Name: "theta-drift-naive-median", Families: []string{models.FamilyTheta, models.FamilyDrift, models.FamilyNaive}, Method: selection.CombineMedian})
	cands := Candidates(base, combos)
	if got := names(cands); fmt.Sprint(got) != "[ets-theta flaky-ets theta-drift-naive-median top3-mean top3-median per-series]" {
		t.Fatalf("candidates %v", got)
	}
	if g := sharedGroups(cands); len(g) != 1 || len(g[0].cfg.Zoo) != len(base.Zoo) {
		t.Fatalf("groups %+v: want one over the declared zoo", g)
	}
	// The cost pilot runs every member alone on a third of the series first, as withinBudget
	// does, and keeps their fits there for the scoring.
	var pilot []int
	for j := range inner {
		if j%3 == 0 {
			inner[j].fits = new(selection.Fits)
			pilot = append(pilot, j)
		}
	}
	for i := range base.Zoo {
		c := base
		c.Zoo = base.Zoo[i : i+1]
		if _, _, err := pilotCost(context.Background(), inner, pilot, c, Options{CPU: fakeCPU, Workers: 1}, math.Inf(1)); err != nil {
			t.Fatal(err)
		}
	}
	shared := make([][]float64, len(cands))
	if err := scoreInner(context.Background(), inner, cands, 2, shared); err != nil {
		t.Fatal(err)
	}
	own, results := ownScores(t, inner, cands)
	for ci := range cands {
		for j := range inner {
			if a, b := shared[ci][j], own[ci][j]; math.Float64bits(a) != math.Float64bits(b) && !(math.IsNaN(a) && math.IsNaN(b)) {
				t.Errorf("%s on %s: shared %v, own run %v", cands[ci].Name, inner[j].train.Key, a, b)
			}
		}
	}
	// What the series exercise: shorter plans for the full zoo than for ets-theta, a member
	// failing, a perfect member keeping the series out of a top-3 combination.
	var shorter, failed, perfect int
	for j := range inner {
		etsTheta, perSeries, top3 := results[0][j], results[len(cands)-1][j], results[3][j]
		if len(perSeries.StepErrors) > 0 && len(etsTheta.StepErrors) > len(perSeries.StepErrors) {
			shorter++
		}
		if math.IsNaN(perSeries.Scores[famFlaky]) {
			failed++
		}
		if top3.Expected == 0 && top3.Family != selection.FamilyCombination {
			perfect++
		}
	}
	if shorter == 0 || failed == 0 || perfect == 0 {
		t.Errorf("full zoo plan shorter on %d series, flaky failed on %d, perfect member kept on %d: each must be > 0", shorter, failed, perfect)
	}
}
