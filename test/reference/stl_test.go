package reference

import (
	"fmt"
	"math"
	"testing"

	"almanac.dev/almanac/trainer/numeric/stationarity"
	"almanac.dev/almanac/trainer/numeric/stl"
)

// The STL checks compare trainer/numeric/stl and trainer/numeric/stationarity against R 4.2.2's
// stats::stl and forecast 8.20's seasonal-strength test (Debian r-base-core and
// r-cran-forecast): testdata/stl_r.json, made by r/stl.R, holds R datasets (nottem, co2, log AirPassengers, log UKgas, USAccDeaths), the
// decompositions stl(x, ...) with their exact calls and the spans, degrees, jumps and
// iteration counts R resolved, and forecast:::seas.heuristic(x) and nsdiffs(x) on more R
// datasets.

type stlRefFit struct {
	Data, Call       string
	Periodic, Robust bool
	Args             map[string]any
	Win, Deg, Jump   []int
	Inner, Outer     int
	stlComponents
}

// stlComponents are a reference decomposition.
type stlComponents struct {
	Seasonal, Trend, Remainder, Weights []float64
}

// compareSTL checks d against the reference components: seasonal, trend and remainder to
// 1e-9 of the series' scale (the references and our Go do the same arithmetic in a different
// order), weights to 1e-8.
func compareSTL(t *testing.T, d stl.Decomposition, y []float64, ref stlComponents) {
	t.Helper()
	scale := 0.0
	for _, v := range y {
		scale = math.Max(scale, math.Abs(v))
	}
	for _, c := range []struct {
		name      string
		got, want []float64
		tol       float64
	}{
		{"seasonal", d.Seasonal, ref.Seasonal, 1e-9 * scale},
		{"trend", d.Trend, ref.Trend, 1e-9 * scale},
		{"remainder", d.Remainder, ref.Remainder, 1e-9 * scale},
		{"weights", d.Weights, ref.Weights, 1e-8},
	} {
		if len(c.got) != len(c.want) {
			t.Fatalf("%s: %d values, the reference has %d", c.name, len(c.got), len(c.want))
		}
		worst, at := 0.0, 0
		for i := range c.got {
			if e := math.Abs(c.got[i] - c.want[i]); e > worst {
				worst, at = e, i
			}
		}
		if worst > c.tol {
			t.Errorf("%s: largest difference %.3g at t=%d (ours %.12g, reference %.12g), tolerance %.3g",
				c.name, worst, at+1, c.got[at], c.want[at], c.tol)
		}
	}
}

type stlRef struct {
	Source string
	Series map[string]struct {
		M int
		Y []float64
	}
	Fits     []stlRefFit
	Strength []struct {
		Data     string
		M        int
		Y        []float64
		Strength float64
		Nsdiffs  int
	}
}

func loadSTLRef(t testing.TB) *stlRef {
	var r stlRef
	loadFixture(t, "stl_r.json", &r)
	return &r
}

// stlOptions translates the arguments given to R's stl into our options, leaving the rest at
// their defaults.
func stlOptions(t *testing.T, args map[string]any) stl.Options {
	var o stl.Options
	ints := map[string]*int{"t.window": &o.TrendWindow, "l.window": &o.LowPassWindow,
		"s.jump": &o.SeasonalJump, "t.jump": &o.TrendJump, "l.jump": &o.LowPassJump,
		"inner": &o.Inner, "outer": &o.Outer}
	degrees := map[string]*stl.LoessDegree{"s.degree": &o.SeasonalDegree,
		"t.degree": &o.TrendDegree, "l.degree": &o.LowPassDegree}
	for k, v := range args {
		x, isNum := v.(float64)
		switch {
		case k == "s.window" && v == "periodic":
			o.Periodic = true
		case k == "s.window" && isNum:
			o.SeasonalWindow = int(x)
		case k == "robust":
			o.Robust = v == true
		case ints[k] != nil && isNum:
			*ints[k] = int(x)
		case degrees[k] != nil && isNum:
			*degrees[k] = loessDegree(int(x))
		default:
			t.Fatalf("argument %s = %v not translated", k, v)
		}
	}
	return o
}

// loessDegree is R's and statsmodels' degree number as our LoessDegree.
func loessDegree(d int) stl.LoessDegree {
	if d == 0 {
		return stl.LoessConstant
	}
	return stl.LoessLinear
}

