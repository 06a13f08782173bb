package controllers

import "sort"

// shareRequest is one active run asking for trainer pods.
type shareRequest struct {
	// Key identifies the run (namespace/name).
	Key string
	// Weight is the portfolio's spec.sharding.shareWeight (at least 1).
	Weight int32
	// Demand is min(spec.sharding.maxParallel, shards not yet finished): the most pods the run
	// could use now.
	Demand int32
}

// demand is the most trainer pods a run can use: min(maxParallel, unfinished shards), never
// negative.
func demand(maxParallel, unfinished int32) int32 {
	return max(0, min(maxParallel, unfinished))
}

// fairShares divides budget concurrent shards among the active runs by weighted max-min
// fairness, computed by water-filling:
//
//	repeat over the runs U not yet satisfied, with R the budget not yet given out:
//	    level_i = R * w_i / sum_{j in U} w_j
//	    every run with demand_i <= level_i gets demand_i and leaves U
//	until no run leaves U; then each run in U gets floor(level_i), and the units lost to
//	rounding go one each to the runs with the largest fractional part (ties: earlier in reqs).
//
// So no run gets more than it can use, what one run cannot use goes to the others in
// proportion to their weights, and the shares sum to min(budget, sum of demands)
// (Bertsekas & Gallager, Data Networks, 2nd ed., section 6.5.2, max-min fair allocation, with
// weights). A budget of 0 or less means unlimited: every run gets its demand. A run may get 0
// while the budget is smaller than the number of active runs; it gets pods as others finish.
// The returned map has an entry for every request.
func fairShares(reqs []shareRequest, budget int32) map[string]int32 {
	out := make(map[string]int32, len(reqs))
	if budget <= 0 {
		for _, r := range reqs {
			out[r.Key] = max(0, r.Demand)
		}
		return out
	}
	open := make([]int, 0, len(reqs))
	for i, r := range reqs {
		out[r.Key] = 0
		if r.Demand > 0 {
			open = append(open, i)
		}
	}
	remaining := int64(budget)
	for len(open) > 0 && remaining > 0 {
		var weights int64
		for _, i := range open {
			weights += int64(max(1, reqs[i].Weight))
		}
		next := open[:0:0]
		for _, i := range open {
			r := reqs[i]
			// demand <= R*w/W, compared in integers: demand*W <= R*w.
			if int64(r.Demand)*weights <= remaining*int64(max(1, r.Weight)) {
				out[r.Key] = r.Demand
			} else {
				next = append(next, i)
			}
		}
		if len(next) == len(open) {
			break
		}
		for _, i := range open {
			if out[reqs[i].Key] == reqs[i].Demand {
				remaining -= int64(reqs[i].Demand)
			}
		}
		open = next
	}
	if len(open) == 0 || remaining <= 0 {
		return out
	}
	var weights int64
	for _, i := range open {
		weights += int64(max(1, reqs[i].Weight))
	}
	type part struct{ idx, rem int64 }
	parts := make([]part, 0, len(open))
	given := int64(0)
	for _, i := range open {
		num := remaining * int64(max(1, reqs[i].Weight))
		out[reqs[i].Key] = int32(num / weights)
		given += num / weights
		parts = append(parts, part{int64(i), num % weights})
	}
	sort.SliceStable(parts, func(a, b int) bool { return parts[a].rem > parts[b].rem })
	for k := 0; given < remaining && k < len(parts); k++ {
		r := reqs[parts[k].idx]
		if out[r.Key] < r.Demand {
			out[r.Key]++
			given++
		}
	}
	return out
}
