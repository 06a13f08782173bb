// Package badinput reads good and bad input tables through the trainer's real storage path, a
// local S3-compatible server (test/tools/s3server, built into bin/s3server) behind trainer/store,
// so ranged reads, object naming and error classes are those a train pod sees. The per-file bad
// input table itself is trainer/ingest/badinput_test.go.
//
// Without the server binary the test skips and says so; set ALMANAC_S3_SERVER to its path (the
// Makefile does) or build it with `make s3server`.
package badinput

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"

	"almanac.dev/almanac/test/s3test"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

// s3 starts the server and returns a store on a fresh prefix and the server.
func s3(t *testing.T) (*store.Store, *s3test.Server) {
	server := s3test.Start(t, "fenwick")
	s, err := store.Open(context.Background(), server.URI("fenwick", "history/"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s, server
}

type demand struct {
	Depot string `parquet:"depot"`
	Item  string `parquet:"item"`
	Week  int32  `parquet:"week,date"`
	Units int64  `parquet:"units"`
}

func source() runconfig.Source {
	return runconfig.Source{Columns: runconfig.Columns{Series: []string{"depot", "item"}, Date: "week", Value: "units"},
		Frequency: "Weekly", WeekAnchor: "Monday"}
}

// history is Fenwick Lane Provisions' weekly demand (invented): 3 depots x 4 items x 10 weeks,
// in row groups of 40 rows.
func history(t *testing.T) ([]demand, []byte) {
	var rows []demand
	monday := time.Date(2026, 9, 7, 0, 0, 0, 0, time.UTC)
	for d, depot := range []string{"harbour", "north", "south"} {
		for i := range 4 {
			for w := range 10 {
				rows = append(rows, demand{depot, fmt.Sprintf("item-%d", i), int32(monday.AddDate(0, 0, 7*w).Unix() / 86400), int64(d + i + w)})
			}
		}
	}
	var buf bytes.Buffer
	pw := parquet.NewGenericWriter[demand](&buf, parquet.MaxRowsPerRowGroup(40))
	if _, err := pw.Write(rows); err != nil {
		t.Fatal(err)
	}
	if err := pw.Close(); err != nil {
		t.Fatal(err)
	}
	return rows, buf.Bytes()
}

func TestReadThroughS3(t *testing.T) {
	s, server := s3(t)
	ctx := context.Background()
	rows, pq := history(t)
	if err := s.Put(ctx, "weekly.parquet", pq); err != nil {
		t.Fatal(err)
	}
	var csv strings.Builder
	csv.WriteString("depot,item,week,units\n")
	for _, r := range rows {
		fmt.Fprintf(&csv, "%s,%s,%s,%d\n", r.Depot, r.Item, time.Unix(int64(r.Week)*86400, 0).UTC().Format("2006-01-02"), r.Units)
	}
	if err := s.Put(ctx, "weekly.csv", []byte(csv.String())); err != nil {
		t.Fatal(err)
	}

	// Parquet by ranged reads: the planner's row groups, then groups [1,3) only.
	ra, size, err := s.NewReaderAt(ctx, "weekly.parquet")
	if err != nil {
		t.Fatal(err)
	}
	groups, err := ingest.RowGroups(ra, size, s.Describe("weekly.parquet"))
	if err != nil || len(groups) != 3 || groups[0].Rows != 40 {
		t.Fatalf("row groups %+v, %v", groups, err)
	}
	col, _ := ingest.NewCollector(source(), time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC))
	err = ingest.ScanParquet(ctx, ra, size, s.Describe("weekly.parquet"), source(), &ingest.GroupRange{From: 1, To: 3},
		func(r ingest.Row) error { col.Add(r); return nil })
	if err != nil {
		t.Fatal(err)
	}
	ok, rej := col.Finish()
	if len(ok) != 8 || len(rej) != 0 || ok[0].Key != "north/item-0" || ok[0].Len() != 10 {
		t.Fatalf("groups [1,3): %d series (first %q), rejected %v", len(ok), ok[0].Key, rej)
	}

	// CSV streamed from the same store gives the same rows as the Parquet object.
	rc, err := s.Open(ctx, "weekly.csv")
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	err = ingest.ScanCSV(ctx, rc, s.Describe("weekly.csv"), source(), func(r ingest.Row) error {
		w := rows[n]
		if r.Key != w.Depot+"/"+w.Item || r.Value != float64(w.Units) || r.Problem != "" {
			return fmt.Errorf("row %d: %+v, want %+v", n, r, w)
		}
		n++
		return nil
	})
	rc.Close()
	if err != nil || n != len(rows) {
		t.Fatalf("CSV: %d rows, %v", n, err)
	}

	// A truncated upload is broken input naming the S3 object.
	if err := s.Put(ctx, "cut.parquet", pq[:len(pq)/2]); err != nil {
		t.Fatal(err)
	}
	ra, size, err = s.NewReaderAt(ctx, "cut.parquet")
	if err != nil {
		t.Fatal(err)
	}
	err = ingest.ScanParquet(ctx, ra, size, s.Describe("cut.parquet"), source(), nil, func(ingest.Row) error { return nil })
	// (store.Describe places the key after the URI's query string; both parts are named.)
	if !errors.Is(err, ingest.ErrBrokenInput) || !strings.Contains(err.Error(), "s3://fenwick/history/") || !strings.Contains(err.Error(), "cut.parquet") {
		t.Fatalf("truncated object: %v", err)
	}

	// The server going away mid-scan is a storage error, not broken input.
	ra, size, err = s.NewReaderAt(ctx, "weekly.parquet")
	if err != nil {
		t.Fatal(err)
	}
	seen := 0
	err = ingest.ScanParquet(ctx, ra, size, s.Describe("weekly.parquet"), source(), nil, func(ingest.Row) error {
		if seen++; seen == 1 {
			server.Kill()
		}
		return nil
	})
	if err == nil || errors.Is(err, ingest.ErrBrokenInput) {
		t.Fatalf("server killed mid-scan: %v, want a storage error", err)
	}
	t.Logf("server killed mid-scan: %v", err)
}
