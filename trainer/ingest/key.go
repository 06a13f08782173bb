package ingest

import (
	"bytes"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"unicode/utf8"
)

// A series key is the tuple of a row's key cells (runconfig.Columns.Series, in order). Inside
// the trainer it travels as one string, Row.Key and series.Series.Key, encoded so that no two
// different tuples of the same length share it:
//
//	one key column:       the cell as it is                        A/1
//	several, plain cells: the cells joined with "/"                P001/D01
//	several, otherwise:   each cell quoted as Go's strconv.Quote,  "A/1"/"x"
//	                      joined with "/"
//
// A cell is plain when it contains neither '/' nor '"'. The encoding is injective for a fixed
// number of columns: a plain form holds no '"' while a quoted form starts with one, plain
// cells split back at every '/', and quoted cells are self-delimiting. Keys of plain cells
// are what earlier releases wrote (cells joined with "/"), so hash buckets and the series
// cells of earlier output tables stay the same for them. The output tables never hold the
// encoding: each key column has its own column there (trainer/tables).
const keySep = '/'

// ErrKey is returned by SplitKey for a string that is not a key of the given length.
var ErrKey = errors.New("not a series key")

// JoinKey encodes key cells as one series key (see the encoding above). Invalid UTF-8 in a cell
// is replaced by U+FFFD, as the readers report such keys.
func JoinKey(cells ...string) string {
	var k keyBuilder
	k.reset(len(cells))
	for _, c := range cells {
		k.b = append(k.b, c...)
		k.end()
	}
	return string(k.encoded())
}

// SplitKey decodes a series key of n columns into its cells; it fails with ErrKey when key is
// not the encoding of n cells.
func SplitKey(key string, n int) ([]string, error) {
	return AppendCells(make([]string, 0, n), key, n)
}

// AppendCells is SplitKey appending to dst; plain cells are substrings of key (no copy).
func AppendCells(dst []string, key string, n int) ([]string, error) {
	switch {
	case n < 1:
		return dst, fmt.Errorf("%w: %d key columns", ErrKey, n)
	case n == 1:
		return append(dst, key), nil
	case !strings.HasPrefix(key, `"`):
		if strings.Count(key, string(keySep)) != n-1 || strings.Contains(key, `"`) {
			return dst, fmt.Errorf("%w of %d columns: %q", ErrKey, n, key)
		}
		for range n - 1 {
			c, rest, _ := strings.Cut(key, string(keySep))
			dst, key = append(dst, c), rest
		}
		return append(dst, key), nil
	}
	orig, start := key, len(dst)
	for i := range n {
		q, err := strconv.QuotedPrefix(key)
		if err == nil && q[0] != '"' {
			err = ErrKey // a back-quoted or character literal
		}
		var c string
		if err == nil {
			c, err = strconv.Unquote(q)
		}
		if err != nil {
			return dst[:start], fmt.Errorf("%w of %d columns: %q", ErrKey, n, orig)
		}
		dst, key = append(dst, c), key[len(q):]
		if i < n-1 {
			if key == "" || key[0] != keySep {
				return dst[:start], fmt.Errorf("%w of %d columns: %q", ErrKey, n, orig)
			}
			key = key[1:]
		}
	}
	if key != "" || !needsQuotes(dst[start:]) {
		// Trailing text, or cells that would have been written plain: not this encoding.
		return dst[:start], fmt.Errorf("%w of %d columns: %q", ErrKey, n, orig)
	}
	return dst, nil
}

// needsQuotes reports whether cells take the quoted form.
func needsQuotes(cells []string) bool {
	for _, c := range cells {
		if strings.ContainsAny(c, `/"`) {
			return true
		}
	}
	return false
}

// keyBuilder assembles the key of one row from its cells without allocating in the common
// case: cells are appended to b (each closed by end), plain cells are already the encoding.
type keyBuilder struct {
	n       int // key columns
	b       []byte
	ends    []int // end of each cell in b
	special bool  // some cell holds '/' or '"'
	q       []byte
}

// reset starts a key of n cells.
func (k *keyBuilder) reset(n int) {
	k.n, k.b, k.ends, k.special = n, k.b[:0], k.ends[:0], false
}

// end closes the cell appended to b since the previous end and starts the next one, which is
// appended after a separator.
func (k *keyBuilder) end() {
	start := 0
	if len(k.ends) > 0 {
		start = k.ends[len(k.ends)-1] + 1
	}
	if bytes.ContainsAny(k.b[start:], `/"`) {
		k.special = true
	}
	k.ends = append(k.ends, len(k.b))
	if len(k.ends) < k.n {
		k.b = append(k.b, keySep)
	}
}

// encoded returns the key's encoding; valid only until the next reset.
func (k *keyBuilder) encoded() []byte {
	if k.n == 1 || !k.special {
		if !utf8.Valid(k.b) {
			return []byte(strings.ToValidUTF8(string(k.b), "\uFFFD"))
		}
		return k.b
	}
	k.q = k.q[:0]
	start := 0
	for i, e := range k.ends {
		if i > 0 {
			k.q = append(k.q, keySep)
		}
		k.q = strconv.AppendQuote(k.q, strings.ToValidUTF8(string(k.b[start:e]), "\uFFFD"))
		start = e + 1
	}
	return k.q
}

// MaxKeyCellBytes bounds one key cell. A longer cell is not an identifier but a mistake or an
// attack (a mapped free-text column, a 1 MiB field): it would be copied into every row of every
// output table. The series is rejected, naming the column, the length and the cell's start,
// and the key written to rejected.csv is cut to this length and marked with "...". 256 bytes
// holds any article number, GTIN or depot name we know of; our choice, no source.
const MaxKeyCellBytes = 256

// capCell cuts the cell appended to b since the previous end to MaxKeyCellBytes (on a rune
// boundary, then "...") when it is longer, and returns the problem naming column col, or "".
// Call it before end.
func (k *keyBuilder) capCell(col string) string {
	start := 0
	if len(k.ends) > 0 {
		start = k.ends[len(k.ends)-1] + 1
	}
	n := len(k.b) - start
	if n <= MaxKeyCellBytes {
		return ""
	}
	cut := start + MaxKeyCellBytes
	for cut > start && !utf8.RuneStart(k.b[cut]) {
		cut--
	}
	k.b = append(k.b[:cut], "..."...)
	show := k.b[start:min(len(k.b), start+40)]
	return fmt.Sprintf("column %q: series key is %d bytes, more than %d (it starts %q)", col, n, MaxKeyCellBytes, show)
}
