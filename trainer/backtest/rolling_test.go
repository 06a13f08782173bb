package backtest

import (
	"errors"
	"math"
	"slices"
	"testing"

	"almanac.dev/almanac/trainer/models"
)

// Origin layouts of NewPlan, worked by hand from t_i = n − h' − i·step (Tashman 2000 rolling
// origin with a fixed horizon).
func TestNewPlan(t *testing.T) {
	p, err := NewPlan(10, 3, 3, 2, 2)
	if err != nil || p.Horizon != 3 || !slices.Equal(p.Origins, []int{7, 5, 3}) {
		t.Errorf("NewPlan(10,3,3,2,2) = %+v, %v; want horizon 3 origins [7 5 3]", p, err)
	}
	p, err = NewPlan(5, 6, 3, 1, 3) // h' = min(6, 5−3) = 2, only t = 3 fits
	if err != nil || p.Horizon != 2 || !slices.Equal(p.Origins, []int{3}) {
		t.Errorf("NewPlan(5,6,3,1,3) = %+v, %v; want horizon 2 origins [3]", p, err)
	}
	if _, err := NewPlan(3, 2, 1, 1, 3); !errors.Is(err, ErrNoOrigin) {
		t.Errorf("NewPlan(3,2,1,1,3): err %v, want ErrNoOrigin", err)
	}
}

// Assess by hand: y = 1..6, origins 4 and 3, horizon 2, forecasts all equal to 3.
// Origin t=4: actual 5, 6, errors 2, 3; naive scale of 1,2,3,4 is 1: MASE 2.5.
// Origin t=3: actual 4, 5, errors 1, 2; scale 1: MASE 1.5. Overall (2.5+1.5)/2 = 2.
// Step 1 pools errors 2 and 1 -> 1.5; step 2 pools 3 and 2 -> 2.5.
func TestAssess(t *testing.T) {
	y := []float64{1, 2, 3, 4, 5, 6}
	p := Plan{Origins: []int{4, 3}, Horizon: 2}
	a := Assess(MASE, y, 1, p, [][]float64{{3, 3}, {3, 3}})
	if a.Overall != 2 || !slices.Equal(a.Steps, []float64{1.5, 2.5}) || !slices.Equal(a.Errors[1], []float64{1, 2}) {
		t.Errorf("got %+v", a)
	}
	r := Assess(RMSE, y, 1, p, [][]float64{{3, 3}, {3, 3}})
	if math.Abs(r.Steps[0]-math.Sqrt(2.5)) > 1e-12 { // sqrt((4+1)/2)
		t.Errorf("RMSE step 1: %v, want sqrt(2.5)", r.Steps[0])
	}
}

// The scale's lag follows the length of the whole history (ScaleLag), by hand with m = 4.
// n = 7 < 2m: origin 6 of [10 20 11 22 12 23 14], forecast 12, error 2; lag-1 scale of the
// first six points (10+9+11+10+11)/5 = 10.2, MASE 2/10.2. The lag-4 scale would be
// (|12−10| + |23−20|)/2 = 2.5 from two of the four positions of the season (MASE 0.8).
// n = 8 = 2m: one more point, 24; origin 6, forecasts 12 and 22, errors 2 and 2: the lag-4
// scale 2.5 of the same six points, MASE 0.8.
func TestAssessScaleLagFollowsTheHistory(t *testing.T) {
	y := []float64{10, 20, 11, 22, 12, 23, 14, 24}
	short := Assess(MASE, y[:7], 4, Plan{Origins: []int{6}, Horizon: 1}, [][]float64{{12}})
	if math.Abs(short.Overall-2/10.2) > 1e-12 {
		t.Errorf("n = 7, m = 4: MASE %v, want 2/10.2 (lag 1)", short.Overall)
	}
	full := Assess(MASE, y, 4, Plan{Origins: []int{6}, Horizon: 2}, [][]float64{{12, 22}})
	if math.Abs(full.Overall-0.8) > 1e-12 {
		t.Errorf("n = 8, m = 4: MASE %v, want 0.8 (lag 4)", full.Overall)
	}
	for _, c := range []struct{ n, m, want int }{{7, 4, 1}, {8, 4, 4}, {103, 52, 1}, {104, 52, 52}, {50, 1, 1}, {50, 0, 1}} {
		if got := ScaleLag(c.n, c.m); got != c.want {
			t.Errorf("ScaleLag(%d, %d) = %d, want %d", c.n, c.m, got, c.want)
		}
	}
}

func TestScorePanicsOnMisuse(t *testing.T) {
	defer func() {
		if r := recover(); r == nil {
			t.Error("no panic for mismatched lengths")
		}
	}()
	Score(MAE, []float64{1}, []float64{1, 2}, nil, 1)
}

// lastValue is a test model: it "estimates" the last training value and forecasts it flat.
// Its fit can be updated, which keeps the estimate (the updating of Tashman 2000, section 3).
type lastValue struct{ fits *int }

type lastValueFit struct{ v float64 }

