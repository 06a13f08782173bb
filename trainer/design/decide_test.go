package design

import (
	"context"
	"encoding/json"
	"fmt"
	"hash/fnv"
	"reflect"
	"slices"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
)

// portfolio is 25 long lines and 25 long steps (TestAutoChoosesPerSegment's two segments).
func portfolio() []series.Series {
	var in []series.Series
	for i := 0; i < 25; i++ {
		in = append(in, line(fmt.Sprintf("line%d", i), 20, float64(i+1)), step(fmt.Sprintf("step%d", i), 20))
	}
	return in
}

func decideOpts() Options {
	return Options{Base: selection.Config{Horizon: 2, Zoo: specs(famLast, famLine)}, Combinations: combos, Workers: 2, CPU: fakeCPU}
}

// Decide on the whole set, then Forecast with its decision, gives what Forecast alone gives
// (the bench's one-group case): the same designs and the same forecasts, with no inner
// holdout in the second call and every choice marked as the plan's.
func TestDecidedEqualsChoosingInTheCall(t *testing.T) {
	in := portfolio()
	o := decideOpts()
	alone, want := run1(t, in, o)
	dec, err := Decide(context.Background(), in, o)
	if err != nil {
		t.Fatal(err)
	}
	if dec.SampleSeries != len(in) || dec.InnerSeries != alone.InnerSeries {
		t.Errorf("decision: sample %d, inner %d; want %d and %d", dec.SampleSeries, dec.InnerSeries, len(in), alone.InnerSeries)
	}
	o.Decided = dec
	out, got := run1(t, in, o)
	if out.InnerSeries != 0 || out.Fallback != nil {
		t.Errorf("with the decision the call ran an inner holdout: %+v", out)
	}
	for i := range in {
		if got[i].Design != want[i].Design || !reflect.DeepEqual(got[i].Mean, want[i].Mean) || got[i].From != FromPlan || want[i].From != FromShard {
			t.Errorf("%s: %s %v (%s), alone %s %v (%s)", in[i].Key, got[i].Design, got[i].Mean, got[i].From, want[i].Design, want[i].Mean, want[i].From)
		}
	}
	for _, ch := range out.Choices {
		if ch.From != FromPlan || ch.Series != 25 || ch.Inner != 25 {
			t.Errorf("choice %+v, want the plan's with this call's 25 series and the plan's 25 inner", ch)
		}
	}
}

// A shard too small to choose by itself (10 lines: below MinSeries it would take the simplest
// candidate, "last") applies the plan's choice made on the whole portfolio ("line").
func TestSmallShardAppliesThePlanChoice(t *testing.T) {
	in := portfolio()
	o := decideOpts()
	dec, err := Decide(context.Background(), in, o)
	if err != nil {
		t.Fatal(err)
	}
	var shard []series.Series
	for i := 0; i < 10; i++ {
		shard = append(shard, line(fmt.Sprintf("line%d", i), 20, float64(i+1)))
	}
	_, own := run1(t, shard, o)
	if own[0].Design != "last" {
		t.Fatalf("the shard alone chose %s; the test needs it to take the simplest (last)", own[0].Design)
	}
	o.Decided = dec
	out, got := run1(t, shard, o)
	for _, r := range got {
		if r.Design != "line" || r.From != FromPlan {
			t.Errorf("%s: %s from %s, want line from the plan", r.Key, r.Design, r.From)
		}
	}
	if len(out.Choices) != 1 || out.Choices[0].Series != 10 || out.Choices[0].Basis.String() != "yearly/smooth/long" {
		t.Errorf("choices %+v", out.Choices)
	}
}

// onlyLines are the lines of in (a plan sample that missed the steps' segment).
func onlyLines(in []series.Series) []series.Series {
	var lines []series.Series
	for _, s := range in {
		if strings.HasPrefix(s.Key, "line") {
			lines = append(lines, s)
		}
	}
	return lines
}

// A segment the decision does not hold is chosen by the call on its own series (From
// FromShard, Outcome.Fallback), the others keep the decision.
func TestUnseenSegmentFallsBackToTheShard(t *testing.T) {
	in := portfolio()
	o := decideOpts()
	dec, err := Decide(context.Background(), onlyLines(in), o) // the plan saw only the lines
	if err != nil {
		t.Fatal(err)
	}
	o.Decided = dec
	out, got := run1(t, in, o)
	if out.Fallback == nil || out.Fallback.InnerSeries != 25 {
		t.Fatalf("fallback %+v, want an inner holdout over the 25 steps", out.Fallback)
	}
	for i, r := range got {
		want, from := "line", FromPlan
		if strings.HasPrefix(in[i].Key, "step") {
			want, from = "last", FromShard
		}
		if r.Design != want || r.From != from {
			t.Errorf("%s: %s from %s, want %s from %s", in[i].Key, r.Design, r.From, want, from)
		}
	}
	steps := choiceOf(t, out, "yearly/erratic/long")
	if steps.From != FromShard || steps.Design != "last" || steps.Inner != 25 {
		t.Errorf("steps: %+v", steps)
	}
	var b strings.Builder
	out.Write(&b)
	if !strings.Contains(b.String(), "(plan; basis yearly/smooth/long") || !strings.Contains(b.String(), "(shard; basis yearly/erratic/long") ||
		!strings.Contains(b.String(), "did not hold, chosen here") {
		t.Errorf("outcome text:\n%s", b.String())
	}
}

