package backtest

import (
	"errors"
	"math"
	"slices"
	"testing"
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

func TestScorePanicsOnMisuse(t *testing.T) {
	defer func() {
		if r := recover(); r == nil {
			t.Error("no panic for mismatched lengths")
		}
	}()
	Score(MAE, []float64{1}, []float64{1, 2}, nil, 1)
}
