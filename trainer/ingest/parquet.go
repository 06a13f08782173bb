package ingest

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/format"

	"almanac.dev/almanac/trainer/runconfig"
)

// parquetBatch is how many values are read from each column at a time.
const parquetBatch = 1024

// RowGroups returns the rows and compressed bytes of every row group of a Parquet object, from
// its footer alone. A file that is not Parquet is broken input.
func RowGroups(ra io.ReaderAt, size int64, object string) ([]GroupInfo, error) {
	f, _, err := openParquet(ra, size, object)
	if err != nil {
		return nil, err
	}
	md := f.Metadata()
	out := make([]GroupInfo, len(md.RowGroups))
	for i, rg := range md.RowGroups {
		b := rg.TotalCompressedSize
		if b == 0 {
			for _, c := range rg.Columns {
				b += c.MetaData.TotalCompressedSize
			}
		}
		out[i] = GroupInfo{Rows: rg.NumRows, Bytes: b}
	}
	return out, nil
}

// watchedReaderAt remembers the first real read error, so a storage failure is reported as
// such and not as a broken file (the Parquet library does not always wrap the errors it sees).
// A read outside the object (a corrupt offset) is refused without touching storage.
// It also serves reads from the column chunks loadChunks checked and keeps in memory.
type watchedReaderAt struct {
	ra     io.ReaderAt
	size   int64
	err    error
	chunks []span
}

// span is a byte range of the object held in memory.
type span struct {
	off int64
	b   []byte
}

var errOutside = errors.New("read outside the object (corrupt offset)")

func (w *watchedReaderAt) ReadAt(p []byte, off int64) (int, error) {
	if off < 0 || off > w.size {
		return 0, errOutside
	}
	for _, c := range w.chunks {
		if off >= c.off && off+int64(len(p)) <= c.off+int64(len(c.b)) {
			return copy(p, c.b[off-c.off:]), nil
		}
	}
	n, err := w.ra.ReadAt(p, off)
	if err != nil && err != io.EOF && w.err == nil {
		w.err = err
	}
	return n, err
}

// failure returns the storage error if there was one, else the broken-input error.
func (w *watchedReaderAt) failure(object string, broken error) error {
	if w.err != nil {
		return fmt.Errorf("%s: %w", object, w.err)
	}
	return broken
}

// OpenParquet opens a Parquet object from untrusted bytes: the footer length and its Thrift
// encoding are checked before parquet-go sees them, and library panics become errors. Every
// error wraps ErrBrokenInput and names object, except a read error of ra, which is returned as
// such. The output tables reader uses it too.
func OpenParquet(ra io.ReaderAt, size int64, object string) (*parquet.File, error) {
	f, _, err := openParquet(ra, size, object)
	return f, err
}

// Guard runs fn, a call into the Parquet library on untrusted bytes, and turns a panic into an
// error (the library panics on some corrupt pages and schemas).
func Guard(fn func() error) error { return guard(fn) }

func openParquet(ra io.ReaderAt, size int64, object string) (*parquet.File, *watchedReaderAt, error) {
	wr := &watchedReaderAt{ra: ra, size: size}
	if err := checkFooter(wr, size, object); err != nil {
		return nil, wr, err
	}
	var f *parquet.File
	err := guard(func() (err error) {
		f, err = parquet.OpenFile(wr, size, parquet.SkipPageIndex(true), parquet.SkipBloomFilters(true))
		return err
	})
	if err != nil {
		return nil, wr, wr.failure(object, brokenf("%s: not a readable Parquet file: %v", object, err))
	}
	return f, wr, nil
}

// guard runs fn, a call into the Parquet library on untrusted bytes, and turns a panic (the
// library panics on some corrupt metadata) into an error.
func guard(fn func() error) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("corrupt data (%v)", p)
		}
	}()
	return fn()
}

