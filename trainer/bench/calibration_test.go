package bench

import (
	"context"
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/coverage"
	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
)

// On generated data with known Gaussian noise (300 series, 40 training and 6 test points iid
// N(100, 10²)), the Mean model's published 0.1, 0.5, 0.9 quantiles cover the test points as
// the levels say: every level within coverage.Judge's tolerance at 5%, both against the levels
// and against each series' backtest promise, and every series promises its backtest share.
func TestCalibrationOnGeneratedData(t *testing.T) {
	rng := rand.New(rand.NewPCG(19, 4))
	var es []Entry
	for k := range 300 {
		tr, te := make([]float64, 40), make([]float64, 6)
		for i := range tr {
			tr[i] = 100 + 10*rng.NormFloat64()
		}
		for i := range te {
			te[i] = 100 + 10*rng.NormFloat64()
		}
		es = append(es, Entry{ID: fmt.Sprintf("depot-%d", k), Category: "YEARLY", Frequency: 1, Horizon: 6,
			Start: time.Date(1980, 1, 1, 0, 0, 0, 0, time.UTC), Train: tr, Test: te})
	}
	levels := []float64{0.1, 0.5, 0.9}
	_, results, err := Run(context.Background(), es, Options{Families: []string{models.FamilyMean}, Workers: 1, Mode: design.Fixed, Levels: levels})
	if err != nil {
		t.Fatal(err)
	}
	c := Calibration(es, results, levels)
	if c.Points != 1800 || c.Series != 300 || c.BacktestSeries != 300 {
		t.Fatalf("calibration over %d points of %d series (%d backtested), want 1800 of 300 (300)", c.Points, c.Series, c.BacktestSeries)
	}
	nominal := c
	nominal.Expected, nominal.ExpectedVar = []float64{180, 900, 1620}, []float64{0, 0, 0}
	for _, set := range [][]coverage.Level{coverage.Judge(c, 0.05), coverage.Judge(nominal, 0.05)} {
		for _, l := range set {
			t.Logf("level %v: realized %.3f, expected %.3f ± %.3f, deff %.2f", l.Level, l.Realized, l.Expected, l.Tolerance, l.DesignEffect)
			if l.Off || !l.Judged {
				t.Errorf("level %v: realized %.3f against %.3f ± %.3f (judged %v)", l.Level, l.Realized, l.Expected, l.Tolerance, l.Judged)
			}
		}
	}
}
