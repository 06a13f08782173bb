package ingest

import (
	"errors"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/runconfig"
)

func TestJoinKey(t *testing.T) {
	cases := []struct {
		cells []string
		want  string
	}{
		{[]string{"oat-flakes-1kg"}, "oat-flakes-1kg"},
		{[]string{"A/1"}, "A/1"}, // one column: the cell itself, whatever it holds
		{[]string{`say "hi"`}, `say "hi"`},
		{[]string{"north", "oat-flakes-1kg"}, "north/oat-flakes-1kg"}, // plain: what earlier releases wrote
		{[]string{"A/1", "x"}, `"A/1"/"x"`},
		{[]string{"A", "1/x"}, `"A"/"1/x"`},
		{[]string{`say "hi"`, "a,b\nc"}, `"say \"hi\""/"a,b\nc"`},
		{[]string{"", "kippers"}, "/kippers"}, // an empty cell (a rejected row's partial key)
		{[]string{"kip\xffpers", "north"}, "kip\uFFFDpers/north"},
		{[]string{"kip\xff/pers", "north"}, `"kip` + "\uFFFD" + `/pers"/"north"`},
	}
	for _, c := range cases {
		got := JoinKey(c.cells...)
		if got != c.want {
			t.Errorf("JoinKey(%q) = %q, want %q", c.cells, got, c.want)
		}
		back, err := SplitKey(got, len(c.cells))
		want := c.cells
		for i := range want {
			want[i] = strings.ToValidUTF8(want[i], "\uFFFD")
		}
		if err != nil || !slices.Equal(back, want) {
			t.Errorf("SplitKey(%q, %d) = %q, %v; want %q", got, len(c.cells), back, err, want)
		}
	}
}

func TestSplitKeyRefusesOtherStrings(t *testing.T) {
	for _, c := range []struct {
		key string
		n   int
	}{
		{"a/b/c", 2},          // three plain cells
		{"a", 2},              // one
		{`a/"b"`, 2},          // a quote in a plain form
		{`"a"/"b"`, 2},        // quoted cells that would have been written plain
		{`"a/"/"b"x`, 2},      // trailing text
		{`"a/"|"b"`, 2},       // wrong separator
		{`"a/"`, 2},           // too few quoted cells
		{"`a/`/`b`", 2},       // back quotes are Go's, not ours
		{`"a/"/'b'`, 2},       // a character literal
		{`"unterminated/`, 2}, // bad quoting
		{"x", 0},
	} {
		if cells, err := SplitKey(c.key, c.n); !errors.Is(err, ErrKey) {
			t.Errorf("SplitKey(%q, %d) = %q, %v; want ErrKey", c.key, c.n, cells, err)
		}
	}
}

// FuzzKey checks the encoding's promise: decoding gives the cells back (so two different
// tuples never share a key) and every key the encoder makes decodes.
func FuzzKey(f *testing.F) {
	f.Add("A/1", "x", "")
	f.Add("A", "1/x", "")
	f.Add(`"`, `/"/`, "\n")
	f.Add("north", "oat-flakes-1kg", "b0")
	f.Fuzz(func(t *testing.T, a, b, c string) {
		for n := 1; n <= 3; n++ {
			cells := []string{a, b, c}[:n]
			k := JoinKey(cells...)
			back, err := SplitKey(k, n)
			if err != nil {
				t.Fatalf("SplitKey(JoinKey(%q)) = %v", cells, err)
			}
			for i := range cells {
				if want := strings.ToValidUTF8(cells[i], "\uFFFD"); back[i] != want {
					t.Fatalf("SplitKey(JoinKey(%q)) = %q", cells, back)
				}
			}
		}
		// Any string that decodes is the encoding of what it decodes to.
		for n := 1; n <= 3; n++ {
			if cells, err := SplitKey(a, n); err == nil && strings.ToValidUTF8(a, "\uFFFD") == a {
				if k := JoinKey(cells...); k != a {
					t.Fatalf("JoinKey(SplitKey(%q, %d)) = %q", a, n, k)
				}
			}
		}
	})
}

// The collision of issue 17: item A/1 at depot x and item A at depot 1/x were one series when
// keys were joined with "/" (rejected for differing duplicate periods). Parquet keeps them
// apart too, integer key columns included.
func TestParquetKeysDoNotCollide(t *testing.T) {
	type row struct {
		Item  string `parquet:"item"`
		Depot string `parquet:"depot"`
		Shelf int64  `parquet:"shelf"`
		Week  int32  `parquet:"week,date"`
		Units int64  `parquet:"units"`
	}
	monday := time.Date(2026, 10, 5, 0, 0, 0, 0, time.UTC)
	var rows []row
	for i, k := range [][2]string{{"A/1", "x"}, {"A", "1/x"}, {`"q"`, "a,b\nc"}} {
		for w := range 3 {
			rows = append(rows, row{k[0], k[1], 7, days(monday.AddDate(0, 0, 7*w)), int64(10*i + w)})
		}
	}
	b := writeParquet(t, rows)
	src := fenwickSource()
	src.Format = "parquet"
	src.Columns = runconfig.Columns{Series: []string{"item", "depot", "shelf"}, Date: "week", Value: "units"}
	got, err := scanParquet(t, b, src, nil)
	if err != nil {
		t.Fatal(err)
	}
	c, err := NewCollector(src, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range got {
		c.Add(r)
	}
	ok, rej := c.Finish()
	if len(rej) != 0 || len(ok) != 3 {
		t.Fatalf("kept %d, rejected %v; want 3 kept", len(ok), rej)
	}
	for _, s := range ok {
		cells, err := SplitKey(s.Key, 3)
		if err != nil {
			t.Fatal(err)
		}
		first := fmt.Sprint(s.Values[0])
		want := map[string][]string{"0": {"A/1", "x", "7"}, "10": {"A", "1/x", "7"}, "20": {`"q"`, "a,b\nc", "7"}}[first]
		if !slices.Equal(cells, want) {
			t.Errorf("series %q (first value %s) has cells %q, want %q", s.Key, first, cells, want)
		}
	}
}