// loadChunks reads the given leaf columns' chunks of row group g into memory, one ranged read
// each (the reads parquet-go would make anyway), and checks their page headers (checkPages)
// before the library trusts them. Later reads inside those chunks are served from memory.
func (w *watchedReaderAt) loadChunks(md *format.FileMetaData, g int, leaves []int, object string) error {
	w.chunks = w.chunks[:0]
	if g >= len(md.RowGroups) {
		return brokenf("%s row group %d: not in the footer", object, g)
	}
	cols := md.RowGroups[g].Columns
	for _, leaf := range leaves {
		if leaf >= len(cols) {
			return brokenf("%s row group %d: column %d has no chunk", object, g, leaf)
		}
		m := cols[leaf].MetaData
		if m.Codec == format.Lz4 || m.Codec == format.Lz4Raw {
			// parquet-go v0.32.0 doubles its output buffer without bound on corrupt LZ4 data.
			return brokenf("%s row group %d column %d: %v compression is not supported (its decoder cannot bound memory on damaged data); write ZSTD, Snappy or gzip", object, g, leaf, m.Codec)
		}
		start := m.DataPageOffset
		if d := m.DictionaryPageOffset; d > 0 && d < start {
			start = d
		}
		n := m.TotalCompressedSize
		if start < 4 || n < 0 || start > w.size-n {
			return brokenf("%s row group %d column %d: chunk of %d bytes at %d lies outside the %d-byte file", object, g, leaf, n, start, w.size)
		}
		b := make([]byte, n)
		if _, err := w.ReadAt(b, start); err != nil && !(err == io.EOF && w.err == nil) {
			return w.failure(object, brokenf("%s row group %d column %d: %v", object, g, leaf, err))
		}
		if err := checkPages(b); err != nil {
			return brokenf("%s row group %d column %d: %v", object, g, leaf, err)
		}
		w.chunks = append(w.chunks, span{off: start, b: b})
	}
	return nil
}

// CheckPages checks the page headers of every column chunk of an opened Parquet file (see
// checkPages). ScanParquet does this row group by row group for the columns it reads; the output
// tables reader, which holds the whole file, calls it once.
func CheckPages(ra io.ReaderAt, f *parquet.File, object string) error {
	w := &watchedReaderAt{ra: ra, size: f.Size()}
	md := f.Metadata()
	for g, rg := range md.RowGroups {
		leaves := make([]int, len(rg.Columns))
		for i := range leaves {
			leaves[i] = i
		}
		if err := w.loadChunks(md, g, leaves, object); err != nil {
			return err
		}
	}
	return nil
}

// checkFooter checks the file's last 8 bytes (footer length and magic) and the footer's
// declared lengths (checkThrift) before the library trusts them: a corrupt length would
// otherwise make it allocate up to several GiB.
func checkFooter(wr *watchedReaderAt, size int64, object string) error {
	if size < 12 {
		return brokenf("%s: not a readable Parquet file (%d bytes)", object, size)
	}
	var tail [8]byte
	if _, err := wr.ReadAt(tail[:], size-8); err != nil && !(err == io.EOF && wr.err == nil) {
		return wr.failure(object, brokenf("%s: not a readable Parquet file: %v", object, err))
	}
	if m := string(tail[4:]); m != "PAR1" {
		return brokenf("%s: not a readable Parquet file (trailing magic %q, want \"PAR1\")", object, m)
	}
	n := int64(binary.LittleEndian.Uint32(tail[:4]))
	if n > size-12 {
		return brokenf("%s: not a readable Parquet file (footer of %d bytes in a %d-byte file)", object, n, size)
	}
	footer := make([]byte, n)
	if _, err := wr.ReadAt(footer, size-8-n); err != nil && !(err == io.EOF && wr.err == nil) {
		return wr.failure(object, brokenf("%s: not a readable Parquet file: %v", object, err))
	}
	if err := checkThrift(footer); err != nil {
		return brokenf("%s: not a readable Parquet file: %v", object, err)
	}
	return nil
}

// role is what a mapped column is used for.
type role uint8

const (
	roleKey role = iota
	roleDate
	roleValue
	roleCovariate
)

// pcol is one mapped Parquet column and how to turn its values into a Row's fields.
type pcol struct {
	name  string
	index int // leaf column index in the file
	kind  parquet.Kind
	text  bool          // BYTE_ARRAY read as text
	date  bool          // INT32 DATE
	unit  time.Duration // INT64 TIMESTAMP unit, 0 otherwise
	uint  bool          // unsigned integer logical type
	vals  []parquet.Value
	vr    parquet.ColumnChunkValueReader
}

