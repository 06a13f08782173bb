package selection

import "math"

// Demand classes of Syntetos, Boylan & Croston (2005), "On the categorization of demand
// patterns", JORS 56, figure 2.
const (
	ClassSmooth       = "smooth"
	ClassErratic      = "erratic"
	ClassIntermittent = "intermittent"
	ClassLumpy        = "lumpy"
)

// Cut-offs of Syntetos, Boylan & Croston (2005), section 5: ADI = 1.32 periods, CV² = 0.49.
const (
	ADICutoff = 1.32
	CV2Cutoff = 0.49
)

// Classify returns the demand class of y from
//
//	ADI = n / (number of non-zero periods)            (average inter-demand interval)
//	CV² = (sd / mean)² of the non-zero demand sizes   (population sd)
//
// smooth: ADI < 1.32, CV² < 0.49; erratic: ADI < 1.32, CV² >= 0.49; intermittent: ADI >= 1.32,
// CV² < 0.49; lumpy: ADI >= 1.32, CV² >= 0.49 (Syntetos, Boylan & Croston 2005). ADI here is the
// series length over the demand count, the common practical form. A series with no demand is
// "intermittent"; negative values count as demand.
func Classify(y []float64) (class string, adi, cv2 float64) {
	var nz, sum, sum2 float64
	for _, v := range y {
		if v != 0 {
			nz++
			sum += v
			sum2 += v * v
		}
	}
	if nz == 0 {
		return ClassIntermittent, math.Inf(1), 0
	}
	adi = float64(len(y)) / nz
	mean := sum / nz
	varc := sum2/nz - mean*mean
	if varc < 0 {
		varc = 0
	}
	cv2 = varc / (mean * mean)
	switch {
	case adi < ADICutoff && cv2 < CV2Cutoff:
		class = ClassSmooth
	case adi < ADICutoff:
		class = ClassErratic
	case cv2 < CV2Cutoff:
		class = ClassIntermittent
	default:
		class = ClassLumpy
	}
	return class, adi, cv2
}

// intermittentFamily reports whether a family is one of the intermittent-demand methods.
func intermittentFamily(f string) bool {
	return f == "Croston" || f == "SBA" || f == "TSB"
}
