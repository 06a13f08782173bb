package selection

import (
	"errors"
	"sync/atomic"

	"almanac.dev/almanac/trainer/models"
)

// Test-only families, registered under names no real family uses.
const (
	famLast  = "test.Last"  // naive: repeats the last value
	famUp    = "test.Up"    // last value + 1
	famDown  = "test.Down"  // last value − 1
	famLine  = "test.Line"  // least-squares straight line through the history
	famFail  = "test.Fail"  // every fit fails
	famPanic = "test.Panic" // every fit panics
	famLong  = "test.Long"  // needs 1000 observations
)

func init() {
	reg := func(fam string, min int, fc func(y []float64, h int) ([]float64, error)) {
		fitCalls[fam] = new(atomic.Int64)
		models.Register(fam, func(s models.Spec) (models.Model, error) { return fake{fam, min, fc}, nil })
	}
	shift := func(d float64) func([]float64, int) ([]float64, error) {
		return func(y []float64, h int) ([]float64, error) {
			out := make([]float64, h)
			for k := range out {
				out[k] = y[len(y)-1] + d
			}
			return out, nil
		}
	}
	reg(famLast, 1, shift(0))
	reg(famUp, 1, shift(1))
	reg(famDown, 1, shift(-1))
	reg(famLine, 2, func(y []float64, h int) ([]float64, error) {
		n := float64(len(y))
		var sx, sy, sxx, sxy float64
		for i, v := range y {
			x := float64(i)
			sx, sy, sxx, sxy = sx+x, sy+v, sxx+x*x, sxy+x*v
		}
		b := (n*sxy - sx*sy) / (n*sxx - sx*sx)
		a := (sy - b*sx) / n
		out := make([]float64, h)
		for k := range out {
			out[k] = a + b*float64(len(y)+k)
		}
		return out, nil
	})
	reg(famFail, 1, func([]float64, int) ([]float64, error) { return nil, errors.New("test: cannot fit") })
	reg(famPanic, 1, func([]float64, int) ([]float64, error) { panic("test: boom") })
	reg(famLong, 1000, shift(0))
}

// fitCalls counts the fits of each test family (Fit calls, by family).
var fitCalls = map[string]*atomic.Int64{}

type fake struct {
	fam string
	min int
	fc  func(y []float64, h int) ([]float64, error)
}

func (f fake) Family() string    { return f.fam }
func (f fake) MinLength(int) int { return f.min }
func (f fake) Fit(y []float64, m int) (models.Fitted, error) {
	fitCalls[f.fam].Add(1)
	if len(y) < f.min {
		return nil, models.ErrTooShort
	}
	if _, err := f.fc(y, 1); err != nil {
		return nil, err
	}
	return fakeFit{f, append([]float64(nil), y...)}, nil
}

type fakeFit struct {
	f fake
	y []float64
}

func (g fakeFit) Name() string               { return g.f.fam }
func (g fakeFit) Params() map[string]float64 { return nil }
func (g fakeFit) Forecast(h int, levels []float64) models.Forecast {
	m, _ := g.f.fc(g.y, h)
	return models.Forecast{Mean: m, Levels: levels}
}
func (g fakeFit) InSample() []float64 {
	out := make([]float64, len(g.y))
	out[0] = g.y[0]
	for i := 1; i < len(g.y); i++ {
		f, _ := g.f.fc(g.y[:i], 1)
		out[i] = f[0]
	}
	return out
}
