// Package synth generates a deterministic synthetic demand dataset for Fenwick Lane Provisions,
// an invented regional distributor: pantry items and equipment spare parts, stocked at a set
// of depots, daily or weekly, in the long format the trainer reads (columns item, depot, date
// or week_start, units, promo_flag; see Options.ColumnsOf). The demo, the tests and the
// benchmarks use it.
//
// Each series (item x depot) is drawn from its own random stream, seeded by Options.Seed and
// the series' position, so a dataset is the same on every machine and any depot can be
// generated alone. The demand model, per period t:
//
//	mean_t = level · (1 + trend·t/365) · weekly(day of week) · yearly(day of year) · (1 + lift·promo_t)
//	units_t = round(max(0, mean_t · (1 + noise·ε_t))),  ε_t ~ N(0,1)
//
// with weekly a fixed distributor profile (quiet weekends; daily data only), yearly a
// one-harmonic cycle peaking in December, and promo_t = 1 on randomly placed promotion runs
// of 3 to 10 days (1 to 2 weeks for weekly data). Spare parts are intermittent instead: a
// demand of 1 + Poisson(1) units with a small probability per period, zero otherwise.
// Bad series, when asked for, each carry one defect the trainer must reject with a reason.
//
// Options.Scenario "promotions" draws the pantry items from another model instead, driven by
// a promotion calendar, price cuts and a yearly event, with the plan written Options.Future
// periods past the history (see promotions.go); the baseline dataset is unchanged by it.
package synth

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"almanac.dev/almanac/trainer/ingest"
)

// Frequencies the generator writes.
const (
	Daily  = "Daily"
	Weekly = "Weekly"
)

// Options describe a dataset. The zero value of a field takes the default shown.
type Options struct {
	// Items per depot (default 50) and Depots (default 4).
	Items, Depots int
	// Frequency is Daily (default) or Weekly (periods start on Mondays).
	Frequency string
	// Periods of history (default 730 days or 104 weeks), ending at End.
	Periods int
	// End is the last period of history (default 2026-11-30, a Monday: a fixed date keeps the
	// benchmarks and tests that take the default reproducible; the generate command defaults
	// to LastComplete of the clock instead).
	End time.Time
	// SpareShare is the share of items that are intermittent spare parts (default 0.1;
	// negative: none).
	SpareShare float64
	// Bad is the number of deliberately defective series (default 0), see Defects.
	Bad int
	// Seed selects the dataset (default 1).
	Seed uint64
	// Scenario is ScenarioBaseline (default) or ScenarioPromotions.
	Scenario string
	// Future is how many planned periods follow the history (promotion scenario only): rows
	// with the promotion flag and price filled and the units cell empty.
	Future int
}

// Defects are the kinds of bad series, given in turn to the first Bad series of depot 0:
// a value that is not a number, a daily row stamped at noon (off the period grid), two rows
// for one period with different values, and a series with a single row.
var Defects = []string{"not-a-number", "off-grid", "conflicting-duplicate", "single-row"}

