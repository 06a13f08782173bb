package synth

import (
	"bufio"
	"context"
	"flag"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"github.com/parquet-go/parquet-go"

	"almanac.dev/almanac/trainer/cli"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/store"
)

// Formats Write understands.
const (
	CSV     = "csv"
	Parquet = "parquet"
)

// Column names of the generated table: the names the samples in config/samples map in
// source.columns, so `local -f` on a sample reads generated data without edits.
const (
	ColItem  = "item"
	ColDepot = "depot"
	// ColDate is the date column of daily data; weekly data has ColWeekStart (a week is
	// labelled by its first day, the Monday).
	ColDate      = "date"
	ColWeekStart = "week_start"
	ColUnits     = "units"
	ColPromo     = "promo_flag"
	// ColPrice is the shelf price, promotion scenario only.
	ColPrice = "price"
)

// DateColumn is the date column's name: ColWeekStart for weekly data, ColDate for daily.
func (o Options) DateColumn() string {
	if o.Frequency == Weekly {
		return ColWeekStart
	}
	return ColDate
}

// ColumnsOf returns the columns of the options' dataset, in order: item, depot, the date
// column (DateColumn), units, promo_flag, and price in the promotion scenario.
func (o Options) ColumnsOf() []string {
	cols := []string{ColItem, ColDepot, o.DateColumn(), ColUnits, ColPromo}
	if o.Scenario == ScenarioPromotions {
		cols = append(cols, ColPrice)
	}
	return cols
}

// WriteCSV writes depot d's rows as CSV with a header line.
func (o Options) WriteCSV(w io.Writer, d int) error {
	bw := bufio.NewWriterSize(w, 1<<16)
	bw.WriteString(strings.Join(o.ColumnsOf(), ",") + "\n")
	withPrice := o.Scenario == ScenarioPromotions
	buf := make([]byte, 0, 64)
	err := o.Depot(d, func(r Record) error {
		buf = append(buf[:0], r.Item...)
		buf = append(buf, ',')
		buf = append(buf, r.Depot...)
		buf = append(buf, ',')
		if r.Stamp != "" {
			buf = append(buf, r.Stamp...)
		} else {
			buf = r.Date.AppendFormat(buf, "2006-01-02")
		}
		buf = append(buf, ',')
		switch {
		case r.Text != "":
			buf = append(buf, r.Text...)
		case !r.Planned:
			buf = strconv.AppendFloat(buf, r.Units, 'f', -1, 64)
		}
		buf = append(buf, ',')
		buf = strconv.AppendInt(buf, int64(r.Promo), 10)
		if withPrice {
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, r.Price, 'f', -1, 64)
		}
		buf = append(buf, '\n')
		_, err := bw.Write(buf)
		return err
	})
	if err != nil {
		return err
	}
	return bw.Flush()
}

// WriteParquet writes depot d's rows as Parquet, one row group per rowsPerGroup rows (<= 0:
// one row group per 64 items), each series inside one row group. The columns are ColumnsOf's:
// the date a DATE, units an optional DOUBLE (null for a planned row), promo_flag an INT32,
// price a DOUBLE. Of the defects, "not-a-number" becomes a null value; "off-grid" cannot be
// written in a DATE column, so in Parquet that series is clean; the duplicate and single-row
// defects are as in CSV.
func (o Options) WriteParquet(w io.Writer, d int, rowsPerGroup int) error {
	ow := o.withDefaults()
	if rowsPerGroup <= 0 {
		rowsPerGroup = 64 * (ow.Periods + ow.Future)
	}
	names := o.ColumnsOf()
	nodes := map[string]parquet.Node{
		ColItem: parquet.String(), ColDepot: parquet.String(), o.DateColumn(): parquet.Date(),
		ColUnits: parquet.Optional(parquet.Leaf(parquet.DoubleType)), ColPromo: parquet.Int(32), ColPrice: parquet.Leaf(parquet.DoubleType),
	}
	group := parquet.Group{}
	for _, n := range names {
		group[n] = nodes[n]
	}
	schema := parquet.NewSchema("demand", group)
	at := make([]int, len(names)) // file column of each of names
	for i, n := range names {
		leaf, _ := schema.Lookup(n)
		at[i] = leaf.ColumnIndex
	}
	pw := parquet.NewWriter(w, schema)
	batch := make([]parquet.Row, 0, 4096)
	inGroup := 0
	flush := func() error {
		_, err := pw.WriteRows(batch)
		batch = batch[:0]
		return err
	}
	lastKey := ""
	err := o.Depot(d, func(r Record) error {
		// Cut row groups only between series.
		if k := r.Key(); k != lastKey {
			if inGroup >= rowsPerGroup {
				if err := flush(); err != nil {
					return err
				}
				if err := pw.Flush(); err != nil {
					return err
				}
				inGroup = 0
			}
			lastKey = k
		}
		units, def := parquet.NullValue(), 0
		if r.Text == "" && !r.Planned {
			units, def = parquet.DoubleValue(r.Units), 1
		}
		vals := []parquet.Value{parquet.ByteArrayValue([]byte(r.Item)), parquet.ByteArrayValue([]byte(r.Depot)),
			parquet.Int32Value(int32(r.Date.Unix() / 86400)), units, parquet.Int32Value(int32(r.Promo)), parquet.DoubleValue(r.Price)}
		row := make(parquet.Row, len(names))
		for i := range names {
			d := 0
			if names[i] == ColUnits {
				d = def
			}
			row[at[i]] = vals[i].Level(0, d, at[i])
		}
		batch = append(batch, row)
		inGroup++
		if len(batch) == cap(batch) {
			return flush()
		}
		return nil
	})
	if err == nil {
		err = flush()
	}
	if err != nil {
		return err
	}
	return pw.Close()
}

