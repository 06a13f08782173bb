package reconcile

import (
	"fmt"
	"math"
)

// nonNegTol is the relative tolerance of the non-negative solver's optimality test: a free
// bottom series counts as negative below −nonNegTol·max(1, max_i |ŷ_i|), a held one as wrongly
// held when its multiplier exceeds nonNegTol·max|μ|.
const nonNegTol = 1e-9

// nonNegative returns, for each period's base vector ŷ, the bottom series b solving
//
//	minimise (ŷ − S b)' W⁻¹ (ŷ − S b)   subject to b >= 0
//
// the optimal non-negative reconciliation of Wickramasuriya, Turlach & Hyndman (2020,
// Statistics and Computing 30, "Optimal non-negative forecast reconciliation"; authors and
// venue from memory), whose aggregates S b are then non-negative and coherent by construction.
//
// Method: an active set solved by block principal pivoting (Júdice & Pires 1994; the form of
// Kim & Park 2011, SIAM J. Sci. Comput. 33(6), for non-negative least squares; the 2020 paper
// compares this algorithm too; all from memory). For a set Z of bottom series held at zero the
// problem is the projection of the package doc with extra constraint rows y_{k+j} = 0 (j ∈ Z);
// its multiplier μ_j for such a row is minus the Karush-Kuhn-Tucker multiplier of b_j >= 0, so
// the solution is optimal when every free b_j >= 0 and every held μ_j <= 0. Otherwise every
// violating series changes side (full exchange); after 3 exchanges that do not reduce the
// number of violations, only the violating series of largest index changes side (Murty's
// rule), which ends in finitely many steps. The first period that needs it starts from
// Z = {j : unconstrained b_j < 0}, each later one from the previous period's optimal Z
// (neighbouring periods of one forecast mostly hold the same series at zero). Should rounding
// bring Murty's rule back to a held set it already tried (an ill-conditioned C W C'), it stops
// there with the negative free series set to 0, and Result.Note says so.
func (p *problem) nonNegative(ys [][]float64) ([][]float64, error) {
	bottom, _, err := p.solve(nil, ys)
	if err != nil {
		return nil, err
	}
	m := p.h.Bottom
	limit := 3*m + 30
	var last []bool // the previous period's optimal held set: the next period's start
	for t, y := range ys {
		var any bool
		for _, v := range bottom[t] {
			any = any || v < 0
		}
		if !any {
			continue // the unconstrained solution is feasible, hence optimal
		}
		held := make([]bool, m)
		for j, v := range bottom[t] {
			held[j] = v < 0
			if last != nil {
				held[j] = last[j]
			}
		}
		var scale float64
		for _, v := range y {
			scale = math.Max(scale, math.Abs(v))
		}
		tolB := nonNegTol * math.Max(1, scale)
		best, backup := math.MaxInt, 3
		seen := map[string]bool{}
		for ex := 1; ; ex++ {
			if ex > limit {
				return nil, fmt.Errorf("reconcile: non-negative reconciliation of period %d did not settle in %d exchanges", t, limit)
			}
			var zero []int
			for j, h := range held {
				if h {
					zero = append(zero, j)
				}
			}
			bs, mus, err := p.solve(zero, [][]float64{y})
			if err != nil {
				return nil, err
			}
			b, mu := bs[0], mus[0]
			var muMax float64
			for _, v := range mu {
				muMax = math.Max(muMax, math.Abs(v))
			}
			tolMu := nonNegTol * muMax
			var bad []int
			for j, v := range b {
				if !held[j] && v < -tolB {
					bad = append(bad, j)
				}
			}
			for g, j := range zero {
				if mu[p.k+g] > tolMu {
					bad = append(bad, j)
				}
			}
			murty := len(bad) >= best && backup == 0
			if murty {
				key := fmt.Sprint(held)
				if seen[key] {
					// Murty's rule never returns to a held set in exact arithmetic, so this
					// is rounding on an ill-conditioned system flipping a series whose
					// optimum is 0 to within that rounding: stop here, made feasible.
					p.cycles++
					bad = nil
				}
				seen[key] = true
			}
			if len(bad) == 0 {
				for j, v := range b {
					b[j] = math.Max(0, v) // free series within tolerance of 0
				}
				bottom[t] = b
				p.exchanges = max(p.exchanges, ex-1)
				last = held
				break
			}
			if !murty {
				if len(bad) < best {
					best, backup = len(bad), 3
					clear(seen)
				} else {
					backup--
				}
				for _, j := range bad {
					held[j] = !held[j]
				}
				continue
			}
			j := bad[0]
			for _, x := range bad {
				j = max(j, x)
			}
			held[j] = !held[j]
		}
	}
	return bottom, nil
}
