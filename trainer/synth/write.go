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

	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/store"
)

// Formats Write understands.
const (
	CSV     = "csv"
	Parquet = "parquet"
)

// Columns of the generated table, in order.
var Columns = []string{"item", "depot", "date", "units", "promo"}

// ColumnsOf returns the columns of the options' scenario, in order.
func (o Options) ColumnsOf() []string {
	if o.Scenario == ScenarioPromotions {
		return PromotionColumns
	}
	return Columns
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

// parquetRow is the Parquet schema: date is a DATE, units an optional DOUBLE, promo an INT32.
// Of the defects, "not-a-number" becomes a null value; "off-grid" cannot be written in a DATE
// column, so in Parquet that series is clean; the duplicate and single-row defects are as in CSV.
type parquetRow struct {
	Item  string   `parquet:"item"`
	Depot string   `parquet:"depot"`
	Date  int32    `parquet:"date,date"`
	Units *float64 `parquet:"units,optional"`
	Promo int32    `parquet:"promo"`
}

// promoParquetRow is the promotion scenario's schema: parquetRow and a DOUBLE price; planned
// rows have a null units value.
type promoParquetRow struct {
	Item  string   `parquet:"item"`
	Depot string   `parquet:"depot"`
	Date  int32    `parquet:"date,date"`
	Units *float64 `parquet:"units,optional"`
	Promo int32    `parquet:"promo"`
	Price float64  `parquet:"price"`
}

// WriteParquet writes depot d's rows as Parquet, one row group per rowsPerGroup rows (<= 0:
// one row group per 64 items), each series inside one row group.
func (o Options) WriteParquet(w io.Writer, d int, rowsPerGroup int) error {
	if o.Scenario == ScenarioPromotions {
		return writeParquet(o, w, d, rowsPerGroup, func(r Record) promoParquetRow {
			return promoParquetRow{Item: r.Item, Depot: r.Depot, Date: int32(r.Date.Unix() / 86400), Units: unitsOf(r),
				Promo: int32(r.Promo), Price: r.Price}
		})
	}
	return writeParquet(o, w, d, rowsPerGroup, func(r Record) parquetRow {
		return parquetRow{Item: r.Item, Depot: r.Depot, Date: int32(r.Date.Unix() / 86400), Units: unitsOf(r), Promo: int32(r.Promo)}
	})
}

// unitsOf is the units cell of r: nil (null) for a defect's text or a planned row.
func unitsOf(r Record) *float64 {
	if r.Text != "" || r.Planned {
		return nil
	}
	u := r.Units
	return &u
}

// writeParquet writes depot d's rows through the row schema T.
func writeParquet[T any](o Options, w io.Writer, d int, rowsPerGroup int, toRow func(Record) T) error {
	ow := o.withDefaults()
	if rowsPerGroup <= 0 {
		rowsPerGroup = 64 * (ow.Periods + ow.Future)
	}
	pw := parquet.NewGenericWriter[T](w)
	batch := make([]T, 0, 4096)
	inGroup := 0
	flush := func() error {
		if _, err := pw.Write(batch); err != nil {
			return err
		}
		batch = batch[:0]
		return nil
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
		batch = append(batch, toRow(r))
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

// Main is the trainer's generate command.
func Main(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("generate", flag.ContinueOnError)
	fs.SetOutput(stderr)
	out := fs.String("output", "", "store `URI` to write depot-<name>.<format> objects under (required)")
	format := fs.String("format", CSV, "csv or parquet")
	var o Options
	fs.IntVar(&o.Items, "items", 50, "items per depot")
	fs.IntVar(&o.Depots, "depots", 4, "depots")
	fs.StringVar(&o.Frequency, "frequency", Daily, "daily or weekly")
	fs.IntVar(&o.Periods, "periods", 0, "periods of history (default 730 days or 104 weeks)")
	end := fs.String("end", "2026-11-30", "last period of history (YYYY-MM-DD; a Monday for weekly)")
	fs.Float64Var(&o.SpareShare, "spare-share", 0.1, "share of items that are intermittent spare parts (negative: none)")
	fs.IntVar(&o.Bad, "bad", 0, "number of deliberately defective series")
	fs.Uint64Var(&o.Seed, "seed", 1, "random seed")
	fs.StringVar(&o.Scenario, "scenario", ScenarioBaseline, `"" (baseline) or promotions (adds a price column; demand driven by promotions, price cuts and the harvest fair)`)
	fs.IntVar(&o.Future, "future", 0, "planned periods after the history, units empty (promotions scenario)")
	if err := fs.Parse(args); err != nil {
		return exitcode.Config
	}
	t, err := time.Parse("2006-01-02", *end)
	if err != nil || *out == "" {
		fmt.Fprintln(stderr, "almanac-trainer generate: --output URI and a valid --end are required")
		return exitcode.Config
	}
	o.End = t
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
	fmt.Fprintf(stdout, "generate: %d series (%d items x %d depots, %d %s periods) in %d objects under %s\n",
		o.Series(), o.withDefaults().Items, o.withDefaults().Depots, o.withDefaults().Periods, o.withDefaults().Frequency, len(keys), st)
	return exitcode.OK
}