// ScanParquet streams the rows of a Parquet object's row groups [groups.From, groups.To) (nil:
// all), reading only the mapped columns, and calls fn for each row in file order.
//
// Column types: keys are strings or integers; the date is a DATE, a TIMESTAMP (millis, micros
// or nanos) or a string parsed like CSV; values and covariates are INT32, INT64, FLOAT, DOUBLE
// or strings parsed like CSV. Columns must be flat (not lists) and may be optional: a null key,
// date or value is a row Problem, a null covariate is NaN. A Problem names the object, the row
// group and the row within it (both counted from 0).
//
// Broken input (error wrapping ErrBrokenInput, naming object and row group): not Parquet, a
// truncated or corrupt file or page, a missing or repeated mapped column, an unsupported type,
// a group range outside the file. A storage read error is returned as such.
func ScanParquet(ctx context.Context, ra io.ReaderAt, size int64, object string, src runconfig.Source, groups *GroupRange, fn func(Row) error) error {
	f, wr, err := openParquet(ra, size, object)
	if err != nil {
		return err
	}
	var cols []*pcol
	err = guard(func() (err error) {
		cols, err = parquetColumns(f.Schema(), src.Columns)
		return err
	})
	if err != nil {
		return fmt.Errorf("%s: %w: %w", object, err, ErrBrokenInput) // err may be ErrColumns
	}
	rgs := f.RowGroups()
	from, to := 0, len(rgs)
	if groups != nil {
		from, to = groups.From, groups.To
		if from < 0 || to > len(rgs) || from > to {
			return brokenf("%s: row groups [%d,%d) outside the file's %d", object, from, to, len(rgs))
		}
	}
	sc := parquetScan{src: src, cols: cols, md: f.Metadata()}
	for g := from; g < to; g++ {
		if err := sc.group(ctx, rgs[g], g, object, wr, fn); err != nil {
			return err
		}
	}
	return nil
}

// parquetColumns finds and checks the mapped columns; the order is keys, date, value, covariates.
func parquetColumns(s *parquet.Schema, c runconfig.Columns) ([]*pcol, error) {
	if len(c.Series) == 0 || c.Date == "" || c.Value == "" {
		return nil, fmt.Errorf("column mapping needs series, date and value columns")
	}
	var cols []*pcol
	var missing []string
	add := func(name string, r role) error {
		leaf, ok := s.Lookup(name)
		if !ok {
			missing = append(missing, fmt.Sprintf("%q", name))
			return nil
		}
		if leaf.MaxRepetitionLevel > 0 {
			return fmt.Errorf("column %q is repeated (a list); a flat column is needed", name)
		}
		pc, err := typeColumn(name, leaf, r)
		if err != nil {
			return err
		}
		cols = append(cols, pc)
		return nil
	}
	for _, k := range c.Series {
		if err := add(k, roleKey); err != nil {
			return nil, err
		}
	}
	if err := add(c.Date, roleDate); err != nil {
		return nil, err
	}
	if err := add(c.Value, roleValue); err != nil {
		return nil, err
	}
	for _, k := range c.Covariates {
		if err := add(k, roleCovariate); err != nil {
			return nil, err
		}
	}
	if len(missing) > 0 {
		var names []string
		for _, f := range s.Fields() {
			names = append(names, f.Name())
		}
		return nil, fmt.Errorf("missing column %s (the file has %s): %w", strings.Join(missing, ", "), quoteList(names, 20), ErrColumns)
	}
	return cols, nil
}

// typeColumn decides how a column's values are read for its role.
func typeColumn(name string, leaf parquet.LeafColumn, r role) (*pcol, error) {
	t := leaf.Node.Type()
	pc := &pcol{name: name, index: leaf.ColumnIndex, kind: t.Kind(), vals: make([]parquet.Value, parquetBatch)}
	var lt format.LogicalTypeValue
	if l := t.LogicalType(); l != nil {
		lt = l.Value
	}
	if _, dec := lt.(*format.DecimalType); dec {
		return nil, fmt.Errorf("column %q: DECIMAL is not supported; write it as DOUBLE", name)
	}
	if it, ok := lt.(*format.IntType); ok && !it.IsSigned {
		pc.uint = true
	}
	bad := func(want string) error {
		return fmt.Errorf("column %q has type %v; %s", name, t, want)
	}
	switch r {
	case roleKey:
		switch pc.kind {
		case parquet.ByteArray:
			pc.text = true
		case parquet.Int32, parquet.Int64:
		default:
			return nil, bad("a series key column must be a string or an integer")
		}
	case roleDate:
		switch {
		case pc.kind == parquet.ByteArray:
			pc.text = true
		case pc.kind == parquet.Int32 && isDate(lt):
			pc.date = true
		case pc.kind == parquet.Int64 && isTimestamp(lt):
			pc.unit = lt.(*format.TimestampType).Unit.Value.Duration()
		default:
			return nil, bad("the date column must be DATE, TIMESTAMP or a string")
		}
	case roleValue, roleCovariate:
		switch pc.kind {
		case parquet.ByteArray:
			pc.text = true
		case parquet.Int32, parquet.Int64, parquet.Float, parquet.Double:
		default:
			return nil, bad("a value or covariate column must be INT32, INT64, FLOAT, DOUBLE or a string")
		}
	}
	return pc, nil
}

