package models

import "math"

// etsFigure returns the seasonal figure of y used to seed the seasonal states: fig[k] is the
// effect at positions t = k, k+m, k+2m, ... counted from the first observation (0-based),
// normalised to sum 0 (additive) or m (multiplicative).
//
// With at least three full seasons it is classical decomposition (Kendall & Stuart; the
// variant of R's stats::decompose): a centred moving average of order m (2 x m for even m)
// removes the trend, the detrended values (differences or ratios) are averaged by position,
// and the averages are normalised. With fewer seasons the trend is a straight line fitted by
// least squares to the whole series instead (our choice; the optimiser re-estimates the seeds
// jointly in any case).
func etsFigure(y []float64, m int, season int8) []float64 {
	n := len(y)
	trend := make([]float64, n)
	for i := range trend {
		trend[i] = math.NaN()
	}
	if n >= 3*m {
		half := m / 2
		for t := half; t+half < n; t++ {
			if m%2 == 0 {
				s := 0.5*y[t-half] + 0.5*y[t+half]
				for k := t - half + 1; k < t+half; k++ {
					s += y[k]
				}
				trend[t] = s / float64(m)
			} else {
				s := 0.0
				for k := t - half; k <= t+half; k++ {
					s += y[k]
				}
				trend[t] = s / float64(m)
			}
		}
	} else {
		a, b := lineFit(y)
		for t := range trend {
			trend[t] = a + b*float64(t+1)
		}
	}
	fig := make([]float64, m)
	cnt := make([]int, m)
	for t := range y {
		if math.IsNaN(trend[t]) {
			continue
		}
		var d float64
		if season == etsMul {
			if trend[t] == 0 {
				continue
			}
			d = y[t] / trend[t]
		} else {
			d = y[t] - trend[t]
		}
		fig[t%m] += d
		cnt[t%m]++
	}
	mean := 0.0
	for k := range fig {
		if cnt[k] > 0 {
			fig[k] /= float64(cnt[k])
		} else if season == etsMul {
			fig[k] = 1
		}
		mean += fig[k]
	}
	mean /= float64(m)
	for k := range fig {
		if season == etsMul {
			if mean != 0 {
				fig[k] /= mean
			}
		} else {
			fig[k] -= mean
		}
	}
	return fig
}

// lineFit returns the least-squares intercept and slope of y_t on t = 1..n.
func lineFit(y []float64) (a, b float64) {
	n := float64(len(y))
	if len(y) == 1 {
		return y[0], 0
	}
	var st, sy, stt, sty float64
	for i, v := range y {
		t := float64(i + 1)
		st += t
		sy += v
		stt += t * t
		sty += t * v
	}
	b = (n*sty - st*sy) / (n*stt - st*st)
	a = (sy - b*st) / n
	return a, b
}

// etsSeedStates fills st with starting seed states for the optimiser, in the manner of
// Hyndman et al. (2002, IJF 18(3), section 2.6): seasonal states from the seasonal figure,
// then the level (and slope) from the first max(10, 2m) seasonally adjusted observations, by
// their mean when there is no trend and by a least-squares line otherwise (intercept at t = 0
// is l_0, slope is b_0). fig is the figure from etsFigure for the form's season type (nil when
// non-seasonal); adj is scratch of len(y).
func etsSeedStates(y []float64, m int, trend, season int8, fig []float64, st *etsState, adj []float64) {
	mm := 1
	copy(adj, y)
	if season != etsNone {
		mm = m
		// seas[j] = s_{-j}: time 0 is position m-1 of the first season, time -j is m-1-j.
		for j := 0; j < m; j++ {
			st.seas[j] = fig[m-1-j]
		}
		if season == etsMul {
			sum := 0.0
			for j := 0; j < m; j++ {
				st.seas[j] = math.Max(st.seas[j], 1e-2)
				sum += st.seas[j]
			}
			for j := 0; j < m; j++ {
				st.seas[j] *= float64(m) / sum
			}
		} else {
			sum := 0.0
			for j := 0; j < m; j++ {
				sum += st.seas[j]
			}
			for j := 0; j < m; j++ {
				st.seas[j] -= sum / float64(m)
			}
		}
		for t := range adj {
			if season == etsAdd {
				adj[t] = y[t] - fig[t%m]
			} else {
				adj[t] = y[t] / math.Max(fig[t%m], 1e-2)
			}
		}
	}
	k := max(10, 2*mm)
	k = min(k, len(y))
	if trend == etsNone {
		s := 0.0
		for _, v := range adj[:k] {
			s += v
		}
		st.l0, st.b0 = s/float64(k), 0
		return
	}
	a, b := lineFit(adj[:k])
	// The fitted line at t = 0 (the time of l_0) is a; it passes b per step.
	if math.Abs(a+b) < 1e-8 {
		// Keep the first forecast away from zero for multiplicative forms.
		a *= 1 + 1e-3
		b *= 1 + 1e-3
	}
	st.l0, st.b0 = a, b
}