func degreeNumber(d stl.LoessDegree) int {
	if d == stl.LoessLinear {
		return 1
	}
	return 0
}

// TestSTLMatchesR: our STL with the same arguments as each R call resolves the same spans,
// degrees, jumps and iteration counts, and gives R's seasonal, trend, remainder and
// robustness weights (compareSTL's tolerances). The robust cases are on series of odd length
// (see r/stl.R); TestSTLMatchesStatsmodels covers even lengths.
func TestSTLMatchesR(t *testing.T) {
	ref := loadSTLRef(t)
	if len(ref.Fits) == 0 {
		t.Fatal("no STL fits in the fixture")
	}
	for _, f := range ref.Fits {
		t.Run(f.Call, func(t *testing.T) {
			s := ref.Series[f.Data]
			d, err := stl.Decompose(s.Y, s.M, stlOptions(t, f.Args))
			if err != nil {
				t.Fatal(err)
			}
			o := d.Options
			got := fmt.Sprint([]int{o.SeasonalWindow, o.TrendWindow, o.LowPassWindow},
				[]int{degreeNumber(o.SeasonalDegree), degreeNumber(o.TrendDegree), degreeNumber(o.LowPassDegree)},
				[]int{o.SeasonalJump, o.TrendJump, o.LowPassJump}, o.Inner, o.Outer)
			want := fmt.Sprint(f.Win, f.Deg, f.Jump, f.Inner, f.Outer)
			if got != want {
				t.Errorf("resolved options (windows, degrees, jumps, inner, outer): got %s, R %s", got, want)
			}
			compareSTL(t, d, s.Y, f.stlComponents)
		})
	}
}

// TestSeasonalStrengthMatchesR: SeasonalStrength is forecast:::seas.heuristic (to 1e-9) and
// SeasonalDiffs is nsdiffs(x) (R forecast 8.20, default seasonal-strength test) on R datasets
// and on R series given a season they do not have (airmiles, BJsales, LakeHuron, nottem at
// period 4).
func TestSeasonalStrengthMatchesR(t *testing.T) {
	ref := loadSTLRef(t)
	if len(ref.Strength) == 0 {
		t.Fatal("no seasonal-strength cases in the fixture")
	}
	for _, c := range ref.Strength {
		if got := stationarity.SeasonalStrength(c.Y, c.M); math.Abs(got-c.Strength) > 1e-9 {
			t.Errorf("%s: seasonal strength %.12g, R %.12g", c.Data, got, c.Strength)
		}
		if got := stationarity.SeasonalDiffs(c.Y, c.M); got != c.Nsdiffs {
			t.Errorf("%s: D = %d, R nsdiffs %d", c.Data, got, c.Nsdiffs)
		}
	}
}

// TestSTLMatchesStatsmodels: robust STL on the even-length R datasets, every span, degree,
// jump and iteration count given, against statsmodels 0.13.5's STL (Debian
// python3-statsmodels; testdata/stl_statsmodels.json, made by stl_statsmodels.py).
func TestSTLMatchesStatsmodels(t *testing.T) {
	ref := loadSTLRef(t)
	var sm struct {
		Fits []stlRefFit
	}
	loadFixture(t, "stl_statsmodels.json", &sm)
	if len(sm.Fits) == 0 {
		t.Fatal("no STL fits in the statsmodels fixture")
	}
	for _, f := range sm.Fits {
		t.Run(f.Call, func(t *testing.T) {
			s := ref.Series[f.Data]
			o := stl.Options{
				SeasonalWindow: f.Win[0], TrendWindow: f.Win[1], LowPassWindow: f.Win[2],
				SeasonalDegree: loessDegree(f.Deg[0]), TrendDegree: loessDegree(f.Deg[1]),
				LowPassDegree: loessDegree(f.Deg[2]),
				SeasonalJump:  f.Jump[0], TrendJump: f.Jump[1], LowPassJump: f.Jump[2],
				Robust: true, Inner: f.Inner, Outer: f.Outer,
			}
			d, err := stl.Decompose(s.Y, s.M, o)
			if err != nil {
				t.Fatal(err)
			}
			compareSTL(t, d, s.Y, f.stlComponents)
		})
	}
}
