package synth

import (
	"math"
	"math/rand/v2"
	"time"
)

// Scenarios Options.Scenario selects.
const (
	// ScenarioBaseline is the default dataset described in the package doc.
	ScenarioBaseline = ""
	// ScenarioPromotions is Fenwick Lane Provisions' promotion calendar: demand for pantry
	// items is driven mostly by planned promotions, price cuts and the yearly harvest fair,
	// and the plan is known Options.Future periods ahead (see promoDemand).
	ScenarioPromotions = "promotions"
)

// ListPrice is the regular shelf price of every pantry item in the promotion scenario; a price
// cut is a share off it.
const ListPrice = 4.0

// HarvestFair returns the date of Fenwick Lane's yearly harvest fair in year y: the first
// Saturday of September (an invented event of the scenario).
func HarvestFair(y int) time.Time {
	d := time.Date(y, time.September, 1, 0, 0, 0, 0, time.UTC)
	return d.AddDate(0, 0, (int(time.Saturday)-int(d.Weekday())+7)%7)
}

// promoDemand draws one pantry series of the promotion scenario. Per period t (days since
// the first period d_t, on date day_t):
//
//	base_t  = level · (1 + trend·d_t/365) · weekly(day of week) · (1 + 0.15·cos(2π(yd_t − 354/365.25)))
//	price_t = ListPrice · (1 − cut_t)
//	mult_t  = (price_t/ListPrice)^(−elasticity) · (1 + lift·promo_t)
//	          · (1 − dip·promo_{t−1}·(1 − promo_t)) · (1 + fair·fair_t)
//	units_t = round(max(0, base_t · mult_t · (1 + noise·ε_t))),  ε_t ~ N(0,1)
//
// Promotions come in runs (1 to 3 weeks in weekly data, 4 to 14 days in daily data) starting
// at random with cut_t a run's depth of 10% to 35%; outside promotions, short price cuts of 5%
// to 15% without display (promo_t = 0) happen too. fair_t is 1 in the period holding the
// harvest fair and 0.5 in the period before (stocking up). The constant-elasticity price
// response is the textbook log-log demand curve (common practice); lift, dip and the fair are
// multiplicative effects. The seasonal wave is kept weak (amplitude 0.15) so that the plan,
// not the calendar, is what moves demand.
type promoDemand struct {
	rng                   *rand.Rand
	weekly                bool
	level, trend          float64
	elasticity, lift, dip float64
	fair, noise           float64
	promoLeft, cutLeft    int
	depth, cut            float64
	wasPromo              bool
	fairPeriods, preFair  map[int]bool // keyed by the period index t
	firstDay              time.Time
	step                  int
}

func newPromoDemand(rng *rand.Rand, weekly bool, first time.Time, step, periods int) *promoDemand {
	g := &promoDemand{rng: rng, weekly: weekly, firstDay: first, step: step}
	g.level = math.Exp(2 + 1.5*rng.Float64())
	if weekly {
		g.level *= 5
	}
	g.trend = 0.2 * (rng.Float64() - 0.4)
	g.elasticity = 1.2 + 1.0*rng.Float64()
	g.lift = 0.5 + 0.7*rng.Float64()
	g.dip = 0.2 + 0.2*rng.Float64()
	g.fair = 0.4 + 0.4*rng.Float64()
	g.noise = 0.06 + 0.08*rng.Float64()
	g.fairPeriods, g.preFair = map[int]bool{}, map[int]bool{}
	last := first.AddDate(0, 0, step*(periods-1))
	for y := first.Year(); y <= last.Year()+1; y++ {
		t := int(HarvestFair(y).Sub(first).Hours()/24) / step
		if HarvestFair(y).Before(first) {
			continue
		}
		g.fairPeriods[t] = true
		g.preFair[t-1] = true
	}
	return g
}

// next returns the units, the promotion flag and the shelf price of period t. It draws the
// same random numbers whether or not the units are written, so a planned period's promotion
// and price are exactly what the same period has once it is history.
func (g *promoDemand) next(day time.Time, t int) (float64, int, float64) {
	promo := 0
	switch {
	case g.promoLeft > 0:
		g.promoLeft--
		promo = 1
	default:
		p, minLen, span := 1.0/25, 4, 11
		if g.weekly {
			p, minLen, span = 1.0/6, 1, 3
		}
		if g.rng.Float64() < p {
			g.promoLeft = minLen + g.rng.IntN(span) - 1
			g.depth = 0.10 + 0.25*g.rng.Float64()
			promo = 1
		}
	}
	cut := 0.0
	if promo == 1 {
		cut, g.cutLeft = g.depth, 0
	} else if g.cutLeft > 0 {
		g.cutLeft--
		cut = g.cut
	} else if g.rng.Float64() < 0.05 {
		g.cut = 0.05 + 0.10*g.rng.Float64()
		g.cutLeft = g.rng.IntN(2)
		cut = g.cut
	}
	price := math.Round(ListPrice*(1-cut)*100) / 100

	days := g.step * t
	m := g.level * (1 + g.trend*float64(days)/365)
	if !g.weekly {
		m *= weekProfile[day.Weekday()]
	}
	yd := float64(day.YearDay()) / 365.25
	m *= 1 + 0.15*math.Cos(2*math.Pi*(yd-354.0/365.25))
	m *= math.Pow(price/ListPrice, -g.elasticity)
	if promo == 1 {
		m *= 1 + g.lift
	} else if g.wasPromo {
		m *= 1 - g.dip
	}
	switch {
	case g.fairPeriods[t]:
		m *= 1 + g.fair
	case g.preFair[t]:
		m *= 1 + g.fair/2
	}
	g.wasPromo = promo == 1
	v := math.Round(math.Max(0, m*(1+g.noise*g.rng.NormFloat64())))
	return v, promo, price
}