// ObjectKey is depot d's object name under the output prefix: depot-<name>.<format>.
func ObjectKey(d int, format string) string { return "depot-" + DepotName(d) + "." + format }

// Write writes one object per depot into st under prefix (relative, "" or ending in "/"),
// atomically each, and returns the keys. Every series sits in one object, so the dataset
// suits source.partitioning "object" (and, for Parquet, "rowGroup").
func (o Options) Write(ctx context.Context, st *store.Store, prefix, format string) ([]string, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if format != CSV && format != Parquet {
		return nil, fmt.Errorf("synth: format %q is not %s or %s", format, CSV, Parquet)
	}
	var keys []string
	for d := 0; d < o.withDefaults().Depots; d++ {
		key := prefix + ObjectKey(d, format)
		err := st.Write(ctx, key, func(w io.Writer) error {
			if format == Parquet {
				return o.WriteParquet(w, d, 0)
			}
			return o.WriteCSV(w, d)
		})
		if err != nil {
			return nil, err
		}
		keys = append(keys, key)
	}
	return keys, nil
}

// Main is the trainer's generate command; now is the clock --end defaults from.
func Main(ctx context.Context, args []string, stdout, stderr io.Writer, now func() time.Time) int {
	fs := flag.NewFlagSet("generate", flag.ContinueOnError)
	out := fs.String("output", "", "store `URI` to write depot-<name>.<format> objects under (required)")
	format := fs.String("format", CSV, "csv or parquet")
	var o Options
	fs.IntVar(&o.Items, "items", 50, "items per depot")
	fs.IntVar(&o.Depots, "depots", 4, "depots")
	fs.StringVar(&o.Frequency, "frequency", Daily, "Daily or Weekly")
	fs.IntVar(&o.Periods, "periods", 0, "periods of history (default 730 days or 104 weeks)")
	end := fs.String("end", "", "last period of history (YYYY-MM-DD; a Monday for weekly; default the last complete period: yesterday, or the Monday of last week)")
	fs.Float64Var(&o.SpareShare, "spare-share", 0.1, "share of items that are intermittent spare parts (negative: none)")
	fs.IntVar(&o.Bad, "bad", 0, "number of deliberately defective series")
	fs.Uint64Var(&o.Seed, "seed", 1, "random seed")
	fs.StringVar(&o.Scenario, "scenario", ScenarioBaseline, `"" (baseline) or promotions (adds a price column; demand driven by promotions, price cuts and the harvest fair)`)
	fs.IntVar(&o.Future, "future", 0, "planned periods after the history, units empty (promotions scenario)")
	if code, ok := cli.Parse(fs, "usage: almanac-trainer generate --output URI [flags]\nWrites a synthetic Fenwick Lane Provisions dataset, one object per depot.", args, stdout, stderr); !ok {
		return code
	}
	if *out == "" {
		fmt.Fprintln(stderr, "almanac-trainer generate: --output URI is required")
		return exitcode.Config
	}
	o.End = LastComplete(o.Frequency, now())
	if *end != "" {
		t, err := time.Parse("2006-01-02", *end)
		if err != nil {
			fmt.Fprintf(stderr, "almanac-trainer generate: --end %q is not a date (YYYY-MM-DD)\n", *end)
			return exitcode.Config
		}
		o.End = t
	}
	if err := o.Validate(); err != nil {
		fmt.Fprintf(stderr, "almanac-trainer generate: %v\n", err)
		return exitcode.Config
	}
	st, err := store.Open(ctx, *out)
	if err != nil {
		fmt.Fprintf(stderr, "almanac-trainer generate: %v\n", err)
		return exitcode.Config
	}
	defer st.Close()
	keys, err := o.Write(ctx, st, "", *format)
	if err != nil {
		fmt.Fprintf(stderr, "almanac-trainer generate: %v\n", err)
		return exitcode.Transient
	}
	fmt.Fprintf(stdout, "generate: %d series (%d items x %d depots, %d %s periods ending %s) in %d objects under %s\n",
		o.Series(), o.withDefaults().Items, o.withDefaults().Depots, o.withDefaults().Periods, strings.ToLower(o.withDefaults().Frequency),
		o.End.Format(time.DateOnly), len(keys), st)
	return exitcode.OK
}
