package ingest

// The bad-input table: every kind of bad input the trainer's readers meet, each with its
// defined outcome. Two outcomes exist (see the package doc):
//
//   - broken: the file cannot be read as a table; the scan returns an error wrapping
//     ErrBrokenInput that names the object and the line or row group. The pipeline fails the
//     unit with the broken-input exit code; other units are untouched.
//   - per series: the file is read; each series is kept (possibly with a note) or rejected
//     with a reason naming the object and line, and the other series carry on.
//
// The rules for grid, duplicates, future rows, gaps and short series are the Collector's; the
// rules for negative, constant and all-zero series are series.Clean's (common practice, see
// its doc comment).

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/compress/lz4"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
)

// badNow is the run's clock in the table: 2026-12-02, a Wednesday.
var badNow = time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC)

const header = "depot,item,day,units\n"

// daily is the table's default source: Fenwick Lane Provisions' daily depot sales (invented).
func daily() runconfig.Source {
	return runconfig.Source{
		Format:      "csv",
		Columns:     runconfig.Columns{Series: []string{"depot", "item"}, Date: "day", Value: "units"},
		Frequency:   "Daily",
		NonNegative: true,
	}
}

// good is a healthy series that must survive next to every bad one.
const good = "north,oat-flakes-1kg,2026-11-01,5\nnorth,oat-flakes-1kg,2026-11-02,6\nnorth,oat-flakes-1kg,2026-11-03,4\n"

const goodKey = "north/oat-flakes-1kg"

type badCase struct {
	name string // case / outcome, in words
	csv  string // CSV input, or
	pq   func(t *testing.T) []byte
	src  func(runconfig.Source) runconfig.Source
	// noClock runs the Collector with a zero now (no future check).
	noClock bool

	broken []string          // broken: substrings of the error (object and line or group)
	keep   []string          // per series: keys kept, in order
	reject map[string]string // per series: key -> substring of the reason
	note   map[string]string // kept key -> substring of a Collector note
	clean  map[string]string // kept key -> substring of a series.Clean note
}

