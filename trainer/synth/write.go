package synth

import (
	"bufio"
	"context"
	"flag"
	"fmt"
	"io"
	"strconv"
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

// WriteCSV writes depot d's rows as CSV with a header line.
func (o Options) WriteCSV(w io.Writer, d int) error {
	bw := bufio.NewWriterSize(w, 1<<16)
	bw.WriteString("item,depot,date,units,promo\n")
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
		if r.Text != "" {
			buf = append(buf, r.Text...)
		} else {
			buf = strconv.AppendFloat(buf, r.Units, 'f', -1, 64)
		}
		buf = append(buf, ',')
		buf = strconv.AppendInt(buf, int64(r.Promo), 10)
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

// WriteParquet writes depot d's rows as Parquet, one row group per rowsPerGroup rows (<= 0:
// one row group per 64 items), each series inside one row group.
func (o Options) WriteParquet(w io.Writer, d int, rowsPerGroup int) error {
	ow := o.withDefaults()
	if rowsPerGroup <= 0 {
		rowsPerGroup = 64 * ow.Periods
	}
	pw := parquet.NewGenericWriter[parquetRow](w)
	batch := make([]parquetRow, 0, 4096)
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
		row := parquetRow{Item: r.Item, Depot: r.Depot, Date: int32(r.Date.Unix() / 86400), Promo: int32(r.Promo)}
		if r.Text == "" {
			u := r.Units
			row.Units = &u
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
