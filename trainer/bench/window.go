package bench

import "fmt"

// Two reshapings of a benchmark's series for checks of how far a figure carries beyond the
// test window it was tuned on (PROJECT-NOTES.md, tenth session). Both act on the entries
// before anything is fitted or scored, so the engine, the Naive2 of the OWA and R's reference
// methods all see the same reshaped series.

// EarlierOrigin moves every entry's forecast origin k horizons back: the training data ends
// k·h points before its end and the test is the h points that follow, so with k = 1 the test
// is the last h training points and the competition's own test data is never read. This is
// the rolling-origin evaluation of Tashman (2000, "Out-of-sample tests of forecasting
// accuracy", IJF 16) at one earlier origin. An entry whose history would keep fewer than
// minKept(m) points is left out; dropped counts them. k = 0 returns the entries as they are.
func EarlierOrigin(es []Entry, k int) (out []Entry, dropped int, err error) {
	if k < 0 {
		return nil, 0, fmt.Errorf("earlier origin: %d horizons: must be >= 0", k)
	}
	if k == 0 {
		return es, 0, nil
	}
	for _, e := range es {
		n := len(e.Train) - k*e.Horizon
		if n < minKept(e.Frequency) {
			dropped++
			continue
		}
		e.Test = append([]float64(nil), e.Train[n:n+e.Horizon]...)
		e.Train = append([]float64(nil), e.Train[:n]...)
		out = append(out, e)
	}
	return out, dropped, nil
}

// KeepLast shortens every entry's training history to its last k·h points (h its horizon),
// keeping the test as it is: the short histories of older competitions (M1's yearly series
// start at 9 training points, from memory of the Mcomp package) built from the longer M3
// ones. The start moves forward by the points dropped, so calendar positions stay right.
// Histories already that short are kept whole. k = 0 returns the entries as they are.
func KeepLast(es []Entry, k int) ([]Entry, error) {
	if k < 0 {
		return nil, fmt.Errorf("keep last: %d horizons: must be >= 0", k)
	}
	if k == 0 {
		return es, nil
	}
	out := make([]Entry, 0, len(es))
	for _, e := range es {
		keep := max(k*e.Horizon, minKept(e.Frequency))
		if drop := len(e.Train) - keep; drop > 0 {
			s := e.Series()
			e.Start = s.PeriodAt(drop)
			e.Train = append([]float64(nil), e.Train[drop:]...)
		}
		out = append(out, e)
	}
	return out, nil
}

// minKept is the shortest training history the reshapings leave: one season and two points,
// so that the seasonal-naive MASE scale (Hyndman & Koehler 2006) and Naive2's seasonality test
// are defined.
func minKept(m int) int { return max(m, 1) + 2 }
