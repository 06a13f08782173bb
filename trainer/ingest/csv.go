package ingest

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"strings"
	"unicode/utf8"

	"almanac.dev/almanac/trainer/runconfig"
)

// MaxLineBytes is the longest CSV record ScanCSV accepts: a physical line, or the lines a quoted
// field with newlines spans. A longer one is broken input (it is almost always a file that is
// not line-oriented, and it bounds the reader's memory).
const MaxLineBytes = 1 << 20

// ScanCSV streams a CSV table with a header line from r and calls fn for every data row, in
// file order. object names r in messages. Columns are found by header name (exact, after
// trimming spaces and a UTF-8 byte-order mark); unmapped columns are ignored.
//
// Broken input (error wrapping ErrBrokenInput, naming object and line): an empty file, a header
// that is not valid UTF-8, lacks a mapped column or names one twice, a line longer than
// MaxLineBytes, a row whose field count differs from the header's, a quoting error. Per-row
// problems set Row.Problem (see Row). An error from fn stops the scan and is returned as is.
func ScanCSV(ctx context.Context, r io.Reader, object string, src runconfig.Source, fn func(Row) error) error {
	lim := &lineLimiter{r: r, max: MaxLineBytes}
	cr := csv.NewReader(lim)
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1 // checked here, for a clearer message
	head, err := cr.Read()
	if err == io.EOF {
		return brokenf("%s: empty file (no header line)", object)
	}
	if err != nil {
		return csvError(object, err)
	}
	head = append([]string(nil), head...)
	for i := range head {
		if !utf8.ValidString(head[i]) {
			return brokenf("%s line 1: header column %d is not valid UTF-8", object, i+1)
		}
		if strings.ContainsRune(head[i], 0) {
			// UTF-16 text without a byte-order mark is valid UTF-8 with a NUL after every ASCII
			// letter: the encoding is wrong, not the column names.
			return brokenf("%s line 1: header column %d holds NUL bytes: not UTF-8 text (UTF-16?)", object, i+1)
		}
		head[i] = strings.TrimSpace(strings.TrimPrefix(head[i], "\ufeff"))
	}
	m, err := mapColumns(src.Columns, head)
	if err != nil {
		return fmt.Errorf("%s line 1: %w: %w", object, err, ErrBrokenInput) // err may be ErrColumns
	}
	rb := rowBuilder{m: m, layout: src.DateLayout}
	for n := 0; ; n++ {
		if n%1024 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		rec, err := cr.Read()
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return csvError(object, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) != len(head) {
			return brokenf("%s line %d: %d fields, the header has %d", object, line, len(rec), len(head))
		}
		row := rb.build(rec)
		if row.Problem != "" {
			row.Problem = fmt.Sprintf("%s line %d: %s", object, line, row.Problem)
		}
		if err := fn(row); err != nil {
			return err
		}
	}
}

// csvError turns a reader error into broken input naming the line.
func csvError(object string, err error) error {
	var pe *csv.ParseError
	var le *lineTooLong
	switch {
	case errors.As(err, &le):
		return brokenf("%s line %d: a record longer than %d bytes (a quoted field over several lines counts whole)", object, le.line, MaxLineBytes)
	case errors.As(err, &pe):
		return brokenf("%s line %d: %v", object, pe.Line, pe.Err)
	}
	return fmt.Errorf("%s: %w", object, err) // a read error of the underlying stream
}

// lineLimiter passes reads through and fails once a record exceeds max bytes. A record is a
// physical line, or several when a quoted field holds newlines: quote characters toggle the
// quoted state (a doubled quote inside a quoted field toggles twice), and only a newline
// outside quotes ends the record, so a field split over many short lines is held to the same
// bound as a line. A stray quote in an unquoted field would mislead the count, but the CSV
// reader rejects that field anyway.
type lineLimiter struct {
	r      io.Reader
	max    int
	run    int  // bytes of the current record so far
	quoted bool // inside a quoted field
	line   int  // newlines seen
	start  int  // newlines seen before the current record began
	err    error
}

type lineTooLong struct{ line int }

func (e *lineTooLong) Error() string { return fmt.Sprintf("line %d too long", e.line) }

func (l *lineLimiter) Read(p []byte) (int, error) {
	if l.err != nil {
		return 0, l.err
	}
	n, err := l.r.Read(p)
	b := p[:n]
	for len(b) > 0 && l.run <= l.max {
		i := bytes.IndexAny(b, "\"\n")
		if i < 0 {
			l.run += len(b)
			break
		}
		l.run += i + 1
		if b[i] == '"' {
			l.quoted = !l.quoted
		} else {
			l.line++
			if !l.quoted {
				l.run, l.start = 0, l.line
			}
		}
		b = b[i+1:]
	}
	if l.run > l.max {
		l.err = &lineTooLong{line: l.start + 1}
		return n, l.err
	}
	return n, err
}
