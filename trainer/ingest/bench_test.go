package ingest

import (
	"bytes"
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"
)

// benchRows is the benchmark table: Fenwick Lane Provisions' weekly demand for 50 depots x 40
// items x 52 weeks (invented), 104,000 rows.
func benchRows() []demandRow {
	var rows []demandRow
	monday := time.Date(2025, 12, 1, 0, 0, 0, 0, time.UTC)
	for d := range 50 {
		for i := range 40 {
			for w := range 52 {
				promo := float64(w % 2)
				rows = append(rows, demandRow{Depot: fmt.Sprintf("depot-%02d", d), Item: fmt.Sprintf("item-%03d", i),
					Week: days(monday.AddDate(0, 0, 7*w)), Units: int64((d*7 + i*3 + w) % 41), Promo: &promo})
			}
		}
	}
	return rows
}

func benchCSV(rows []demandRow) []byte {
	var b strings.Builder
	b.WriteString("depot,item,week,units,promo,comment\n")
	for _, r := range rows {
		fmt.Fprintf(&b, "%s,%s,%s,%d,%g,\n", r.Depot, r.Item, time.Unix(int64(r.Week)*86400, 0).UTC().Format("2006-01-02"), r.Units, *r.Promo)
	}
	return []byte(b.String())
}

func reportRows(b *testing.B, rows int) {
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

// BenchmarkScanCSV compares ScanCSV with encoding/csv splitting the same bytes into records
// without parsing them (the reference, measured in the same run).
func BenchmarkScanCSV(b *testing.B) {
	rows := benchRows()
	data := benchCSV(rows)
	src := fenwickSource()
	b.Run("reference=encoding-csv", func(b *testing.B) {
		b.ReportAllocs()
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			cr := csv.NewReader(bytes.NewReader(data))
			cr.ReuseRecord = true
			for {
				if _, err := cr.Read(); err == io.EOF {
					break
				} else if err != nil {
					b.Fatal(err)
				}
			}
		}
		reportRows(b, len(rows))
	})
	b.Run("ScanCSV", func(b *testing.B) {
		b.ReportAllocs()
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			n := 0
			if err := ScanCSV(context.Background(), bytes.NewReader(data), "bench.csv", src, func(Row) error { n++; return nil }); err != nil || n != len(rows) {
				b.Fatal(err, n)
			}
		}
		reportRows(b, len(rows))
	})
}

// BenchmarkScanParquet compares ScanParquet with parquet-go's GenericReader decoding every
// column into structs (the reference, measured in the same run).
func BenchmarkScanParquet(b *testing.B) {
	rows := benchRows()
	data := writeParquet(b, rows, parquet.MaxRowsPerRowGroup(20_000))
	src := fenwickSource()
	b.Run("reference=GenericReader", func(b *testing.B) {
		b.ReportAllocs()
		b.SetBytes(int64(len(data)))
		buf := make([]demandRow, 1024)
		for b.Loop() {
			r := parquet.NewGenericReader[demandRow](bytes.NewReader(data))
			n := 0
			for {
				k, err := r.Read(buf)
				n += k
				if err == io.EOF {
					break
				} else if err != nil {
					b.Fatal(err)
				}
			}
			r.Close()
			if n != len(rows) {
				b.Fatal(n)
			}
		}
		reportRows(b, len(rows))
	})
	b.Run("ScanParquet", func(b *testing.B) {
		b.ReportAllocs()
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			n := 0
			if err := ScanParquet(context.Background(), bytes.NewReader(data), int64(len(data)), "bench.parquet", src, nil, func(Row) error { n++; return nil }); err != nil || n != len(rows) {
				b.Fatal(err, n)
			}
		}
		reportRows(b, len(rows))
	})
}

// BenchmarkCollector measures Add and Finish for the benchmark table; B/op divided by the row
// count is the Collector's memory per row kept.
func BenchmarkCollector(b *testing.B) {
	var in []Row
	if err := ScanCSV(context.Background(), bytes.NewReader(benchCSV(benchRows())), "bench.csv", fenwickSource(), func(r Row) error {
		in = append(in, r)
		return nil
	}); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		c, err := NewCollector(fenwickSource(), time.Time{})
		if err != nil {
			b.Fatal(err)
		}
		for _, r := range in {
			c.Add(r)
		}
		if ok, rej := c.Finish(); len(ok) != 2000 || len(rej) != 0 {
			b.Fatal(len(ok), rej)
		}
	}
	reportRows(b, len(in))
}
