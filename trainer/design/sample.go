package design

import (
	"hash/fnv"
	"sort"

	"almanac.dev/almanac/trainer/series"
)

// DefaultSampleSeries is how many series of a portfolio Decide chooses on (the plan step's
// sample): the series with the DefaultSampleSeries smallest SampleHash values of their keys.
//
// Why 2000, by cost. Model fits: the inner holdout uses at most MaxSeries (100) series per
// segment whatever the sample size, so the sample's size does not change what the plan fits.
// Memory: the plan pod holds the sample's values (16 bytes a point while collected, 8 more
// for the cleaned copy), and it runs with the same resources as a train pod; 2000 is the
// default spec.sharding.targetSeriesPerShard, so at default settings plan holds no more
// series than one train pod (2000 weekly series of 3 years: under 6 MB; of hourly series of
// one year: about 420 MB, as a train pod of the same portfolio). What it buys: a segment
// holding 5% of the portfolio still gets its full 100 inner series, one holding 1% gets
// MinSeries (20) to choose by itself; rarer segments take a coarser segment's choice, as in a
// shard, and a segment with no series in the sample is chosen by each shard that has it
// (FromShard).
const DefaultSampleSeries = 2000

// SampleHash ranks a series key for the decision sample: 64-bit FNV-1a of the key's bytes
// passed through SplitMix64's finalizer (Steele, Lea & Flood 2014, "Fast splittable
// pseudorandom number generators", OOPSLA), so that the rank is unrelated to the low bits
// FNV-1a hash buckets are cut by (pipeline.KeyHash): a bucket does not own the sample.
func SampleHash(key string) uint64 {
	h := fnv.New64a()
	h.Write([]byte(key))
	x := h.Sum64()
	x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9
	x = (x ^ (x >> 27)) * 0x94d049bb133111eb
	return x ^ (x >> 31)
}

// SampleLess orders keys for the sample: by SampleHash, ties by the key.
func SampleLess(a string, ha uint64, b string, hb uint64) bool {
	if ha != hb {
		return ha < hb
	}
	return a < b
}

// Sample returns the indexes of the series of in that Decide chooses on: the k whose keys
// come first by SampleLess (all of them when len(in) <= k), in input order. The draw depends
// only on the keys, so every run of the same portfolio decides on the same series, and a
// set of series no larger than k is decided on whole, in its own order (the bench's groups,
// whose figures therefore equal a choice made on the whole group).
func Sample(in []series.Series, k int) []int {
	idx := make([]int, len(in))
	for i := range idx {
		idx[i] = i
	}
	if len(in) <= k {
		return idx
	}
	hs := make([]uint64, len(in))
	for i, s := range in {
		hs[i] = SampleHash(s.Key)
	}
	sort.Slice(idx, func(a, b int) bool { return SampleLess(in[idx[a]].Key, hs[idx[a]], in[idx[b]].Key, hs[idx[b]]) })
	idx = idx[:max(k, 0)]
	sort.Ints(idx)
	return idx
}
