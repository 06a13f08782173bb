package bench

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
)

// Two members of known cost for the cost-verdict tests: every fit adds one unit to holdWork,
// and holdCPU reads one unit as a millisecond, so the pilot measures both members alike
// whatever the machine does. "last" repeats the last value, "line" extends the last step.
const (
	holdLast = "BenchHoldLast"
	holdLine = "BenchHoldLine"
)

var holdWork atomic.Int64

func holdCPU() time.Duration { return time.Duration(holdWork.Load()) * time.Millisecond }

func init() {
	for _, fam := range []string{holdLast, holdLine} {
		line := fam == holdLine
		models.Register(fam, func(models.Spec) (models.Model, error) { return holdModel{fam, line}, nil })
	}
	// Taken only by name, so that the other tests' default zoos stay as they are.
	selection.ByNameOnly = append(selection.ByNameOnly, holdLast, holdLine)
}

type holdModel struct {
	fam  string
	line bool
}

func (m holdModel) Family() string    { return m.fam }
func (m holdModel) MinLength(int) int { return 2 }
func (m holdModel) Fit(y []float64, _ int) (models.Fitted, error) {
	holdWork.Add(1)
	f := holdFitted{name: m.fam, last: y[len(y)-1], n: len(y)}
	if m.line {
		f.slope = y[len(y)-1] - y[len(y)-2]
	}
	return f, nil
}

type holdFitted struct {
	name        string
	last, slope float64
	n           int
}

func (f holdFitted) Name() string               { return f.name }
func (f holdFitted) Params() map[string]float64 { return nil }
func (f holdFitted) InSample() []float64        { return make([]float64, f.n) }
func (f holdFitted) Forecast(h int, levels []float64) models.Forecast {
	out := models.Forecast{Mean: make([]float64, h), Levels: levels}
	for k := range out.Mean {
		out.Mean[k] = f.last + f.slope*float64(k+1)
	}
	return out
}

// A run records each group's cost verdict, --hold reads it back from the JSON line, and a
// run given it holds it as a portfolio's next run holds its previous run's
// (design.Options.Before). The two members cost the same, c per series; at 1.9 times the first
// candidate's (last) the budget is 1.9c, so the two (2c) do not fit and the plain rule drops
// line; a previous run that kept it holds it, since 2c fits 1.2 x 1.9c (design.CostMargin).
// Made-up yearly unit sales of Fenwick Lane Provisions' 30 stores, each growing by k + 1 a year.
func TestHoldKeepsAnEarlierRunsCostVerdict(t *testing.T) {
	var es []Entry
	for k := range 30 {
		tr := make([]float64, 16)
		for i := range tr {
			tr[i] = 50 + float64((k+1)*i)
		}
		es = append(es, Entry{ID: fmt.Sprintf("store-%d", k), Category: "YEARLY", Frequency: 1, Horizon: 2,
			Start: time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC), Train: tr, Test: []float64{tr[15] + float64(k+1), tr[15] + 2*float64(k+1)}})
	}
	o := Options{Families: []string{holdLast, holdLine}, Workers: 1, CostLimit: 1.9, CPU: holdCPU,
		Combinations: []design.Combination{{Name: "last", Families: []string{holdLast}}, {Name: "line", Families: []string{holdLine}}}}
	key := GroupKey("YEARLY", 2)
	var log bytes.Buffer
	o.Log = &log
	rep, results, err := Run(context.Background(), es, o)
	if err != nil {
		t.Fatal(err)
	}
	if want := (&design.Before{Kept: []string{holdLast}, Dropped: []string{holdLine}}); !reflect.DeepEqual(rep.Verdicts[key], want) {
		t.Fatalf("verdicts %v, want %s: %+v\n%s", rep.Verdicts, key, want, log.String())
	}
	if results[0].Chosen != holdLast {
		t.Errorf("line dropped, yet %s chose %s", results[0].Key, results[0].Chosen)
	}

	path := filepath.Join(t.TempDir(), "before.out")
	line, err := json.Marshal(map[string]any{holdField: rep.Verdicts})
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, []byte("a table line\n"+string(line)+"\nall: ...\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	hold, err := readHold(path)
	if err != nil || !reflect.DeepEqual(hold, rep.Verdicts) {
		t.Fatalf("read back %v (%v), wrote %v", hold, err, rep.Verdicts)
	}

	o.Hold = map[string]*design.Before{key: {Kept: []string{holdLast, holdLine}}}
	log.Reset()
	rep, results, err = Run(context.Background(), es, o)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(log.String(), holdLine+" 4.00 (kept, as by the previous run)") || results[0].Chosen != holdLine {
		t.Errorf("kept before: %s chose %s; log:\n%s", results[0].Key, results[0].Chosen, log.String())
	}
	if want := (&design.Before{Kept: []string{holdLast, holdLine}}); !reflect.DeepEqual(rep.Verdicts[key], want) {
		t.Errorf("held run's verdict %+v, want %+v", rep.Verdicts[key], want)
	}
	// A verdict for another group is not this group's: the plain rule again.
	o.Hold = map[string]*design.Before{GroupKey("YEARLY", 6): {Kept: []string{holdLast, holdLine}}}
	if rep, _, err = Run(context.Background(), es, o); err != nil || !reflect.DeepEqual(rep.Verdicts[key].Dropped, []string{holdLine}) {
		t.Errorf("another group's verdict: %+v, %v", rep.Verdicts[key], err)
	}
}

