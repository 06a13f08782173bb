// Package storage runs the trainer's store against a real S3-compatible server on 127.0.0.1.
//
// The server is test/tools/s3server: gofakes3 (MIT license, pure Go, in-memory backend) behind a
// tiny main, built from the Go module proxy. versitygw was the first choice but the module proxy
// does not serve it here. Build it with
//
//	cd test/tools/s3server && go build -o ../../../bin/s3server .
//
// and run with ALMANAC_S3_SERVER=bin/s3server (the test also looks in <repo>/bin/). Without the
// binary the test skips and says so.
package storage

import (
	"bufio"
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/store"
)

func serverBinary(t *testing.T) string {
	if p := os.Getenv("ALMANAC_S3_SERVER"); p != "" {
		if abs, err := filepath.Abs(p); err == nil {
			p = abs
		}
		if _, err := os.Stat(p); err == nil {
			return p
		}
		// A relative path may be relative to the repo root rather than this package.
		if _, err := os.Stat(filepath.Join("..", "..", os.Getenv("ALMANAC_S3_SERVER"))); err == nil {
			return filepath.Join("..", "..", os.Getenv("ALMANAC_S3_SERVER"))
		}
		t.Fatalf("ALMANAC_S3_SERVER=%s does not exist", p)
	}
	p := filepath.Join("..", "..", "bin", "s3server")
	if _, err := os.Stat(p); err != nil {
		t.Skip("no S3 test server: build test/tools/s3server into bin/s3server or set ALMANAC_S3_SERVER")
	}
	return p
}

func startServer(t *testing.T) string {
	cmd := exec.Command(serverBinary(t), "-addr", "127.0.0.1:0", "-bucket", "almanac-test")
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cmd.Process.Kill(); _ = cmd.Wait() })
	line := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		if sc.Scan() {
			line <- sc.Text()
		}
	}()
	select {
	case l := <-line:
		return strings.TrimPrefix(l, "listening on ")
	case <-time.After(20 * time.Second):
		t.Fatal("s3server did not start")
	}
	return ""
}

func TestS3Store(t *testing.T) {
	endpoint := startServer(t)
	// Static test credentials for the local server only; the SDK reads them from the environment
	// exactly as a pod reads them from its Secret.
	t.Setenv("AWS_ACCESS_KEY_ID", "almanac-test")
	t.Setenv("AWS_SECRET_ACCESS_KEY", "almanac-test-secret")
	t.Setenv("AWS_REGION", "us-east-1")
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	uri := "s3://almanac-test/portfolios/harrow-pike/?endpoint=" + endpoint + "&use_path_style=true&disable_https=true&region=us-east-1"
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