func badCases() []badCase {
	big := strings.Repeat("x", 10<<20)
	longCell := strings.Repeat("x\n", 450<<10) // 900 KiB over 460800 lines, under MaxLineBytes
	return []badCase{
		{name: "missing value column / broken at line 1, names the column and lists the file's",
			csv: "depot,item,day,qty\n" + good, broken: []string{"line 1", `missing column "units"`, `"qty"`}},
		{name: "header missing (first line is data) / broken at line 1",
			csv: good, broken: []string{"line 1", "missing column"}},
		{name: "extra unmapped columns / ignored, series kept",
			csv: "region,depot,item,day,units,colour\n" +
				"r1,north,oat-flakes-1kg,2026-11-01,5,red\nr1,north,oat-flakes-1kg,2026-11-02,6,blue\n",
			keep: []string{goodKey}},
		{name: "mapped column named twice in the header / broken at line 1",
			csv: "depot,item,day,units,units\n", broken: []string{"line 1", "named twice"}},
		{name: "empty file / broken: no header line",
			csv: "", broken: []string{"empty file"}},
		{name: "header only / no series, no error",
			csv: header},
		{name: "row with too few fields / broken at that line",
			csv: header + good + "south,kippers,2026-11-01\n", broken: []string{"line 5", "3 fields, the header has 4"}},
		{name: "bare quote inside a field / broken at that line",
			csv: header + "south,kip\"pers,2026-11-01,3\n", broken: []string{"line 2", "quote"}},
		{name: "value is text (wrong type) / series rejected naming object, line and column",
			csv:    header + good + "south,kippers,2026-11-01,3\nsouth,kippers,2026-11-02,twelve\n",
			keep:   []string{goodKey},
			reject: map[string]string{"south/kippers": `demand.csv line 6: column "units": value "twelve" is not a number`}},
		{name: "unparsable date / series rejected naming the line",
			csv:    header + good + "south,kippers,2026-13-01,3\n",
			keep:   []string{goodKey},
			reject: map[string]string{"south/kippers": `line 5: date "2026-13-01" is not ISO 8601`}},
		{name: "mixed date layouts (ISO default, one row d/m/y) / series rejected at the odd row",
			csv:    header + good + "south,kippers,2026-11-01,3\nsouth,kippers,02/11/2026,4\n",
			keep:   []string{goodKey},
			reject: map[string]string{"south/kippers": `line 6: date "02/11/2026" is not ISO 8601`}},
		{name: "mixed date layouts (layout d/m/y configured, one row ISO) / series rejected at the ISO row",
			csv:    header + "south,kippers,01/11/2026,3\nsouth,kippers,2026-11-02,4\nnorth,rye-loaf,01/11/2026,1\nnorth,rye-loaf,02/11/2026,2\n",
			src:    func(s runconfig.Source) runconfig.Source { s.DateLayout = "02/01/2006"; return s },
			keep:   []string{"north/rye-loaf"},
			reject: map[string]string{"south/kippers": `line 3: date "2026-11-02" does not match layout "02/01/2006"`}},
		{name: "identical duplicate (series, date) rows / one kept, noted",
			csv: header + good + "north,oat-flakes-1kg,2026-11-02,6\n", keep: []string{goodKey},
			note: map[string]string{goodKey: "dropped 1 identical duplicate rows"}},
		{name: "duplicate (series, date) rows with different values / series rejected naming the period and values",
			csv:    header + good + "south,kippers,2026-11-01,3\nsouth,kippers,2026-11-02,4\nsouth,kippers,2026-11-01,5\n",
			keep:   []string{goodKey},
			reject: map[string]string{"south/kippers": "two rows for period 2026-11-01T00:00:00Z with different values (value 3 and value 5)"}},
		{name: "NaN value / series rejected",
			csv: header + good + "south,kippers,2026-11-01,NaN\nsouth,kippers,2026-11-02,1\n", keep: []string{goodKey},
			reject: map[string]string{"south/kippers": `line 5: column "units": value "NaN" is not finite`}},
		{name: "infinite value / series rejected",
			csv: header + good + "south,kippers,2026-11-01,-Inf\nsouth,kippers,2026-11-02,1\n", keep: []string{goodKey},
			reject: map[string]string{"south/kippers": `value "-Inf" is not finite`}},
		{name: "value out of float64 range / series rejected",
			csv: header + good + "south,kippers,2026-11-01,1e400\n", keep: []string{goodKey},
			reject: map[string]string{"south/kippers": `value "1e400" is out of range`}},
		{name: "empty value / series rejected",
			csv: header + good + "south,kippers,2026-11-01,\nsouth,kippers,2026-11-02,1\n", keep: []string{goodKey},
			reject: map[string]string{"south/kippers": `line 5: column "units": empty value`}},
		{name: "empty series key / rows rejected under the empty key",
			csv: header + good + ",kippers,2026-11-01,1\n", keep: []string{goodKey},
			reject: map[string]string{"/kippers": `line 5: column "depot": empty series key`}},
		{name: "negative demand with nonNegative / kept; series.Clean sets it to 0 with a note",
			csv:  header + "south,kippers,2026-11-01,3\nsouth,kippers,2026-11-02,-2\nsouth,kippers,2026-11-03,4\n",
			keep: []string{"south/kippers"}, clean: map[string]string{"south/kippers": "set 1 negative values to 0"}},
		{name: "daily timestamp at 12:00 (off the grid) / series rejected naming the rule",
			csv: header + good + "south,kippers,2026-11-01T12:00:00Z,3\nsouth,kippers,2026-11-02,1\n", keep: []string{goodKey},
			reject: map[string]string{"south/kippers": "2026-11-01T12:00:00Z is off the daily grid: daily periods start at 00:00"}},
		{name: "weekly row on a Tuesday with a Monday anchor / series rejected",
			csv: header + "south,kippers,2026-11-02,3\nsouth,kippers,2026-11-10,4\nnorth,rye-loaf,2026-11-02,1\nnorth,rye-loaf,2026-11-09,2\n",
			src: func(s runconfig.Source) runconfig.Source {
				s.Frequency, s.WeekAnchor = "Weekly", "Monday"
				return s
			},
			keep:   []string{"north/rye-loaf"},
			reject: map[string]string{"south/kippers": "2026-11-10T00:00:00Z is off the weekly grid: weekly periods start at 00:00 on Monday"}},
		{name: "monthly row on the 15th / series rejected",
			csv:    header + "south,kippers,2026-09-01,3\nsouth,kippers,2026-10-15,4\nnorth,rye-loaf,2026-09-01,1\nnorth,rye-loaf,2026-10-01,2\n",
			src:    func(s runconfig.Source) runconfig.Source { s.Frequency = "Monthly"; return s },
			keep:   []string{"north/rye-loaf"},
			reject: map[string]string{"south/kippers": "2026-10-15T00:00:00Z is off the monthly grid"}},
		{name: "gaps / kept with NaN and a note; series.Clean interpolates",
			csv:  header + "south,kippers,2026-11-01,3\nsouth,kippers,2026-11-02,4\nsouth,kippers,2026-11-04,8\nsouth,kippers,2026-11-05,8\n",
			keep: []string{"south/kippers"}, note: map[string]string{"south/kippers": "1 missing periods"},
			clean: map[string]string{"south/kippers": "filled 1 interior missing values"}},
		{name: "series with one point / rejected (every model needs 2)",
			csv: header + good + "south,kippers,2026-11-01,3\n", keep: []string{goodKey},
			reject: map[string]string{"south/kippers": "1 observed periods, at least 2 are needed"}},
		{name: "constant series / kept; series.Clean notes it and selection skips the backtest",
			csv:  header + "south,kippers,2026-11-01,7\nsouth,kippers,2026-11-02,7\nsouth,kippers,2026-11-03,7\n",
			keep: []string{"south/kippers"}, clean: map[string]string{"south/kippers": "constant series (every value 7)"}},
		{name: "all-zero series / kept; series.Clean notes it",
			csv:  header + "south,kippers,2026-11-01,0\nsouth,kippers,2026-11-02,0\nsouth,kippers,2026-11-03,0\n",
			keep: []string{"south/kippers"}, clean: map[string]string{"south/kippers": "all values are zero"}},
		{name: "future-dated rows / dropped with a note, history kept",
			csv: header + good + "north,oat-flakes-1kg,2026-12-03,9\nnorth,oat-flakes-1kg,2027-01-01,9\n", keep: []string{goodKey},
			note: map[string]string{goodKey: "dropped 2 rows dated after 2026-12-02T09:00:00Z (first 2026-12-03T00:00:00Z)"}},
		{name: "stray year-4999 row in a daily file, run without a clock / rejected: span too large",
			csv: header + good + "south,kippers,2026-11-01,1\nsouth,kippers,4999-11-01,1\n", keep: []string{goodKey},
			noClock: true,
			reject:  map[string]string{"south/kippers": "more than the 1000000 allowed"}},
		{name: "non-UTF-8 bytes in the header / broken at line 1",
			csv: "depot,it\xffem,day,units\n" + good, broken: []string{"line 1", "not valid UTF-8"}},
		{name: "non-UTF-8 bytes in a key / that series rejected, key shown with U+FFFD",
			csv: header + good + "south,kip\xffpers,2026-11-01,1\n", keep: []string{goodKey},
			reject: map[string]string{"south/kip\uFFFDpers": "series key is not valid UTF-8"}},
		{name: "a 10 MB line / broken at that line, memory bounded by MaxLineBytes",
			csv: header + good + "south,kippers,2026-11-01," + big + "\n", broken: []string{"line 5", "longer than 1048576 bytes"}},
		{name: "a 10 MB quoted field split over short lines (issue 18 case 6) / broken at the line it starts, bounded like a line",
			csv:    header + good + "south,\"" + strings.Repeat("kippers\n", 10<<20/8) + "\",2026-11-01,1\n",
			broken: []string{"line 5", "a record longer than 1048576 bytes"}},
		{name: "a 900 KiB quoted key with doubled quotes over short lines / read within the record limit, then rejected: a key cell is capped at 256 bytes",
			csv: header + "south,\"say \"\"hi\"\"\n" + longCell + "\",2026-11-01,1\n" +
				"south,\"say \"\"hi\"\"\n" + longCell + "\",2026-11-02,2\n",
			reject: map[string]string{strconv.Quote("south") + "/" + strconv.Quote(("say \"hi\"\n" + longCell)[:MaxKeyCellBytes]+"..."): `line 2: column "item": series key is 921609 bytes, more than 256 (it starts "say \"hi\"\nx\nx`}},
		{name: "path traversal in a series key / kept as data: keys never become storage paths",
			csv: header + "../../etc,passwd,2026-11-01,1\n../../etc,passwd,2026-11-02,2\n", keep: []string{`"../../etc"/"passwd"`}},
		{name: "key cells whose join with / would collide (depot A/1 item x, depot A item 1/x) / two series, both kept",
			csv:  header + "A/1,x,2026-11-01,1\nA/1,x,2026-11-02,2\nA,1/x,2026-11-01,7\nA,1/x,2026-11-02,8\n",
			keep: []string{`"A"/"1/x"`, `"A/1"/"x"`}},
		{name: "key cells with quotes, commas and a newline / each its own series",
			csv: header + "\"say \"\"hi\"\"\",\"a,b\nc\",2026-11-01,1\n\"say \"\"hi\"\"\",\"a,b\nc\",2026-11-02,2\n" +
				"say hi,\"a,b\",2026-11-01,3\nsay hi,\"a,b\",2026-11-02,4\n",
			keep: []string{`"say \"hi\""/"a,b\nc"`, "say hi/a,b"}},
		{name: "Parquet: truncated file / broken, names the object",
			pq:     func(t *testing.T) []byte { b := fenwickParquet(t, 2); return b[:len(b)-7] },
			src:    func(runconfig.Source) runconfig.Source { return fenwickSource() },
			broken: []string{"demand.csv", "not a readable Parquet file"}},
		{name: "Parquet: footer length larger than the file / broken before anything is allocated",
			pq: func(t *testing.T) []byte {
				b := bytes.Clone(fenwickParquet(t, 2))
				binary.LittleEndian.PutUint32(b[len(b)-8:], 1<<31)
				return b
			},
			broken: []string{"footer of 2147483648 bytes"}},
		{name: "Parquet: footer declaring a list of a billion row groups / broken, no allocation",
			pq: func(t *testing.T) []byte {
				// FileMetaData with field 4 (row_groups) as a list of 10^9 structs, then the
				// footer length and magic.
				footer := []byte{0x49, 0xfc}
				footer = binary.AppendUvarint(footer, 1_000_000_000)
				footer = append(footer, 0x00)
				b := append([]byte("PAR1"), footer...)
				b = binary.LittleEndian.AppendUint32(b, uint32(len(footer)))
				return append(b, "PAR1"...)
			},
			broken: []string{"list of 1000000000 elements"}},
		{name: "Parquet: LZ4-compressed columns / broken: refused, its decoder cannot bound memory on damage",
			pq: func(t *testing.T) []byte {
				type r struct {
					Depot string `parquet:"depot"`
					Item  string `parquet:"item"`
					Day   string `parquet:"day"`
					Units int64  `parquet:"units"`
				}
				return writeParquet(t, []r{{"north", "oat", "2026-11-01", 1}}, parquet.Compression(&lz4.Codec{}))
			},
			broken: []string{"row group 0", "LZ4_RAW compression is not supported"}},
		{name: "Parquet: a CSV file given as Parquet / broken, names the object",
			pq:     func(*testing.T) []byte { return []byte(header + good) },
			broken: []string{"demand.csv", "not a readable Parquet file"}},
		{name: "Parquet: corrupt page header in row group 1 / broken, names the row group",
			pq: corruptGroup(1), src: func(runconfig.Source) runconfig.Source { return fenwickSource() },
			broken: []string{"demand.csv row group 1"}},
		{name: "Parquet: value column of type BOOLEAN (wrong type) / broken, names the column",
			pq: func(t *testing.T) []byte {
				type r struct {
					Depot string `parquet:"depot"`
					Item  string `parquet:"item"`
					Day   string `parquet:"day"`
					Units bool   `parquet:"units"`
				}
				return writeParquet(t, []r{{"north", "oat", "2026-11-01", true}})
			},
			broken: []string{`column "units" has type BOOLEAN`}},
		{name: "Parquet: missing mapped column / broken, lists the file's columns",
			pq: func(t *testing.T) []byte {
				type r struct {
					Depot string `parquet:"depot"`
					Day   string `parquet:"day"`
					Units int64  `parquet:"units"`
				}
				return writeParquet(t, []r{{"north", "2026-11-01", 1}})
			},
			broken: []string{`missing column "item"`, `"depot"`}},
		{name: "Parquet: null value in an optional column / that series rejected naming row group and row",
			pq: func(t *testing.T) []byte {
				type r struct {
					Depot string `parquet:"depot"`
					Item  string `parquet:"item"`
					Day   string `parquet:"day"`
					Units *int64 `parquet:"units,optional"`
				}
				one := int64(1)
				return writeParquet(t, []r{{"north", "oat", "2026-11-01", &one}, {"north", "oat", "2026-11-02", &one},
					{"south", "kippers", "2026-11-01", &one}, {"south", "kippers", "2026-11-02", nil}})
			},
			keep:   []string{"north/oat"},
			reject: map[string]string{"south/kippers": "demand.csv row group 0 row 3: column \"units\": empty value"}},
	}
}

// corruptGroup writes the Fenwick table in row groups of 2 and overwrites the page header of
// group g's first column chunk with 0xFF bytes.
func corruptGroup(g int) func(t *testing.T) []byte {
	return func(t *testing.T) []byte {
		b := fenwickParquet(t, 2)
		f, err := parquet.OpenFile(bytes.NewReader(b), int64(len(b)))
		if err != nil {
			t.Fatal(err)
		}
		off := f.Metadata().RowGroups[g].Columns[0].MetaData.DataPageOffset
		b = slices.Clone(b)
		for i := off; i < off+12; i++ {
			b[i] = 0xff
		}
		return b
	}
}

func TestBadInput(t *testing.T) {
	for _, c := range badCases() {
		t.Run(c.name, func(t *testing.T) {
			src := daily()
			if c.src != nil {
				src = c.src(src)
			}
			now := badNow
			if c.noClock {
				now = time.Time{}
			}
			col, err := NewCollector(src, now)
			if err != nil {
				t.Fatal(err)
			}
			const object = "file:///data/fenwick/demand.csv"
			add := func(r Row) error { col.Add(r); return nil }
			if c.pq != nil {
				b := c.pq(t)
				err = ScanParquet(context.Background(), bytes.NewReader(b), int64(len(b)), object, src, nil, add)
			} else {
				err = ScanCSV(context.Background(), strings.NewReader(c.csv), object, src, add)
			}
			if c.broken != nil {
				if !errors.Is(err, ErrBrokenInput) {
					t.Fatalf("err %v, want broken input", err)
				}
				t.Log(err)
				for _, want := range append(c.broken, object) {
					if !strings.Contains(err.Error(), want) {
						t.Errorf("err %q does not contain %q", err, want)
					}
				}
				return
			}
			if err != nil {
				t.Fatalf("scan: %v", err)
			}
			ok, rej := col.Finish()
			var keys []string
			for _, s := range ok {
				keys = append(keys, s.Key)
			}
			if !slices.Equal(keys, c.keep) {
				t.Errorf("kept %q, want %q", keys, c.keep)
			}
			if len(rej) != len(c.reject) {
				t.Errorf("rejected %v, want %d", rej, len(c.reject))
			}
			for _, r := range rej {
				t.Logf("rejected %q: %s", r.Key, r.Reason)
				want, ok := c.reject[r.Key]
				if !ok || !strings.Contains(r.Reason, want) {
					t.Errorf("rejected %q: %q, want %q", r.Key, r.Reason, want)
				}
			}
			for _, s := range ok {
				if want, ok := c.note[s.Key]; ok && !slices.ContainsFunc(s.Notes, func(n string) bool { return strings.Contains(n, want) }) {
					t.Errorf("%s: notes %q, want one with %q", s.Key, s.Notes, want)
				}
				want, ok := c.clean[s.Key]
				if !ok {
					continue
				}
				if err := series.Clean(&s, series.CleanRules{NonNegative: src.NonNegative}); err != nil {
					t.Fatalf("%s: Clean: %v", s.Key, err)
				}
				if !slices.ContainsFunc(s.Notes, func(n string) bool { return strings.Contains(n, want) }) {
					t.Errorf("%s: notes after Clean %q, want one with %q", s.Key, s.Notes, want)
				}
				for _, v := range s.Values {
					if math.IsNaN(v) || (src.NonNegative && v < 0) {
						t.Errorf("%s: Clean left %v", s.Key, s.Values)
					}
				}
			}
		})
	}
}

// Storage-level bad input: keys that walk out of their prefix, URIs with an unknown scheme,
// an object the process may not read.
func TestBadInputStorage(t *testing.T) {
	ctx := context.Background()
	for _, key := range []string{"../secrets", "runs/../../x", "/etc/passwd", `a\b`, "a//b", "ok/./x", "nul\x00"} {
		if _, err := store.CleanKey(key); !errors.Is(err, store.ErrBadKey) { // case / outcome: traversal key / ErrBadKey
			t.Errorf("CleanKey(%q) = %v, want ErrBadKey", key, err)
		}
	}
	for _, uri := range []string{"ftp://depot/demand.csv", "http://x/y", "demand.csv", "file://host/rel", "s3:///no-bucket"} {
		if _, err := store.Open(ctx, uri); !errors.Is(err, store.ErrBadURI) { // case / outcome: bad scheme / ErrBadURI
			t.Errorf("Open(%q) = %v, want ErrBadURI", uri, err)
		}
	}
	// case / outcome: unreadable file (chmod 000) / ErrPermission naming the object. Root reads
	// anything, so the check needs an unprivileged user.
	if os.Geteuid() == 0 {
		t.Log("permission case skipped: running as root")
		return
	}
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "demand.csv"), []byte(header+good), 0o000); err != nil {
		t.Fatal(err)
	}
	s, err := store.Open(ctx, "file://"+dir)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if _, err := s.Get(ctx, "demand.csv"); !errors.Is(err, store.ErrPermission) || !strings.Contains(err.Error(), "demand.csv") {
		t.Errorf("Get of a chmod 000 file: %v, want ErrPermission naming it", err)
	}
}