// The record is what plan.json holds: it round-trips through JSON to an Outcome Forecast
// applies exactly as the decision itself, and a damaged record is refused naming its field.
func TestRecordRoundTrip(t *testing.T) {
	in := portfolio()
	o := decideOpts()
	dec, err := Decide(context.Background(), in, o)
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(NewRecord(dec, "", 4000))
	if err != nil {
		t.Fatal(err)
	}
	var r Record
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if r.Rule != OneSE || r.SampleSeries != 50 || r.SampleLimit != 4000 || len(r.Segments) != 2 || r.Segments[1].Segment != "yearly/smooth/long" ||
		r.Segments[1].Design != "line" || r.Segments[1].Basis != "yearly/smooth/long" || r.Segments[1].Inner != 25 || len(r.Segments[1].Scores) != 3 {
		t.Fatalf("record %s", b)
	}
	back, err := r.Outcome()
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(back.Candidates, dec.Candidates) || back.Choices[1].Means[1] != dec.Choices[1].Means[1] || back.Choices[1].Basis != dec.Choices[1].Basis {
		t.Errorf("back %+v\nwant %+v", back, dec)
	}
	o.Decided = back
	_, got := run1(t, in, o)
	o.Decided = dec
	_, want := run1(t, in, o)
	for i := range got {
		if got[i].Design != want[i].Design || !reflect.DeepEqual(got[i].Mean, want[i].Mean) {
			t.Errorf("%s: %s from the record, %s from the decision", in[i].Key, got[i].Design, want[i].Design)
		}
	}
	for _, c := range []struct {
		edit func(*Record)
		want string
	}{
		{func(r *Record) { r.Segments[0].Segment = "yearly/erratic" }, "segments[0].segment"},
		{func(r *Record) { r.Segments[0].Segment = "fortnightly/erratic/long" }, "segments[0].segment"},
		{func(r *Record) { r.Segments[0].Segment = "yearly/*/long" }, "pooled"},
		{func(r *Record) { r.Segments[0].Design = "ets-theta" }, "segments[0].design"},
		{func(r *Record) { r.Segments[1] = r.Segments[0] }, "listed twice"},
		{func(r *Record) { r.Segments[0].Scores[0].Design = "nope" }, "segments[0].scores[0].design"},
		{func(r *Record) { r.Candidates = append(r.Candidates, r.Candidates[0]) }, "candidates[3]"},
		{func(r *Record) { r.Rule = "best" }, "rule"},
	} {
		var bad Record
		if err := json.Unmarshal(b, &bad); err != nil {
			t.Fatal(err)
		}
		c.edit(&bad)
		if _, err := bad.Outcome(); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("edited record: error %v, want one naming %s", err, c.want)
		}
	}
}

// A decision whose candidates are not this run's (another zoo) is refused, not misapplied.
func TestDecidedCandidatesMustMatch(t *testing.T) {
	in := portfolio()
	o := decideOpts()
	dec, err := Decide(context.Background(), in, o)
	if err != nil {
		t.Fatal(err)
	}
	o.Decided = dec
	o.Base.Zoo = specs(famLast, famLine, famCostly)
	if _, err := Forecast(context.Background(), in, o, func(int, Result, error) {}); err == nil || !strings.Contains(err.Error(), "decided candidates") {
		t.Errorf("error %v, want one about the decided candidates", err)
	}
}

