package tables

import (
	"fmt"
	"slices"
	"strings"

	"almanac.dev/almanac/trainer/ingest"
)

// Series key columns. Every table starts with the series key columns under the source's own
// names (runconfig Columns.Series, in order), one cell each, so a table says item and depot
// where the input did; no cell joins two key values. A row's Key field is the key as the
// trainer carries it inside (ingest.JoinKey of the cells); writers split it into the columns
// and readers join the columns back.
//
// Tables written before key columns (one "series" column of the cells joined with "/") are
// still read when none of the key columns is present: a series cell that is the key of the
// plain cells it splits into is taken as that key; a cell whose cells held "/" or '"' is
// ambiguous and its row is skipped (no series of this release has that key).
const colLegacySeries = "series"

// fixedColumns are the columns of the four tables apart from the key columns; a key column may
// not take one of these names, nor a name of the form err_h<N> or q<level>.
var fixedColumns = []string{colPeriod, colStep, colModel, colMean, colParams, colMetric, colScore, colNotes, colFeatures, colDesign, colSegment, colDesignBy,
	colPoints, colExpected, colRealized, colDrifted, colPrevious, colReason, colLevel}

// CheckKeys checks the key column names tables are written with: at least one, none empty,
// no name twice, and none that another column of an output table uses (period, step, model,
// mean, params, metric, score, notes, design, segment, design_chosen_by, kept_features, points, expected,
// realized, drifted, previous_run, reason, hierarchy_level, err_h<N>, q<level>). The error names the column and
// its position in keys.
func CheckKeys(keys []string) error {
	if len(keys) == 0 {
		return fmt.Errorf("no series key column")
	}
	for i, k := range keys {
		_, isErr := errStep(k)
		_, isQ := ParseQuantileColumn(k)
		switch {
		case k == "":
			return fmt.Errorf("series key column %d: empty name", i)
		case slices.Contains(keys[:i], k):
			return fmt.Errorf("series key column %d: %q named twice", i, k)
		case slices.Contains(fixedColumns, k) || isErr || isQ:
			return fmt.Errorf("series key column %d: %q is the name of an output table column; rename the input column", i, k)
		}
	}
	return nil
}

// keyColumns returns the text columns of keys, checked.
func keyColumns(keys []string) ([]column, error) {
	if err := CheckKeys(keys); err != nil {
		return nil, err
	}
	cols := make([]column, len(keys))
	for i, k := range keys {
		cols[i] = column{k, text}
	}
	return cols, nil
}

// keySplitter splits row keys into cells, remembering the last key (a forecasts table repeats
// each key for every step).
type keySplitter struct {
	n     int
	last  string
	cells []string
	ok    bool
}

// appendCells appends key's cells to c; the error names the key.
func (s *keySplitter) appendCells(c []cell, key string) ([]cell, error) {
	if !s.ok || key != s.last {
		cells, err := ingest.AppendCells(s.cells[:0], key, s.n)
		if err != nil {
			return c, fmt.Errorf("series %q: %w", key, err)
		}
		s.cells, s.last, s.ok = cells, key, true
	}
	for _, v := range s.cells {
		c = append(c, cell{s: v})
	}
	return c, nil
}

// isKeyColumn reports whether a reader given keys accepts a column name as a key column (or
// the series column of a table written before key columns).
func isKeyColumn(keys []string, name string) bool {
	return slices.Contains(keys, name) || name == colLegacySeries
}

// keyReader joins a read row's key cells back into the row key.
type keyReader struct {
	at     []int // positions of the key columns, in key order
	legacy int   // position of the series column of an older table, or -1
	n      int
	cells  []string // the previous row's key cells
	last   string   // and its key
}

// keysOf finds the key columns in a read grid: all of them, or, for an older table, none and a
// series column. The error names the first missing key column.
func keysOf(g grid, keys []string) (keyReader, error) {
	if err := CheckKeys(keys); err != nil {
		return keyReader{}, err
	}
	pos := make(map[string]int, len(g.cols))
	for i, c := range g.cols {
		pos[c.name] = i
	}
	kr := keyReader{legacy: -1, n: len(keys), cells: make([]string, len(keys))}
	var missing []string
	for _, k := range keys {
		if at, ok := pos[k]; ok {
			kr.at = append(kr.at, at)
		} else {
			missing = append(missing, k)
		}
	}
	at, hasSeries := pos[colLegacySeries]
	switch {
	case len(missing) == 0:
		if hasSeries && !slices.Contains(keys, colLegacySeries) {
			return keyReader{}, fmt.Errorf("column %q next to the key columns %q", colLegacySeries, keys)
		}
		return kr, nil
	case len(missing) == len(keys) && hasSeries:
		kr.legacy = at
		return kr, nil
	}
	return keyReader{}, fmt.Errorf("missing key column %q (the table's key columns must be %s)", missing[0], quoted(keys))
}

// key returns the row key of a read row; ok is false for an older table's ambiguous series cell.
func (kr *keyReader) key(row []cell) (string, bool) {
	if kr.legacy >= 0 {
		s := row[kr.legacy].s
		if kr.n > 1 && (strings.Contains(s, `"`) || strings.Count(s, "/") != kr.n-1) {
			return "", false
		}
		return strings.ToValidUTF8(s, "\uFFFD"), true
	}
	same := kr.last != ""
	for i, at := range kr.at {
		if same && row[at].s != kr.cells[i] {
			same = false
		}
		kr.cells[i] = row[at].s
	}
	if !same {
		kr.last = ingest.JoinKey(kr.cells...)
	}
	return kr.last, true
}

func quoted(names []string) string {
	q := make([]string, len(names))
	for i, n := range names {
		q[i] = fmt.Sprintf("%q", n)
	}
	return strings.Join(q, ", ")
}
