package ingest

import (
	"fmt"
	"math"
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
		return mapping{}, fmt.Errorf("missing column %s (the file has %s)", strings.Join(missing, ", "), quoteList(names, 20))
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

// rowBuilder turns the text cells of one row into a Row; CSV and string-typed Parquet
// columns share it.
type rowBuilder struct {
	m      mapping
	layout string
	key    strings.Builder
}

// build reads cells through cell(i) (ok false: a null cell) and returns the Row; Problem is
// set without a location, which the caller adds.
func (b *rowBuilder) build(cell func(i int) (string, bool)) Row {
	var r Row
	r.Key, r.Problem = b.buildKey(cell)
	if r.Problem != "" {
		return r
	}
	ds, ok := cell(b.m.date)
	if !ok {
		r.Problem = "empty date"
		return r
	}
	t, err := ParseDate(ds, b.layout)
	if err != nil {
		r.Problem = err.Error()
		return r
	}
	r.Date = t
	vs, ok := cell(b.m.value)
	if !ok {
		r.Problem = "empty value"
		return r
	}
	if r.Value, r.Problem = parseValue(vs); r.Problem != "" {
		r.Problem = fmt.Sprintf("column %q: %s", b.m.cols.Value, r.Problem)
		return r
	}
	if len(b.m.covs) > 0 {
		r.Covariates = make([]float64, len(b.m.covs))
		for j, ci := range b.m.covs {
			s, ok := cell(ci)
			if !ok {
				r.Covariates[j] = math.NaN()
				continue
			}
			var p string
			if r.Covariates[j], p = parseCovariate(s); p != "" {
				r.Problem = fmt.Sprintf("column %q: %s", b.m.cols.Covariates[j], p)
				return r
			}
		}
	}
	return r
}

// buildKey joins the key cells; a problem is an empty or non-UTF-8 key cell.
func (b *rowBuilder) buildKey(cell func(i int) (string, bool)) (string, string) {
	if len(b.m.keys) == 1 {
		s, ok := cell(b.m.keys[0])
		return checkKeyCell(b.m.cols.Series[0], s, ok)
	}
	b.key.Reset()
	problem := ""
	for j, ci := range b.m.keys {
		s, ok := cell(ci)
		s, p := checkKeyCell(b.m.cols.Series[j], s, ok)
		if p != "" && problem == "" {
			problem = p
		}
		if j > 0 {
			b.key.WriteString(KeySeparator)
		}
		b.key.WriteString(s)
	}
	return b.key.String(), problem
}

func checkKeyCell(col, s string, ok bool) (string, string) {
	switch {
	case !ok || s == "":
		return s, fmt.Sprintf("column %q: empty series key", col)
	case !utf8.ValidString(s):
		return strings.ToValidUTF8(s, "\uFFFD"), fmt.Sprintf("column %q: series key is not valid UTF-8", col)
	}
	return s, ""
}