// Sample: the k keys first by SampleHash, in input order; independent of the input's order;
// everything when there are at most k; and its rank is not the bucket's (FNV-1a low bits).
func TestSampleIsDeterministicAndBounded(t *testing.T) {
	var in []series.Series
	for i := 0; i < 1000; i++ {
		in = append(in, series.Series{Key: fmt.Sprintf("item-%04d|depot-%d", i, i%7)})
	}
	got := Sample(in, 50)
	if len(got) != 50 || !slices.IsSorted(got) {
		t.Fatalf("sample of %d, sorted %v", len(got), slices.IsSorted(got))
	}
	if again := Sample(in, 50); !slices.Equal(again, got) {
		t.Error("a second draw differs")
	}
	keys := map[string]bool{}
	bound := uint64(0)
	for _, i := range got {
		keys[in[i].Key] = true
		bound = max(bound, SampleHash(in[i].Key))
	}
	for _, s := range in {
		if !keys[s.Key] && SampleHash(s.Key) < bound {
			t.Errorf("%s ranks below the sample's largest rank but was left out", s.Key)
		}
	}
	rev := slices.Clone(in)
	slices.Reverse(rev)
	for _, i := range Sample(rev, 50) {
		if !keys[rev[i].Key] {
			t.Errorf("reversed input: %s drawn, not in the first draw", rev[i].Key)
		}
	}
	if all := Sample(in[:40], 50); len(all) != 40 || all[0] != 0 || all[39] != 39 {
		t.Errorf("40 series under a limit of 50: %v", all)
	}
	// The sample spreads over hash buckets (KeyHash & 7): each of 8 buckets holds 50/8 on
	// average; a rank equal to FNV-1a would not change that, but one built from its low bits
	// would put the sample in one bucket.
	buckets := map[uint64]int{}
	for _, i := range got {
		buckets[fnv64a(in[i].Key)&7]++
	}
	if len(buckets) < 6 {
		t.Errorf("the sample falls in %d of 8 buckets: %v", len(buckets), buckets)
	}
}

// fnv64a is pipeline.KeyHash (64-bit FNV-1a of the key's bytes), which this package cannot
// import.
func fnv64a(s string) uint64 {
	h := fnv.New64a()
	h.Write([]byte(s))
	return h.Sum64()
}

// Standalone series forecast in small batches, and the rest (a segment the decision did not
// hold) in one call of their own, get what one call over every series gives: the same design,
// origin, segment and forecast per series.
func TestStandaloneBatchesEqualOneCall(t *testing.T) {
	in := portfolio()
	o := decideOpts()
	if o.Standalone() != nil {
		t.Fatal("Auto without a decision: no series may stand alone")
	}
	dec, err := Decide(context.Background(), onlyLines(in), o) // the plan saw only the lines
	if err != nil {
		t.Fatal(err)
	}
	o.Decided = dec
	_, want := run1(t, in, o)
	alone := o.Standalone()
	var batch, rest []series.Series
	var got []Result
	flush := func() {
		_, rs := run1(t, batch, o)
		got, batch = append(got, rs...), nil
	}
	for _, s := range in {
		if !alone(s) {
			rest = append(rest, s)
			continue
		}
		if batch = append(batch, s); len(batch) == 7 {
			flush()
		}
	}
	flush()
	if len(rest) != 25 || len(got) != 25 {
		t.Fatalf("%d series stand alone and %d not; want the 25 lines and the 25 steps", len(got), len(rest))
	}
	_, rs := run1(t, rest, o)
	got = append(got, rs...)
	byKey := map[string]Result{}
	for _, r := range got {
		byKey[r.Key] = r
	}
	for i, w := range want {
		g := byKey[in[i].Key]
		if g.Design != w.Design || g.From != w.From || g.Segment != w.Segment || !reflect.DeepEqual(g.Mean, w.Mean) {
			t.Errorf("%s: %s from %s %v, one call %s from %s %v", in[i].Key, g.Design, g.From, g.Mean, w.Design, w.From, w.Mean)
		}
	}
	o.Mode, o.Decided = Fixed, nil
	if f := o.Standalone(); f == nil || !f(in[0]) {
		t.Error("Fixed: every series stands alone")
	}
}

// TestTopKNames: the names of the top-k candidates read back into k and method; other
// candidate names do not.
func TestTopKNames(t *testing.T) {
	names := map[string]bool{}
	for _, c := range Candidates(selection.Config{Horizon: 3, Zoo: specs(models.FamilyNaive, models.FamilyTheta, models.FamilyDOTM, models.FamilyETS)}, Combinations) {
		names[c.Name] = true
		k, method, ok := TopK(c.Name)
		if want := strings.HasPrefix(c.Name, "top"); ok != want {
			t.Errorf("TopK(%q) ok = %v", c.Name, ok)
		}
		if ok && (k != topK || (method != selection.CombineMean && method != selection.CombineMedian)) {
			t.Errorf("TopK(%q) = %d, %q", c.Name, k, method)
		}
	}
	if !names["top3-mean"] || !names["top3-median"] {
		t.Fatalf("candidates %v lack the top-3 designs", names)
	}
	for _, bad := range []string{"top", "top1-mean", "topx-mean", "top3", "top03-mean", "ets-theta"} {
		if _, _, ok := TopK(bad); ok {
			t.Errorf("TopK(%q) read a name Candidates never gives", bad)
		}
	}
}
