// Package tables writes and reads the trainer's per-unit output tables (forecasts, models,
// evaluation, rejected) as CSV or Parquet.
//
// Both formats hold the same columns with the same names; CSV keeps the documented column
// order, Parquet lists columns by name (the library orders a group's fields alphabetically),
// and readers find columns by name in either. Writers are deterministic: the same rows give
// the same bytes, so a unit rewritten after a crash is identical. In CSV, floats are written
// with strconv 'g' -1 (NaN as "NaN", infinities as "+Inf"/"-Inf"), times as RFC 3339 in UTC,
// and an absent optional value as an empty cell.
package tables

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/compress/zstd"

	"almanac.dev/almanac/trainer/ingest"
)

// Formats a table can be written in.
const (
	CSV     = "csv"
	Parquet = "parquet"
)

// kind is a column's value type.
type kind uint8

const (
	text      kind = iota // UTF-8 string
	integer               // int64
	number                // float64
	optNumber             // float64 or absent
	instant               // time, microsecond precision in Parquet
	flag                  // bool
)

type column struct {
	name string
	kind kind
}

// cell is one value; only the field of the column's kind is used.
type cell struct {
	s    string
	n    int64
	f    float64
	t    time.Time
	b    bool
	null bool // optNumber only
}

// grid is a table in memory: its columns and rows of cells in column order.
type grid struct {
	cols []column
	rows [][]cell
}

// kindOf tells a reader the kind of a column by name; ok false means the column is unknown.
type kindOf func(name string) (kind, bool)

// write encodes g in format.
func write(w io.Writer, format string, g grid) error {
	switch format {
	case CSV:
		return writeCSV(w, g)
	case Parquet:
		return writeParquet(w, g)
	}
	return fmt.Errorf("format %q is not %s or %s", format, CSV, Parquet)
}

// read decodes a table; name is used in errors.
func read(r io.Reader, format, name string, kinds kindOf) (grid, error) {
	var g grid
	var err error
	switch format {
	case CSV:
		g, err = readCSV(r, kinds)
	case Parquet:
		g, err = readParquet(r, kinds)
	default:
		err = fmt.Errorf("format %q is not %s or %s", format, CSV, Parquet)
	}
	if err != nil {
		return grid{}, fmt.Errorf("tables: %s (%s): %w", name, format, err)
	}
	return g, nil
}

// neutralQuote is prefixed, in CSV only, to a text cell that a spreadsheet would run as a
// formula: one starting with = + - @, a tab or a carriage return (OWASP, "CSV Injection"), and
// to one already starting with the quote, so that parseCell can drop exactly one and read every
// text back as written. Parquet cells are typed and stored as they are.
const neutralQuote = '\''

// neutralise returns s as a CSV text cell (see neutralQuote).
func neutralise(s string) string {
	if s != "" && strings.IndexByte("=+-@\t\r'", s[0]) >= 0 {
		return string(neutralQuote) + s
	}
	return s
}

func formatCell(c cell, k kind) string {
	switch k {
	case text:
		return neutralise(c.s)
	case integer:
		return strconv.FormatInt(c.n, 10)
	case number:
		return strconv.FormatFloat(c.f, 'g', -1, 64)
	case optNumber:
		if c.null {
			return ""
		}
		return strconv.FormatFloat(c.f, 'g', -1, 64)
	case instant:
		return c.t.UTC().Format(time.RFC3339Nano)
	case flag:
		return strconv.FormatBool(c.b)
	}
	panic("tables: unknown kind")
}

func parseCell(s string, k kind) (cell, error) {
	var c cell
	var err error
	switch k {
	case text:
		c.s = strings.TrimPrefix(s, string(neutralQuote))
	case integer:
		c.n, err = strconv.ParseInt(s, 10, 64)
	case number:
		c.f, err = strconv.ParseFloat(s, 64)
	case optNumber:
		if s == "" {
			c.null = true
		} else {
			c.f, err = strconv.ParseFloat(s, 64)
		}
	case instant:
		c.t, err = time.Parse(time.RFC3339Nano, s)
		c.t = c.t.UTC()
	case flag:
		c.b, err = strconv.ParseBool(s)
	}
	if err != nil {
		return cell{}, fmt.Errorf("%q: %v", s, errors.Unwrap(err))
	}
	return c, nil
}

func writeCSV(w io.Writer, g grid) error {
	cw := csv.NewWriter(w)
	rec := make([]string, len(g.cols))
	for i, c := range g.cols {
		rec[i] = c.name
	}
	if err := cw.Write(rec); err != nil {
		return err
	}
	for _, row := range g.rows {
		for i, c := range g.cols {
			rec[i] = formatCell(row[i], c.kind)
		}
		if err := cw.Write(rec); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

func readCSV(r io.Reader, kinds kindOf) (grid, error) {
	cr := csv.NewReader(r)
	cr.ReuseRecord = true
	head, err := cr.Read()
	if err == io.EOF {
		return grid{}, errors.New("empty file (no header line)")
	}
	if err != nil {
		return grid{}, err
	}
	var g grid
	seen := map[string]bool{}
	for _, name := range head {
		k, ok := kinds(name)
		if !ok || seen[name] {
			return grid{}, fmt.Errorf("line 1: unexpected or repeated column %q", name)
		}
		seen[name] = true
		g.cols = append(g.cols, column{name, k})
	}
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			return g, nil
		}
		if err != nil {
			return grid{}, err
		}
		line, _ := cr.FieldPos(0)
		row := make([]cell, len(g.cols))
		for i, c := range g.cols {
			if row[i], err = parseCell(rec[i], c.kind); err != nil {
				return grid{}, fmt.Errorf("line %d column %q: %v", line, c.name, err)
			}
		}
		g.rows = append(g.rows, row)
	}
}