func isDate(lt format.LogicalTypeValue) bool {
	_, ok := lt.(*format.DateType)
	return ok
}

func isTimestamp(lt format.LogicalTypeValue) bool {
	ts, ok := lt.(*format.TimestampType)
	return ok && ts.Unit.Value != nil
}

// parquetScan is the state of one ScanParquet call.
type parquetScan struct {
	src      runconfig.Source
	md       *format.FileMetaData
	cols     []*pcol
	keyCache map[string]string // interned key strings, reset when large
	keyBuf   keyBuilder
}

// group scans one row group.
func (sc *parquetScan) group(ctx context.Context, rg parquet.RowGroup, g int, object string, wr *watchedReaderAt, fn func(Row) error) error {
	leaves := make([]int, len(sc.cols))
	for i, c := range sc.cols {
		leaves[i] = c.index
	}
	if err := wr.loadChunks(sc.md, g, leaves, object); err != nil {
		return err
	}
	defer func() { wr.chunks = nil }()
	var total int64
	defer guard(func() error {
		for _, c := range sc.cols {
			if c.vr != nil {
				c.vr.Close()
				c.vr = nil
			}
		}
		return nil
	})
	err := guard(func() error {
		chunks := rg.ColumnChunks()
		for _, c := range sc.cols {
			if c.index >= len(chunks) {
				return fmt.Errorf("column %q has no chunk", c.name)
			}
			c.vr = parquet.NewColumnChunkValueReader(chunks[c.index])
		}
		total = rg.NumRows()
		return nil
	})
	if err != nil {
		return wr.failure(object, brokenf("%s row group %d: %v", object, g, err))
	}
	nk := len(sc.src.Columns.Series)
	ncov := len(sc.src.Columns.Covariates)
	var row int64
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		n, err := sc.fill(g, object)
		if err != nil {
			return wr.failure(object, err)
		}
		if n == 0 {
			break
		}
		if row+int64(n) > total {
			return brokenf("%s row group %d: more than the %d rows the footer declares", object, g, total)
		}
		for i := 0; i < n; i++ {
			r := sc.build(i, nk, ncov)
			if r.Problem != "" {
				r.Problem = fmt.Sprintf("%s row group %d row %d: %s", object, g, row, r.Problem)
			}
			if err := fn(r); err != nil {
				return err
			}
			row++
		}
	}
	if row != total {
		return brokenf("%s row group %d: %d rows read, the footer says %d", object, g, row, total)
	}
	return nil
}

// fill reads the next batch of values from every column and returns the batch length; the
// columns must agree.
func (sc *parquetScan) fill(g int, object string) (n int, err error) {
	for ci, c := range sc.cols {
		got := 0
		for got < parquetBatch {
			var k int
			var err error
			if perr := guard(func() error { k, err = c.vr.ReadValues(c.vals[got:]); return nil }); perr != nil {
				return 0, brokenf("%s row group %d column %q: %v", object, g, c.name, perr)
			}
			got += k
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				return 0, brokenf("%s row group %d column %q: %v", object, g, c.name, err)
			}
			if k == 0 {
				return 0, brokenf("%s row group %d column %q: no progress reading values", object, g, c.name)
			}
		}
		if ci == 0 {
			n = got
		} else if got != n {
			return 0, brokenf("%s row group %d: column %q has %d values where %q has %d", object, g, c.name, got, sc.cols[0].name, n)
		}
	}
	return n, nil
}

