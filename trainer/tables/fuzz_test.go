package tables

import (
	"bytes"
	"math"
	"testing"
)

// FuzzReadForecasts: reading never panics; a table that reads is written back and read again
// to the same header and rows (NaN compared as NaN), in both formats.
func FuzzReadForecasts(f *testing.F) {
	h, rows := sampleForecasts()
	for _, format := range formats {
		var buf bytes.Buffer
		if err := WriteForecasts(&buf, format, h, rows); err != nil {
			f.Fatal(err)
		}
		f.Add(buf.Bytes(), format == Parquet)
	}
	f.Add([]byte("depot,item,period,step,model,mean,q50\nx,\"a/\"\"b\",2026-12-07T00:00:00+01:00,1,m,-0,1e-300\n"), false)
	f.Add([]byte("period,item,depot,mean,step,model\n\"a,b\",x,\"\n\",1,1,m\n"), false)
	// Tables written before key columns: one series column.
	f.Add([]byte("series,period,step,model,mean\nx/y,2026-12-07T00:00:00Z,1,m,1\nx/y/z,2026-12-07T00:00:00Z,1,m,1\n"), false)
	f.Fuzz(func(t *testing.T, data []byte, pq bool) {
		format := CSV
		if pq {
			format = Parquet
		}
		h1, r1, err := ReadForecasts(bytes.NewReader(data), format, keys)
		if err != nil {
			return
		}
		for _, out := range formats {
			var buf bytes.Buffer
			if err := WriteForecasts(&buf, out, h1, r1); err != nil {
				t.Fatalf("%s: a table that was read does not write: %v", out, err)
			}
			h2, r2, err := ReadForecasts(&buf, out, keys)
			if err != nil {
				t.Fatalf("%s: written table does not read back: %v", out, err)
			}
			if len(h2.Quantiles) != len(h1.Quantiles) || len(r2) != len(r1) {
				t.Fatalf("%s: %d quantiles / %d rows, want %d / %d", out, len(h2.Quantiles), len(r2), len(h1.Quantiles), len(r1))
			}
			for i := range r1 {
				a, b := r1[i], r2[i]
				// Parquet keeps microseconds; CSV keeps nanoseconds.
				if a.Key != b.Key || a.Model != b.Model || a.Step != b.Step || !same(a.Mean, b.Mean) ||
					a.Period.UnixMicro() != b.Period.UnixMicro() {
					t.Fatalf("%s row %d: %+v, want %+v", out, i, b, a)
				}
				for j := range a.Quantiles {
					if !same(a.Quantiles[j], b.Quantiles[j]) {
						t.Fatalf("%s row %d quantile %d: %v, want %v", out, i, j, b.Quantiles[j], a.Quantiles[j])
					}
				}
			}
		}
	})
}

func same(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }
