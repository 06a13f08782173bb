package pipeline

import (
	"container/heap"
	"strings"
	"time"

	"almanac.dev/almanac/trainer/design"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
)

// designSample draws, during plan's one pass over the input, the series the run's design is
// decided on: those whose keys come first by design.SampleLess (the limit smallest
// design.SampleHash values), the same series design.Sample picks from the whole portfolio.
// It is a bottom-k sketch (the k smallest hashes of a stream): a key is admitted at its
// first row when its rank is below every rank turned away so far (bound), and the largest
// kept key is evicted whenever more than limit are held. A kept key was therefore admitted
// at its first row and holds all its rows; an evicted or turned-away key never returns.
//
// Memory: the rows of at most limit series (in an ingest.Collector, as a shard holds them),
// the ranks of those keys, and the keys seen in a broken object; never the whole input.
type designSample struct {
	limit    int
	c        *ingest.Collector
	kept     map[string]*sampleKey
	byRank   sampleHeap // max-heap: the largest kept rank on top
	bound    *sampleKey // the smallest rank turned away or evicted (nil: none yet)
	excluded map[string]bool
	// touched are the kept keys with rows in the current read (commit drops them if it broke).
	touched map[string]bool
}

type sampleKey struct {
	key  string
	rank uint64
	at   int // index in byRank
}

func (a *sampleKey) less(b *sampleKey) bool { return design.SampleLess(a.key, a.rank, b.key, b.rank) }

type sampleHeap []*sampleKey

func (h sampleHeap) Len() int           { return len(h) }
func (h sampleHeap) Less(i, j int) bool { return h[j].less(h[i]) }
func (h sampleHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i]; h[i].at = i; h[j].at = j }
func (h *sampleHeap) Push(x any)        { k := x.(*sampleKey); k.at = len(*h); *h = append(*h, k) }
func (h *sampleHeap) Pop() any {
	old := *h
	k := old[len(old)-1]
	*h = old[:len(old)-1]
	return k
}

// newDesignSample returns a sample of at most limit series collected as train collects them
// (cutoff, covariates kept for the horizon when the members read them).
func newDesignSample(cfg *runconfig.Config, cutoff time.Time, limit int) (*designSample, error) {
	c, err := ingest.NewCollector(cfg.Source, cutoff)
	if err != nil {
		return nil, err
	}
	if usesCovariates(cfg) {
		c.KeepFuture(cfg.Horizon)
	}
	return &designSample{limit: limit, c: c, kept: map[string]*sampleKey{}, excluded: map[string]bool{}, touched: map[string]bool{}}, nil
}

// add takes one input row.
func (s *designSample) add(r ingest.Row) {
	k := s.kept[r.Key]
	if k == nil {
		if s.excluded[r.Key] {
			return
		}
		nk := &sampleKey{key: r.Key, rank: design.SampleHash(r.Key)}
		if s.bound != nil && !nk.less(s.bound) {
			return // turned away now or before: its first row has passed
		}
		nk.key = strings.Clone(r.Key) // not a slice of the reader's line
		s.kept[nk.key] = nk
		heap.Push(&s.byRank, nk)
		if len(s.byRank) > s.limit {
			top := heap.Pop(&s.byRank).(*sampleKey)
			delete(s.kept, top.key)
			delete(s.touched, top.key)
			s.c.Drop(top.key)
			if s.bound == nil || top.less(s.bound) {
				s.bound = top
			}
			if top == nk {
				return
			}
		}
		k = nk
	}
	s.touched[k.key] = true
	s.c.Add(r)
}

// commit ends one read (an object or a row-group range): when it broke, the kept keys it
// held rows of leave the sample for good, as train drops series with rows in a broken object.
func (s *designSample) commit(broken bool) {
	if s == nil {
		return // no sample: selection.design is not Auto
	}
	if broken {
		for key := range s.touched {
			k := s.kept[key]
			heap.Remove(&s.byRank, k.at)
			delete(s.kept, key)
			s.c.Drop(key)
			s.excluded[key] = true
		}
	}
	clear(s.touched)
}

// finish returns the sample's usable series, sorted by key.
func (s *designSample) finish() []series.Series {
	ok, _ := s.c.Finish()
	return ok
}
