// Package storage runs the trainer's store against a real S3-compatible server on 127.0.0.1
// (test/s3test says which server and how tests find it; without it the test skips).
package storage

import (
	"context"
	"errors"
	"io"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/test/s3test"
	"almanac.dev/almanac/trainer/store"
)

func TestS3Store(t *testing.T) {
	server := s3test.Start(t, "almanac-test")
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	uri := server.URI("almanac-test", "portfolios/harrow-pike/")
	s, err := store.Open(ctx, uri)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()

	if err := s.Put(ctx, "in/depot-01.csv", []byte("series,date,value\nHP-1001/D01,2026-01-05,3\n")); err != nil {
		t.Fatal(err)
	}
	got, err := s.Get(ctx, "in/depot-01.csv")
	if err != nil || !strings.HasPrefix(string(got), "series,date,value") {
		t.Fatalf("Get = %q, %v", got, err)
	}
	objs, err := s.List(ctx, "in/")
	if err != nil || len(objs) != 1 || objs[0].Key != "in/depot-01.csv" || objs[0].Size != int64(len(got)) {
		t.Fatalf("List = %+v, %v", objs, err)
	}
	ra, size, err := s.NewReaderAt(ctx, "in/depot-01.csv")
	if err != nil || size != int64(len(got)) {
		t.Fatalf("NewReaderAt = %d, %v", size, err)
	}
	p := make([]byte, 4)
	if _, err := ra.ReadAt(p, 7); err != nil || string(p) != "date" {
		t.Fatalf("ReadAt = %q, %v", p, err)
	}
	if _, err := s.Get(ctx, "in/gone.csv"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("Get(gone) = %v, want ErrNotFound", err)
	}
	boom := errors.New("producer failed")
	if err := s.Write(ctx, "in/never.csv", func(w io.Writer) error { return boom }); err == nil {
		t.Fatal("expected the aborted write to fail")
	}
	if ok, _ := s.Exists(ctx, "in/never.csv"); ok {
		t.Fatal("an aborted S3 write created the object")
	}

	// latest.json can only be moved to a run whose manifest is present with the stated checksum.
	man := store.RunKey("r1", store.ManifestName)
	b, err := s.PutJSON(ctx, man, map[string]any{"run": "r1", "units": 1})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.WriteLatest(ctx, store.Pointer{Run: "r1", Manifest: man, ManifestSHA256: store.SHA256(b)}); err != nil {
		t.Fatal(err)
	}
	ptr, ok, err := s.ReadLatest(ctx)
	if err != nil || !ok || ptr.Run != "r1" {
		t.Fatalf("ReadLatest = %+v %v %v", ptr, ok, err)
	}
	if err := s.Copy(ctx, "runs/r2/units/u-1/forecasts.csv", "in/depot-01.csv"); err != nil {
		t.Fatal(err)
	}
	if err := s.Delete(ctx, "runs/r2/units/u-1/forecasts.csv"); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(s.String(), "almanac-test-secret") {
		t.Fatal("store URI leaks the secret")
	}
}
