package controllers

import (
	"testing"

	"github.com/google/go-cmp/cmp"
)

func TestDemand(t *testing.T) {
	tests := map[string]struct {
		maxParallel, unfinished, want int32
	}{
		"capped by spec":      {maxParallel: 8, unfinished: 100, want: 8},
		"capped by backlog":   {maxParallel: 8, unfinished: 3, want: 3},
		"nothing left":        {maxParallel: 8, unfinished: 0, want: 0},
		"negative is nothing": {maxParallel: 8, unfinished: -2, want: 0},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			if got := demand(tc.maxParallel, tc.unfinished); got != tc.want {
				t.Errorf("demand = %d, want %d", got, tc.want)
			}
		})
	}
}

func TestFairShares(t *testing.T) {
	tests := map[string]struct {
		reqs   []shareRequest
		budget int32
		want   map[string]int32
	}{
		"no runs": {
			budget: 10, want: map[string]int32{},
		},
		"unlimited budget gives every demand": {
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 50}, {Key: "b", Weight: 3, Demand: 7}},
			budget: 0,
			want:   map[string]int32{"a": 50, "b": 7},
		},
		"one run is capped by the budget": {
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 50}},
			budget: 16,
			want:   map[string]int32{"a": 16},
		},
		"equal weights split evenly": {
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 50}, {Key: "b", Weight: 1, Demand: 50}},
			budget: 16,
			want:   map[string]int32{"a": 8, "b": 8},
		},
		"weights 1:3": {
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 50}, {Key: "b", Weight: 3, Demand: 50}},
			budget: 16,
			want:   map[string]int32{"a": 4, "b": 12},
		},
		"small demand leaves its share to the others": {
			// Level 20/3 = 6.67: c (demand 2) is satisfied; then 18 split 1:1 between a and b.
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 50}, {Key: "b", Weight: 1, Demand: 50}, {Key: "c", Weight: 1, Demand: 2}},
			budget: 20,
			want:   map[string]int32{"a": 9, "b": 9, "c": 2},
		},
		"cascade: two rounds of satisfied runs": {
			// Round 1, level 30/4 = 7.5 per weight: d (1) is satisfied. Round 2, 29 over weights
			// 1+1+2 = 7.25: c (5) is satisfied. Round 3, 24 over weights 1+2 = 8: a gets 8, b 16.
			reqs: []shareRequest{
				{Key: "a", Weight: 1, Demand: 40}, {Key: "b", Weight: 2, Demand: 40},
				{Key: "c", Weight: 1, Demand: 5}, {Key: "d", Weight: 0, Demand: 1},
			},
			budget: 30,
			want:   map[string]int32{"a": 8, "b": 16, "c": 5, "d": 1},
		},
		"rounding remainder goes to the largest fraction, then the earlier run": {
			// 10 over weights 1,1,1: 3.33 each, one unit left over; all fractions tie, a is first.
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 9}, {Key: "b", Weight: 1, Demand: 9}, {Key: "c", Weight: 1, Demand: 9}},
			budget: 10,
			want:   map[string]int32{"a": 4, "b": 3, "c": 3},
		},
		"budget smaller than the number of runs": {
			// Levels 0.5, 0.5, 1: c gets 1, the last unit goes to a (tied with b, earlier).
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 9}, {Key: "b", Weight: 1, Demand: 9}, {Key: "c", Weight: 2, Demand: 9}},
			budget: 2,
			want:   map[string]int32{"a": 1, "b": 0, "c": 1},
		},
		"demand below the budget in total": {
			reqs:   []shareRequest{{Key: "a", Weight: 5, Demand: 3}, {Key: "b", Weight: 1, Demand: 4}},
			budget: 100,
			want:   map[string]int32{"a": 3, "b": 4},
		},
		"finished run gets zero": {
			reqs:   []shareRequest{{Key: "a", Weight: 1, Demand: 0}, {Key: "b", Weight: 1, Demand: 30}},
			budget: 16,
			want:   map[string]int32{"a": 0, "b": 16},
		},
	}
	for name, tc := range tests {
		t.Run(name, func(t *testing.T) {
			got := fairShares(tc.reqs, tc.budget)
			if diff := cmp.Diff(tc.want, got); diff != "" {
				t.Errorf("fairShares (-want,+got):\n%s", diff)
			}
			var sum, wantSum int32
			for _, r := range tc.reqs {
				sum += got[r.Key]
				wantSum += r.Demand
				if got[r.Key] > r.Demand {
					t.Errorf("%s got %d, more than its demand %d", r.Key, got[r.Key], r.Demand)
				}
			}
			if tc.budget > 0 {
				wantSum = min(wantSum, tc.budget)
			}
			if sum != wantSum {
				t.Errorf("shares sum to %d, want min(budget, demands) = %d", sum, wantSum)
			}
		})
	}
}

// FuzzFairShares checks the allocation invariants on arbitrary inputs: no share above its
// demand, the shares sum to min(budget, demands), and no unsatisfied run gets less per weight
// than another run, up to one unit of rounding each (max-min fairness).
func FuzzFairShares(f *testing.F) {
	f.Add(int32(16), int32(50), int32(1), int32(3), int32(2), int32(7), int32(1))
	f.Fuzz(func(t *testing.T, budget, d1, w1, d2, w2, d3, w3 int32) {
		clamp := func(v, lo, hi int32) int32 { return max(lo, min(hi, v)) }
		reqs := []shareRequest{
			{Key: "a", Demand: clamp(d1, 0, 10000), Weight: clamp(w1, 1, 100)},
			{Key: "b", Demand: clamp(d2, 0, 10000), Weight: clamp(w2, 1, 100)},
			{Key: "c", Demand: clamp(d3, 0, 10000), Weight: clamp(w3, 1, 100)},
		}
		budget = clamp(budget, 1, 100000)
		got := fairShares(reqs, budget)
		var sum, demands int32
		for _, r := range reqs {
			sum += got[r.Key]
			demands += r.Demand
			if got[r.Key] < 0 || got[r.Key] > r.Demand {
				t.Fatalf("%s: share %d outside [0, %d]", r.Key, got[r.Key], r.Demand)
			}
		}
		if sum != min(budget, demands) {
			t.Fatalf("sum %d, want %d", sum, min(budget, demands))
		}
		for _, x := range reqs {
			for _, y := range reqs {
				// x unsatisfied gets, per weight, at least y's share per weight up to the
				// rounding of one unit each: (got_x+1)/w_x >= (got_y-1)/w_y.
				if got[x.Key] < x.Demand && int64(got[x.Key]+1)*int64(y.Weight) < int64(got[y.Key]-1)*int64(x.Weight) {
					t.Fatalf("%s (%d of %d, w%d) starved against %s (%d, w%d)", x.Key, got[x.Key], x.Demand, x.Weight, y.Key, got[y.Key], y.Weight)
				}
			}
		}
	})
}
