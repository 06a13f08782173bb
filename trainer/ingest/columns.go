package ingest

import (
	"fmt"
	"strings"
	"unicode/utf8"

	"almanac.dev/almanac/trainer/runconfig"
)

// mapping holds the positions of the configured columns in a file's columns.
type mapping struct {
	cols  runconfig.Columns
	keys  []int
	date  int
	value int
	covs  []int
}

// mapColumns finds every configured column in names; the error lists what is missing.
func mapColumns(c runconfig.Columns, names []string) (mapping, error) {
	if len(c.Series) == 0 || c.Date == "" || c.Value == "" {
		return mapping{}, fmt.Errorf("column mapping needs series, date and value columns")
	}
	pos := make(map[string]int, len(names))
	for i, n := range names {
		if _, dup := pos[n]; dup {
			pos[n] = -2 // named twice: only an error if mapped
			continue
		}
		pos[n] = i
	}
	var missing []string
	find := func(name string) int {
		switch i, ok := pos[name]; {
		case !ok:
			missing = append(missing, fmt.Sprintf("%q", name))
			return -1
		case i == -2:
			missing = append(missing, fmt.Sprintf("%q (named twice)", name))
			return -1
		default:
			return i
		}
	}
	m := mapping{cols: c}
	for _, k := range c.Series {
		m.keys = append(m.keys, find(k))
	}
	m.date = find(c.Date)
	m.value = find(c.Value)
	for _, k := range c.Covariates {
		m.covs = append(m.covs, find(k))
	}
	if len(missing) > 0 {
		return mapping{}, fmt.Errorf("missing column %s (the file has %s): %w", strings.Join(missing, ", "), quoteList(names, 20), ErrColumns)
	}
	return m, nil
}

func quoteList(names []string, max int) string {
	var b strings.Builder
	for i, n := range names {
		if i == max {
			fmt.Fprintf(&b, ", ... (%d in all)", len(names))
			break
		}
		if i > 0 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "%q", clip(n))
	}
	if len(names) == 0 {
		return "no columns"
	}
	return b.String()
}

// rowBuilder turns the text cells of one CSV record into a Row.
type rowBuilder struct {
	m      mapping
	layout string
	key    keyBuilder
	keys   map[string]string // interned keys, reset when large
}

// build returns the Row of rec; Problem is set without a location, which the caller adds.
func (b *rowBuilder) build(rec []string) Row {
	var r Row
	r.Key, r.Problem = b.buildKey(rec)
	if r.Problem != "" {
		return r
	}
	t, err := ParseDate(rec[b.m.date], b.layout)
	if err != nil {
		r.Problem = err.Error()
		return r
	}
	r.Date = t
	if r.Value, r.Problem = parseValue(rec[b.m.value]); r.Problem != "" {
		r.EmptyValue = r.Problem == emptyValue
		r.Problem = fmt.Sprintf("column %q: %s", b.m.cols.Value, r.Problem)
		if !r.EmptyValue {
			return r
		}
	}
	if len(b.m.covs) > 0 {
		r.Covariates = make([]float64, len(b.m.covs))
		for j, ci := range b.m.covs {
			var p string
			if r.Covariates[j], p = parseCovariate(rec[ci]); p != "" {
				r.Problem, r.EmptyValue = fmt.Sprintf("column %q: %s", b.m.cols.Covariates[j], p), false
				return r
			}
		}
	}
	return r
}

// buildKey encodes the key cells (see JoinKey) as an interned string; a problem is an empty
// or non-UTF-8 key cell.
func (b *rowBuilder) buildKey(rec []string) (string, string) {
	b.key.reset(len(b.m.keys))
	problem := ""
	for j, ci := range b.m.keys {
		b.key.b = append(b.key.b, rec[ci]...)
		if p := b.key.capCell(b.m.cols.Series[j]); p != "" && problem == "" {
			problem = p
		}
		b.key.end()
		if p := checkKeyCell(b.m.cols.Series[j], rec[ci]); p != "" && problem == "" {
			problem = p
		}
	}
	return intern(&b.keys, b.key.encoded()), problem
}

// intern returns k as a string, reusing an earlier copy: rows of one series share one key.
func intern(cache *map[string]string, k []byte) string {
	if *cache == nil || len(*cache) >= 1<<16 {
		*cache = make(map[string]string)
	}
	if s, ok := (*cache)[string(k)]; ok {
		return s
	}
	s := string(k)
	(*cache)[s] = s
	return s
}

// checkKeyCell returns the problem with one key cell, if any.
func checkKeyCell(col, s string) string {
	switch {
	case s == "":
		return fmt.Sprintf("column %q: empty series key", col)
	case !utf8.ValidString(s):
		return fmt.Sprintf("column %q: series key is not valid UTF-8", col)
	}
	return ""
}
