package ingest

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"

	"almanac.dev/almanac/trainer/runconfig"
)

// demandRow is Fenwick Lane Provisions' weekly export as Parquet (invented data): string keys,
// a DATE column, an integer value and an optional covariate.
type demandRow struct {
	Depot string   `parquet:"depot"`
	Item  string   `parquet:"item"`
	Week  int32    `parquet:"week,date"`
	Units int64    `parquet:"units"`
	Promo *float64 `parquet:"promo,optional"`
	Note  string   `parquet:"comment"`
}

func days(t time.Time) int32 { return int32(t.Unix() / 86400) }

func writeParquet[T any](t testing.TB, rows []T, opts ...parquet.WriterOption) []byte {
	t.Helper()
	var buf bytes.Buffer
	w := parquet.NewGenericWriter[T](&buf, opts...)
	if _, err := w.Write(rows); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func fenwickParquet(t testing.TB, perGroup int64) []byte {
	zero, one := 0.0, 1.0
	monday := time.Date(2026, 10, 5, 0, 0, 0, 0, time.UTC)
	rows := []demandRow{
		{"north", "oat-flakes-1kg", days(monday), 31, &zero, ""},
		{"north", "oat-flakes-1kg", days(monday.AddDate(0, 0, 7)), 28, &one, "promo, end cap"},
		{"north", "oat-flakes-1kg", days(monday.AddDate(0, 0, 21)), 35, &zero, ""},
		{"harbour", "rye-loaf", days(monday), 12, nil, ""},
		{"harbour", "rye-loaf", days(monday.AddDate(0, 0, 7)), 14, &zero, ""},
	}
	return writeParquet(t, rows, parquet.MaxRowsPerRowGroup(perGroup))
}

func scanParquet(t *testing.T, b []byte, src runconfig.Source, g *GroupRange) ([]Row, error) {
	t.Helper()
	var rows []Row
	err := ScanParquet(context.Background(), bytes.NewReader(b), int64(len(b)), "mem://in/demand.parquet", src, g, func(r Row) error {
		rows = append(rows, r)
		return nil
	})
	return rows, err
}

// The same table read from CSV and from Parquet gives the same rows.
func TestScanParquetMatchesCSV(t *testing.T) {
	src := fenwickSource()
	want, err := scanAll(t, strings.Replace(fenwick, "14.5", "14", 1), src)
	if err != nil {
		t.Fatal(err)
	}
	got, err := scanParquet(t, fenwickParquet(t, 2), src, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(want) {
		t.Fatalf("%d rows, want %d", len(got), len(want))
	}
	for i := range want {
		w, g := want[i], got[i]
		if g.Key != w.Key || !g.Date.Equal(w.Date) || g.Value != w.Value || g.Problem != "" ||
			len(g.Covariates) != 1 || !sameFloat(g.Covariates[0], w.Covariates[0]) {
			t.Errorf("row %d: %+v, want %+v", i, g, w)
		}
	}
}

func sameFloat(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }

func TestRowGroupsAndRanges(t *testing.T) {
	b := fenwickParquet(t, 2)
	info, err := RowGroups(bytes.NewReader(b), int64(len(b)), "demand.parquet")
	if err != nil {
		t.Fatal(err)
	}
	if len(info) != 3 || info[0].Rows != 2 || info[1].Rows != 2 || info[2].Rows != 1 {
		t.Fatalf("row groups %+v, want 2+2+1 rows", info)
	}
	for i, g := range info {
		if g.Bytes <= 0 || g.Bytes > int64(len(b)) {
			t.Errorf("group %d: %d bytes of a %d-byte file", i, g.Bytes, len(b))
		}
	}
	rows, err := scanParquet(t, b, fenwickSource(), &GroupRange{From: 1, To: 3})
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 || rows[0].Value != 35 || rows[2].Key != "harbour/rye-loaf" || rows[2].Value != 14 {
		t.Errorf("groups [1,3): %+v", rows)
	}
	_, err = scanParquet(t, b, fenwickSource(), &GroupRange{From: 2, To: 4})
	if !errors.Is(err, ErrBrokenInput) || !strings.Contains(err.Error(), "outside") {
		t.Errorf("range past the end: %v", err)
	}
}

// Other column types: integer keys, TIMESTAMP(millis) dates, float values, and string dates and
// values parsed as in CSV.
func TestScanParquetColumnTypes(t *testing.T) {
	type tsRow struct {
		Store int32     `parquet:"store"`
		At    time.Time `parquet:"at,timestamp(millisecond)"`
		Kg    float32   `parquet:"kg"`
	}
	at := time.Date(2026, 11, 30, 6, 0, 0, 0, time.UTC)
	b := writeParquet(t, []tsRow{{7, at, 2.5}, {7, at.Add(time.Hour), 3}})
	src := runconfig.Source{Columns: runconfig.Columns{Series: []string{"store"}, Date: "at", Value: "kg"}, Frequency: "Hourly"}
	rows, err := scanParquet(t, b, src, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 2 || rows[0].Key != "7" || !rows[1].Date.Equal(at.Add(time.Hour)) || rows[0].Value != 2.5 {
		t.Errorf("rows %+v", rows)
	}

	type textRow struct {
		Item  string `parquet:"item"`
		Day   string `parquet:"day"`
		Units string `parquet:"units"`
	}
	b = writeParquet(t, []textRow{{"rye-loaf", "01/12/2026", "4"}, {"rye-loaf", "02/12/2026", "n/a"}})
	src = runconfig.Source{Columns: runconfig.Columns{Series: []string{"item"}, Date: "day", Value: "units"}, Frequency: "Daily", DateLayout: "02/01/2006"}
	rows, err = scanParquet(t, b, src, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !rows[0].Date.Equal(time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC)) || rows[0].Value != 4 || rows[0].Problem != "" {
		t.Errorf("row 0 %+v", rows[0])
	}
	if p := rows[1].Problem; !strings.Contains(p, "row group 0 row 1") || !strings.Contains(p, `"n/a" is not a number`) {
		t.Errorf("row 1 problem %q", p)
	}
}

// A storage error while reading pages (the footer read fine) is reported as such, not as a
// broken file.
func TestScanParquetStorageError(t *testing.T) {
	b := fenwickParquet(t, 10)
	reset := errors.New("connection reset")
	ra := failingReaderAt{b: b, err: reset}
	if _, err := RowGroups(ra, int64(len(b)), "s3://x/demand.parquet"); err != nil {
		t.Fatalf("footer should read: %v", err)
	}
	err := ScanParquet(context.Background(), ra, int64(len(b)), "s3://x/demand.parquet", fenwickSource(), nil, func(Row) error { return nil })
	if !errors.Is(err, reset) || errors.Is(err, ErrBrokenInput) {
		t.Errorf("err %v, want the storage error and not broken input", err)
	}
}

// failingReaderAt fails every read that starts in the first half of the file after the 4-byte
// magic number (the pages).
type failingReaderAt struct {
	b   []byte
	err error
}

func (f failingReaderAt) ReadAt(p []byte, off int64) (int, error) {
	if off >= 4 && off < int64(len(f.b))/2 {
		return 0, f.err
	}
	return bytes.NewReader(f.b).ReadAt(p, off)
}

// The footer walker accepts every footer parquet-go writes (here: several shapes) and its
// byte count matches the footer length.
func TestCheckThriftAcceptsRealFooters(t *testing.T) {
	type wide struct {
		A string   `parquet:"a,dict"`
		B *float64 `parquet:"b,optional"`
		C []int32  `parquet:"c,list"`
		D bool     `parquet:"d"`
	}
	x := 1.5
	files := [][]byte{fenwickParquet(t, 2), fenwickParquet(t, 100),
		writeParquet(t, []wide{{"a", &x, []int32{1, 2}, true}, {"b", nil, nil, false}})}
	for i, b := range files {
		n := int(binary.LittleEndian.Uint32(b[len(b)-8:]))
		footer := b[len(b)-8-n : len(b)-8]
		w := thriftWalker{b: footer}
		if err := w.structure(0); err != nil || w.i != n {
			t.Errorf("file %d: walked %d of %d footer bytes, err %v", i, w.i, n, err)
		}
	}
}

// checkPages refuses page headers whose sizes do not fit the chunk or exceed the limits; the
// headers are hand-encoded in the Thrift compact protocol (field header byte = delta<<4 | type,
// i32 = 5, zigzag varints).
func TestCheckPages(t *testing.T) {
	header := func(unc, comp int64) []byte {
		b := []byte{0x15, 0x00} // field 1 type: DATA_PAGE (0)
		b = append(b, 0x15)
		b = binary.AppendUvarint(b, uint64(unc)<<1)
		b = append(b, 0x15)
		b = binary.AppendUvarint(b, uint64(comp)<<1)
		return append(b, 0x00)
	}
	ok := append(header(8, 4), 1, 2, 3, 4)
	if err := checkPages(append(ok, ok...)); err != nil {
		t.Errorf("two good pages: %v", err)
	}
	for name, c := range map[string]struct {
		chunk []byte
		want  string
	}{
		"overrun":   {append(header(8, 40), 1, 2, 3, 4), "overruns"},
		"huge page": {append(header(1<<30, 4), 1, 2, 3, 4), "over the limits"},
		"no sizes":  {[]byte{0x15, 0x00, 0x00}, "no sizes"},
		"garbage":   {[]byte{0xff, 0xff}, "page header"},
	} {
		if err := checkPages(c.chunk); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want %q", name, err, c.want)
		}
	}
}