// withDefaults fills the zero fields.
func (o Options) withDefaults() Options {
	if o.Items == 0 {
		o.Items = 50
	}
	if o.Depots == 0 {
		o.Depots = 4
	}
	if o.Frequency == "" {
		o.Frequency = Daily
	}
	if o.Periods == 0 {
		o.Periods = 730
		if o.Frequency == Weekly {
			o.Periods = 104
		}
	}
	if o.End.IsZero() {
		o.End = time.Date(2026, 11, 30, 0, 0, 0, 0, time.UTC)
	}
	if o.SpareShare == 0 {
		o.SpareShare = 0.1
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	return o
}

// LastComplete is the start of the last period of frequency (Daily or Weekly, weeks starting
// on Mondays, in UTC) that has ended at now: yesterday for daily data, the Monday before the
// current week's for weekly. History ending there is current: a run at now forecasts from the
// period now is in, so none of its forecast is past.
func LastComplete(frequency string, now time.Time) time.Time {
	day := now.UTC().Truncate(24 * time.Hour)
	if frequency == Weekly {
		monday := day.AddDate(0, 0, -((int(day.Weekday()) + 6) % 7))
		return monday.AddDate(0, 0, -7)
	}
	return day.AddDate(0, 0, -1)
}

// Validate reports the first invalid option.
func (o Options) Validate() error {
	o = o.withDefaults()
	switch {
	case o.Items < 1 || o.Depots < 1 || o.Periods < 1:
		return fmt.Errorf("synth: items, depots and periods must be >= 1")
	case o.Frequency != Daily && o.Frequency != Weekly:
		return fmt.Errorf("synth: frequency %q is not %s or %s", o.Frequency, Daily, Weekly)
	case o.Frequency == Weekly && o.End.Weekday() != time.Monday:
		return fmt.Errorf("synth: weekly data ends on a Monday, %s is a %s", o.End.Format("2006-01-02"), o.End.Weekday())
	case o.SpareShare > 1:
		return fmt.Errorf("synth: spare share %v above 1", o.SpareShare)
	case o.Bad < 0 || o.Bad > o.Items:
		return fmt.Errorf("synth: bad series %d outside 0..items (%d)", o.Bad, o.Items)
	case o.Scenario != ScenarioBaseline && o.Scenario != ScenarioPromotions:
		return fmt.Errorf("synth: scenario %q is not %q or %q", o.Scenario, ScenarioBaseline, ScenarioPromotions)
	case o.Future < 0 || (o.Future > 0 && o.Scenario != ScenarioPromotions):
		return fmt.Errorf("synth: future periods %d: only the %s scenario writes a plan (>= 0)", o.Future, ScenarioPromotions)
	}
	return nil
}

// Series returns the number of series (items x depots).
func (o Options) Series() int { o = o.withDefaults(); return o.Items * o.Depots }

// Record is one row of the dataset. Text, when set, replaces the units cell as written (a
// defect); Stamp, when set, replaces the date cell. Price is written by the promotion scenario
// only; Planned marks a row of the plan after the history, whose units cell is empty.
type Record struct {
	Item, Depot string
	Date        time.Time
	Units       float64
	Promo       int
	Text, Stamp string
	Price       float64
	Planned     bool
}

// Key is the series key as the trainer builds it from columns item and depot (ingest.JoinKey).
func (r Record) Key() string { return ingest.JoinKey(r.Item, r.Depot) }

var depotNames = []string{"ashby", "brill", "corrie", "dunmore", "elstow", "fernlea", "garth", "holm",
	"ivybridge", "juniper", "kettleby", "lorton", "marden", "netherby", "orcop", "pelham",
	"quenby", "rushden", "selby", "thornaby", "ulverly", "vowchurch", "wrenfold", "yarrow"}

var pantry = []string{"OATS", "TEA", "JAM", "HONEY", "FLOUR", "RICE", "LENTIL", "COFFEE", "BISCUIT", "OIL", "SUGAR", "PASTA"}

// DepotName returns depot d's name: an invented place name, then depot-NN past the list.
func DepotName(d int) string {
	if d < len(depotNames) {
		return depotNames[d]
	}
	return fmt.Sprintf("depot-%03d", d)
}

// ItemName returns item i's code; spare parts are FLP-SP-nnnnn.
func (o Options) ItemName(i int) string {
	if o.spare(i) {
		return fmt.Sprintf("FLP-SP-%05d", i)
	}
	return fmt.Sprintf("FLP-%s-%05d", pantry[i%len(pantry)], i)
}

// spare reports whether item i is a spare part: the last SpareShare of the items.
func (o Options) spare(i int) bool {
	o = o.withDefaults()
	// A negative share means none; it is kept negative through withDefaults, which is applied
	// more than once (0 would turn back into the default).
	return i >= o.Items-int(math.Round(math.Max(o.SpareShare, 0)*float64(o.Items)))
}

// Depot calls emit for every row of depot d, by item and then date. It panics on invalid
// options (call Validate first).
func (o Options) Depot(d int, emit func(Record) error) error {
	if err := o.Validate(); err != nil {
		panic(err)
	}
	o = o.withDefaults()
	step := 1
	if o.Frequency == Weekly {
		step = 7
	}
	start := o.End.AddDate(0, 0, -step*(o.Periods-1))
	depot := DepotName(d)
	for i := 0; i < o.Items; i++ {
		rng := rand.New(rand.NewPCG(o.Seed, uint64(d)<<32|uint64(i)))
		item := o.ItemName(i)
		defect := ""
		if d == 0 && i < o.Bad {
			defect = Defects[i%len(Defects)]
		}
		gen := newDemand(rng, o.spare(i), o.Frequency == Weekly)
		var pg *promoDemand
		if o.Scenario == ScenarioPromotions && !o.spare(i) {
			// Its own stream, so the baseline's draws are untouched by the scenario.
			pg = newPromoDemand(rand.New(rand.NewPCG(o.Seed^promoStream, uint64(d)<<32|uint64(i))), o.Frequency == Weekly, start, step, o.Periods+o.Future)
		}
		periods := o.Periods
		if defect == "single-row" {
			periods = 1
		}
		for t := 0; t < periods+o.Future; t++ {
			day := start.AddDate(0, 0, step*t)
			var r Record
			switch {
			case pg != nil:
				units, promo, price := pg.next(day, t)
				r = Record{Item: item, Depot: depot, Date: day, Units: units, Promo: promo, Price: price}
			default:
				units, promo := gen.next(day, step*t)
				r = Record{Item: item, Depot: depot, Date: day, Units: units, Promo: promo}
				if o.Scenario == ScenarioPromotions {
					r.Price = SparePrice
				}
			}
			if t >= periods {
				r.Planned, r.Units = true, 0
			}
			switch {
			case defect == "not-a-number" && t == periods/2:
				r.Text = "n/a"
			case defect == "off-grid" && t == periods/2:
				r.Stamp = day.Add(12 * time.Hour).Format(time.RFC3339)
			}
			if err := emit(r); err != nil {
				return err
			}
			if defect == "conflicting-duplicate" && t == periods/2 {
				r.Units++
				if err := emit(r); err != nil {
					return err
				}
			}
		}
	}
	return nil
}

// promoStream is mixed into the seed of the promotion scenario's streams.
const promoStream = 0x9e3779b97f4a7c15

// SparePrice is the fixed price of spare parts in the promotion scenario (they are never on
// promotion).
const SparePrice = 12.5

// demand draws one series.
type demand struct {
	rng            *rand.Rand
	spare, weekly  bool
	level, trend   float64
	yearAmp, phase float64
	lift, noise    float64
	pIssue         float64
	promoLeft      int
}

func newDemand(rng *rand.Rand, spare, weekly bool) *demand {
	g := &demand{rng: rng, spare: spare, weekly: weekly}
	g.level = math.Exp(2 + 1.5*rng.Float64()) // about 7 to 33 units a day
	if weekly {
		g.level *= 5
	}
	g.trend = 0.3 * (rng.Float64() - 0.4) // -12% to +18% a year
	g.yearAmp = 0.1 + 0.3*rng.Float64()
	g.phase = 0.2 * (rng.Float64() - 0.5)
	g.lift = 0.3 + 0.7*rng.Float64()
	g.noise = 0.1 + 0.15*rng.Float64()
	g.pIssue = 0.02 + 0.13*rng.Float64()
	if weekly {
		g.pIssue = math.Min(1, g.pIssue*5)
	}
	return g
}

// weekProfile is the day-of-week factor of a distributor's deliveries, Sunday first.
var weekProfile = [7]float64{0.35, 1.2, 1.15, 1.1, 1.1, 1.25, 0.6}

// next returns the units and promo flag of the period starting on day, days after the first.
func (g *demand) next(day time.Time, days int) (float64, int) {
	if g.spare {
		if g.rng.Float64() >= g.pIssue {
			return 0, 0
		}
		return float64(1 + poisson(g.rng, 1)), 0
	}
	promo := 0
	if g.promoLeft > 0 {
		g.promoLeft--
		promo = 1
	} else {
		p, minLen, span := 1.0/45, 3, 8
		if g.weekly {
			p, minLen, span = 1.0/8, 1, 2
		}
		if g.rng.Float64() < p {
			g.promoLeft = minLen + g.rng.IntN(span) - 1
			promo = 1
		}
	}
	m := g.level * (1 + g.trend*float64(days)/365)
	if !g.weekly {
		m *= weekProfile[day.Weekday()]
	}
	yd := float64(day.YearDay()) / 365.25
	m *= 1 + g.yearAmp*math.Cos(2*math.Pi*(yd-(354.0/365.25)+g.phase))
	if promo == 1 {
		m *= 1 + g.lift
	}
	v := math.Round(math.Max(0, m*(1+g.noise*g.rng.NormFloat64())))
	return v, promo
}

// poisson draws a Poisson(lambda) count by Knuth's multiplication method (Knuth, TAOCP vol. 2,
// 3.4.1), fine for the small lambda used here.
func poisson(rng *rand.Rand, lambda float64) int {
	l, k, p := math.Exp(-lambda), 0, 1.0
	for {
		p *= rng.Float64()
		if p <= l {
			return k
		}
		k++
	}
}