// build makes the Row of batch position i.
func (sc *parquetScan) build(i, nk, ncov int) Row {
	var r Row
	r.Key, r.Problem = sc.key(i, nk)
	if r.Problem != "" {
		return r
	}
	dc := sc.cols[nk]
	r.Date, r.Problem = dc.time(dc.vals[i], sc.src.DateLayout)
	if r.Problem != "" {
		return r
	}
	vc := sc.cols[nk+1]
	if r.Value, r.Problem = vc.number(vc.vals[i], false); r.Problem != "" {
		r.EmptyValue = r.Problem == emptyValue
		r.Problem = fmt.Sprintf("column %q: %s", vc.name, r.Problem)
		if !r.EmptyValue {
			return r
		}
	}
	if ncov > 0 {
		r.Covariates = make([]float64, ncov)
		for j := range ncov {
			cc := sc.cols[nk+2+j]
			var p string
			if r.Covariates[j], p = cc.number(cc.vals[i], true); p != "" {
				r.Problem, r.EmptyValue = fmt.Sprintf("column %q: %s", cc.name, p), false
				return r
			}
		}
	}
	return r
}

// key encodes the key columns of batch position i (see JoinKey), interning the result.
func (sc *parquetScan) key(i, nk int) (string, string) {
	k := &sc.keyBuf
	k.reset(nk)
	problem := ""
	for j := range nk {
		c := sc.cols[j]
		v := c.vals[i]
		switch {
		case v.IsNull():
			if problem == "" {
				problem = fmt.Sprintf("column %q: empty series key", c.name)
			}
		case c.text:
			if len(v.ByteArray()) == 0 && problem == "" {
				problem = fmt.Sprintf("column %q: empty series key", c.name)
			}
			if problem == "" && !utf8.Valid(v.ByteArray()) {
				problem = fmt.Sprintf("column %q: series key is not valid UTF-8", c.name)
			}
			k.b = append(k.b, v.ByteArray()...)
		case c.kind == parquet.Int32 && c.uint:
			k.b = strconv.AppendUint(k.b, uint64(v.Uint32()), 10)
		case c.kind == parquet.Int32:
			k.b = strconv.AppendInt(k.b, int64(v.Int32()), 10)
		case c.uint:
			k.b = strconv.AppendUint(k.b, v.Uint64(), 10)
		default:
			k.b = strconv.AppendInt(k.b, v.Int64(), 10)
		}
		if p := k.capCell(c.name); p != "" && problem == "" {
			problem = p
		}
		k.end()
	}
	return intern(&sc.keyCache, k.encoded()), problem
}

// time reads a date value.
func (c *pcol) time(v parquet.Value, layout string) (time.Time, string) {
	switch {
	case v.IsNull():
		return time.Time{}, "empty date"
	case c.text:
		t, err := ParseDate(string(v.ByteArray()), layout)
		if err != nil {
			return time.Time{}, err.Error()
		}
		return t, ""
	case c.date:
		return time.Unix(int64(v.Int32())*86400, 0).UTC(), ""
	}
	x := v.Int64()
	switch c.unit {
	case time.Millisecond:
		return time.UnixMilli(x).UTC(), ""
	case time.Microsecond:
		return time.UnixMicro(x).UTC(), ""
	}
	return time.Unix(0, x).UTC(), ""
}

// number reads a value or covariate; a null covariate is NaN.
func (c *pcol) number(v parquet.Value, covariate bool) (float64, string) {
	if v.IsNull() {
		if covariate {
			return math.NaN(), ""
		}
		return 0, emptyValue
	}
	var x float64
	switch {
	case c.text:
		if covariate {
			return parseCovariate(string(v.ByteArray()))
		}
		return parseValue(string(v.ByteArray()))
	case c.kind == parquet.Int32 && c.uint:
		x = float64(v.Uint32())
	case c.kind == parquet.Int32:
		x = float64(v.Int32())
	case c.kind == parquet.Int64 && c.uint:
		x = float64(v.Uint64())
	case c.kind == parquet.Int64:
		x = float64(v.Int64())
	case c.kind == parquet.Float:
		x = float64(v.Float())
	default:
		x = v.Double()
	}
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return 0, fmt.Sprintf("value %v is not finite", x)
	}
	return x, ""
}