func parquetNode(k kind) parquet.Node {
	switch k {
	case text:
		return parquet.String()
	case integer:
		return parquet.Int(64)
	case number:
		return parquet.Leaf(parquet.DoubleType)
	case optNumber:
		return parquet.Optional(parquet.Leaf(parquet.DoubleType))
	case instant:
		return parquet.Timestamp(parquet.Microsecond)
	case flag:
		return parquet.Leaf(parquet.BooleanType)
	}
	panic("tables: unknown kind")
}

func writeParquet(w io.Writer, g grid) error {
	group := parquet.Group{}
	for _, c := range g.cols {
		group[c.name] = parquetNode(c.kind)
	}
	schema := parquet.NewSchema("table", group)
	// Column index in the file for each of g's columns.
	at := make([]int, len(g.cols))
	for i, c := range g.cols {
		leaf, ok := schema.Lookup(c.name)
		if !ok {
			panic("tables: column missing from its own schema: " + c.name)
		}
		at[i] = leaf.ColumnIndex
	}
	pw := parquet.NewWriter(w, schema, parquet.Compression(&zstd.Codec{}), parquet.CreatedBy("almanac", "", ""))
	const batch = 1024
	buf := make([]parquet.Row, 0, batch)
	flush := func() error {
		_, err := pw.WriteRows(buf)
		buf = buf[:0]
		return err
	}
	for _, row := range g.rows {
		pr := make(parquet.Row, len(g.cols))
		for i, c := range g.cols {
			pr[at[i]] = parquetValue(row[i], c.kind).Level(0, defLevel(row[i], c.kind), at[i])
		}
		buf = append(buf, pr)
		if len(buf) == batch {
			if err := flush(); err != nil {
				return err
			}
		}
	}
	if err := flush(); err != nil {
		return err
	}
	return pw.Close()
}

func defLevel(c cell, k kind) int {
	if k == optNumber && !c.null {
		return 1
	}
	return 0
}

func parquetValue(c cell, k kind) parquet.Value {
	switch k {
	case text:
		return parquet.ByteArrayValue([]byte(c.s))
	case integer:
		return parquet.Int64Value(c.n)
	case number:
		return parquet.DoubleValue(c.f)
	case optNumber:
		if c.null {
			return parquet.NullValue()
		}
		return parquet.DoubleValue(c.f)
	case instant:
		return parquet.Int64Value(c.t.UnixMicro())
	case flag:
		return parquet.BooleanValue(c.b)
	}
	panic("tables: unknown kind")
}

// readParquet reads a whole Parquet table into memory (the per-unit tables are small). The
// bytes are checked as untrusted input (ingest.OpenParquet, ingest.CheckPages) first: a stored
// file may have been damaged, and that must be an error, not a crash.
func readParquet(r io.Reader, kinds kindOf) (grid, error) {
	b, err := io.ReadAll(r)
	if err != nil {
		return grid{}, err
	}
	f, err := ingest.OpenParquet(bytes.NewReader(b), int64(len(b)), "data")
	if err != nil {
		return grid{}, err
	}
	if err := ingest.CheckPages(bytes.NewReader(b), f, "data"); err != nil {
		return grid{}, err
	}
	var g grid
	err = ingest.Guard(func() error { return readGrid(f, &g, kinds) })
	return g, err
}

func readGrid(f *parquet.File, g *grid, kinds kindOf) error {
	for _, field := range f.Schema().Fields() {
		k, ok := kinds(field.Name())
		if !ok {
			return fmt.Errorf("unexpected column %q", field.Name())
		}
		if !field.Leaf() || field.Type().Kind() != parquetNode(k).Type().Kind() || field.Optional() != (k == optNumber) {
			return fmt.Errorf("column %q: type %v, want %v", field.Name(), field.Type(), parquetNode(k).Type())
		}
		g.cols = append(g.cols, column{field.Name(), k})
	}
	for gi, rg := range f.RowGroups() {
		if err := readGroup(rg, g); err != nil {
			return fmt.Errorf("row group %d: %w", gi, err)
		}
	}
	return nil
}

func readGroup(rg parquet.RowGroup, g *grid) error {
	rows := rg.Rows()
	defer rows.Close()
	buf := make([]parquet.Row, 256)
	for {
		n, err := rows.ReadRows(buf)
		for _, pr := range buf[:n] {
			row := make([]cell, len(g.cols))
			for _, v := range pr {
				i := v.Column()
				if i < 0 || i >= len(row) {
					return fmt.Errorf("value for column %d outside the schema", i)
				}
				row[i] = cellOf(v, g.cols[i].kind)
			}
			g.rows = append(g.rows, row)
		}
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
	}
}

func cellOf(v parquet.Value, k kind) cell {
	switch k {
	case text:
		return cell{s: string(v.ByteArray())}
	case integer:
		return cell{n: v.Int64()}
	case number:
		return cell{f: v.Double()}
	case optNumber:
		if v.IsNull() {
			return cell{null: true, f: math.NaN()}
		}
		return cell{f: v.Double()}
	case instant:
		return cell{t: time.UnixMicro(v.Int64()).UTC()}
	case flag:
		return cell{b: v.Boolean()}
	}
	panic("tables: unknown kind")
}

// need checks that every required column is present and returns each one's position.
func (g grid) need(names ...string) (map[string]int, error) {
	pos := make(map[string]int, len(g.cols))
	for i, c := range g.cols {
		pos[c.name] = i
	}
	for _, n := range names {
		if _, ok := pos[n]; !ok {
			return nil, fmt.Errorf("missing column %q", n)
		}
	}
	return pos, nil
}