// --hold is refused, naming the flag and the file, without a verdict to hold or outside Auto.
func TestHoldRefusals(t *testing.T) {
	dir := t.TempDir()
	noVerdict := filepath.Join(dir, "fixed.out")
	if err := os.WriteFile(noVerdict, []byte(`{"ours":{"method":"x"}}`+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	nullVerdict := filepath.Join(dir, "null.out")
	if err := os.WriteFile(nullVerdict, []byte(`{"costVerdict":{"YEARLY h=6":null}}`+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--hold", noVerdict}, noVerdict + ":1: no costVerdict"},
		{[]string{"--hold", nullVerdict}, `costVerdict "YEARLY h=6": null`},
		{[]string{"--hold", filepath.Join(dir, "absent.out")}, "absent.out"},
		{[]string{"--hold", noVerdict, "--design", "Fixed"}, "--hold: only with --design Auto"},
	} {
		var out, errb bytes.Buffer
		if code := Main(append([]string{"--data", dir}, c.args...), &out, &errb); code != 2 || !strings.Contains(errb.String(), c.want) {
			t.Errorf("%v: exit %d, stderr %q; want 2 and %q", c.args, code, errb.String(), c.want)
		}
	}
}

// VerdictChanges names, per group both runs measured, the members one kept and the other
// dropped; a group only one run has, or members both judged alike, say nothing.
func TestVerdictChanges(t *testing.T) {
	here := map[string]*design.Before{
		"YEARLY h=6":    {Kept: []string{"ETS", "MSTLARIMA"}, Dropped: []string{"ARIMA"}},
		"MONTHLY h=18":  {Kept: []string{"ETS"}, Dropped: []string{"ARIMA"}},
		"QUARTERLY h=8": {Kept: []string{"ETS", "FourierARIMA"}},
	}
	there := map[string]*design.Before{
		"YEARLY h=6":   {Kept: []string{"ETS", "ARIMA"}, Dropped: []string{"MSTLARIMA"}},
		"MONTHLY h=18": {Kept: []string{"ETS"}, Dropped: []string{"ARIMA"}},
		"OTHER h=8":    {Kept: []string{"ETS"}, Dropped: []string{"FourierARIMA"}},
	}
	want := []string{"YEARLY h=6: MSTLARIMA kept here, dropped there; ARIMA dropped here, kept there"}
	if got := VerdictChanges(here, there); !reflect.DeepEqual(got, want) {
		t.Errorf("got %q, want %q", got, want)
	}
	if got := VerdictChanges(here, nil); got != nil {
		t.Errorf("no earlier verdicts: %q", got)
	}
}
