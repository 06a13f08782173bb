package controllers

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
)

// indexSet is a set of shard indexes, written as sorted, comma-separated ranges like "0-4,7",
// the notation the Job API uses for status.completedIndexes and status.failedIndexes.
type indexSet map[int]struct{}

// parseIndexSet reads "0-4,7". The empty string is the empty set.
func parseIndexSet(s string) (indexSet, error) {
	set := indexSet{}
	if strings.TrimSpace(s) == "" {
		return set, nil
	}
	for _, part := range strings.Split(s, ",") {
		lo, hi, isRange := strings.Cut(strings.TrimSpace(part), "-")
		a, err := strconv.Atoi(lo)
		if err != nil || a < 0 {
			return nil, fmt.Errorf("index set %q: bad index %q", s, part)
		}
		b := a
		if isRange {
			if b, err = strconv.Atoi(hi); err != nil || b < a {
				return nil, fmt.Errorf("index set %q: bad range %q", s, part)
			}
		}
		for i := a; i <= b; i++ {
			set[i] = struct{}{}
		}
	}
	return set, nil
}

// has reports whether i is in the set.
func (s indexSet) has(i int) bool {
	_, ok := s[i]
	return ok
}

// sorted returns the indexes in increasing order.
func (s indexSet) sorted() []int {
	out := make([]int, 0, len(s))
	for i := range s {
		out = append(out, i)
	}
	sort.Ints(out)
	return out
}

// String writes the set as ranges, e.g. "0-4,7".
func (s indexSet) String() string {
	idx := s.sorted()
	var b strings.Builder
	for k := 0; k < len(idx); {
		j := k
		for j+1 < len(idx) && idx[j+1] == idx[j]+1 {
			j++
		}
		if b.Len() > 0 {
			b.WriteByte(',')
		}
		if j == k {
			b.WriteString(strconv.Itoa(idx[k]))
		} else {
			fmt.Fprintf(&b, "%d-%d", idx[k], idx[j])
		}
		k = j + 1
	}
	return b.String()
}