func (l lastValue) Family() string    { return "LastValue" }
func (l lastValue) MinLength(int) int { return 1 }
func (l lastValue) Fit(y []float64, _ int) (models.Fitted, error) {
	*l.fits++
	return lastValueFit{y[len(y)-1]}, nil
}
func (f lastValueFit) Name() string                            { return "LastValue" }
func (f lastValueFit) Params() map[string]float64              { return map[string]float64{"v": f.v} }
func (f lastValueFit) InSample() []float64                     { return nil }
func (f lastValueFit) Update([]float64) (models.Fitted, error) { return f, nil }
func (f lastValueFit) Forecast(h int, _ []float64) models.Forecast {
	m := make([]float64, h)
	for k := range m {
		m[k] = f.v
	}
	return models.Forecast{Mean: m}
}

// With Update the model is fitted once, at the earliest origin, and the later origins keep
// that estimate; without it every origin re-estimates. y = 1..6, origins 4, 3, 2, horizon 2.
func TestForecastsUpdate(t *testing.T) {
	y := []float64{1, 2, 3, 4, 5, 6}
	for _, c := range []struct {
		update bool
		fits   int
		want   [][]float64
	}{
		{false, 3, [][]float64{{4, 4}, {3, 3}, {2, 2}}},
		{true, 1, [][]float64{{2, 2}, {2, 2}, {2, 2}}},
	} {
		fits := 0
		got, err := Forecasts(lastValue{&fits}, y, 1, Plan{Origins: []int{4, 3, 2}, Horizon: 2, Update: c.update})
		if err != nil {
			t.Fatal(err)
		}
		if fits != c.fits || !slices.EqualFunc(got, c.want, slices.Equal[[]float64]) {
			t.Errorf("update %v: %d fits, forecasts %v; want %d fits, %v", c.update, fits, got, c.fits, c.want)
		}
	}
}

// TestAssessRecordsGivesBackAssess: the recorded origins of an Assess run, scored again with
// their own errors, give Assess's Overall and Steps for every metric (to 1e-12 relative: the
// forecast is rebuilt as actual − error); scored with other errors they give what Assess gives
// for the forecasts actual − those errors, and the MASE of one origin is mean|e| over the
// recorded scale (Hyndman & Koehler 2006, equation (6)).
func TestAssessRecordsGivesBackAssess(t *testing.T) {
	y := []float64{12, 15, 11, 18, 13, 16, 12, 19, 14, 17, 13, 21, 15, 18, 14, 22}
	p, err := NewPlan(len(y), 3, 3, 1, 6)
	if err != nil {
		t.Fatal(err)
	}
	fcs := make([][]float64, len(p.Origins))
	other := make([][]float64, len(p.Origins))
	for i, o := range p.Origins {
		fcs[i] = []float64{y[o-1] + 0.5, y[o-2] - 1, y[o-1] + 2}
		other[i] = []float64{y[o] - 1.5, y[o+1] + 0.25, y[o+2] - 3}
	}
	near := func(a, b float64) bool {
		return a == b || math.IsNaN(a) && math.IsNaN(b) || math.Abs(a-b) <= 1e-12*math.Max(1, math.Abs(b))
	}
	for _, metric := range Metrics() {
		a := Assess(metric, y, 4, p, fcs)
		recs := Records(metric, y, 4, a)
		overall, steps := AssessRecords(metric, recs, nil)
		if !near(overall, a.Overall) || len(steps) != len(a.Steps) {
			t.Fatalf("%s: overall %v (%d steps), Assess %v (%d)", metric, overall, len(steps), a.Overall, len(a.Steps))
		}
		for k := range steps {
			if !near(steps[k], a.Steps[k]) {
				t.Errorf("%s step %d: %v, Assess %v", metric, k+1, steps[k], a.Steps[k])
			}
		}
		errs := make([][]float64, len(p.Origins))
		for i, o := range p.Origins {
			errs[i] = make([]float64, 3)
			for k := range errs[i] {
				errs[i][k] = y[o+k] - other[i][k]
			}
		}
		b := Assess(metric, y, 4, p, other)
		if overall, _ := AssessRecords(metric, recs, errs); !near(overall, b.Overall) {
			t.Errorf("%s, other errors: %v, Assess %v", metric, overall, b.Overall)
		}
	}
	// By hand: 16 points with m = 4 hold two seasons, so the scale differences at lag 4.
	a := Assess(MASE, y, 4, p, fcs)
	recs := Records(MASE, y, 4, a)
	t0 := p.Origins[0]
	want := NaiveScale(y[:t0], 4, 1)
	if recs[0].Scale != want || recs[0].Held != len(y)-t0 {
		t.Fatalf("origin 0: scale %v held %d, want %v %d", recs[0].Scale, recs[0].Held, want, len(y)-t0)
	}
	e := [][]float64{{1, -2, 3}, {0, 0, 0}, {2, 2, 2}}
	got, _ := AssessRecords(MASE, recs, e)
	hand := (2/recs[0].Scale + 0 + 2/recs[2].Scale) / 3
	if !near(got, hand) {
		t.Errorf("MASE by hand %v, got %v", hand, got)
	}
}
