package store

import (
	"context"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/test/s3test"
)

// Issue 18 case 5: a file:// commit flushes the data before the rename and the directory
// after it (and every directory it creates into its parent), so a node crash cannot leave the
// new name over an empty file or lose the rename. fsync's order is what POSIX leaves to the
// writer: rename(2) promises atomicity, not durability (common practice; see the Linux
// fsync(2) manual on syncing the directory).
func TestFileWritesSyncDataThenDirectory(t *testing.T) {
	var events []string
	writing := "{}\n"
	oldFile, oldDir := syncFile, syncDir
	t.Cleanup(func() { syncFile, syncDir = oldFile, oldDir })
	root := t.TempDir()
	syncFile = func(f *os.File) error {
		if b, err := os.ReadFile(filepath.Join(root, "runs", "r1", "MANIFEST.json")); err == nil && string(b) == writing {
			events = append(events, "data synced after the rename")
		}
		if !strings.HasSuffix(f.Name(), ".tmp") {
			events = append(events, "synced a file that is not the temporary one")
		}
		events = append(events, "file "+filepath.Base(filepath.Dir(f.Name())))
		return oldFile(f)
	}
	syncDir = func(dir string) error {
		rel, _ := filepath.Rel(root, dir)
		events = append(events, "dir "+rel)
		return oldDir(dir)
	}
	ctx := context.Background()
	s, err := Open(ctx, "file://"+root)
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Put(ctx, "runs/r1/MANIFEST.json", []byte("{}\n")); err != nil {
		t.Fatal(err)
	}
	want := []string{"dir .", "dir runs", "file r1", "dir runs/r1"}
	if strings.Join(events, "|") != strings.Join(want, "|") {
		t.Fatalf("sync calls %q, want %q", events, want)
	}
	if b, err := s.Get(ctx, "runs/r1/MANIFEST.json"); err != nil || string(b) != "{}\n" {
		t.Fatalf("read back %q, %v", b, err)
	}
	left, _ := filepath.Glob(filepath.Join(root, "runs", "r1", "*.tmp"))
	left2, _ := filepath.Glob(filepath.Join(root, "runs", "r1", ".*.tmp"))
	if len(left)+len(left2) > 0 {
		t.Fatalf("temporary files left: %v %v", left, left2)
	}
	// A second write of the same key creates no directory: data, then the directory.
	events, writing = nil, "{\"v\":2}\n"
	if err := s.Put(ctx, "runs/r1/MANIFEST.json", []byte(writing)); err != nil {
		t.Fatal(err)
	}
	if want := "file r1|dir runs/r1"; strings.Join(events, "|") != want {
		t.Fatalf("sync calls %q, want %q", events, want)
	}
}

// A write whose producer fails leaves neither the target nor a temporary file behind.
func TestFileWriteAbortLeavesNothing(t *testing.T) {
	root := t.TempDir()
	ctx := context.Background()
	s, err := Open(ctx, "file://"+root)
	if err != nil {
		t.Fatal(err)
	}
	boom := errors.New("producer failed")
	if err := s.Write(ctx, "a/b.csv", func(w io.Writer) error { w.Write([]byte("half")); return boom }); !errors.Is(err, boom) {
		t.Fatalf("Write = %v, want the producer's error", err)
	}
	entries, _ := os.ReadDir(filepath.Join(root, "a"))
	if len(entries) != 0 {
		t.Fatalf("left behind: %v", entries)
	}
}

// Issue 18 case 2: every kind of request to an endpoint that accepts and never answers ends
// with ErrTimeout (which wraps context.DeadlineExceeded: exit 4) instead of hanging.
func TestStalledEndpointTimesOut(t *testing.T) {
	uri := s3test.SilentURI(t, "flp-forecasts", "portfolio/")
	old := RequestTimeout
	RequestTimeout = 300 * time.Millisecond
	t.Cleanup(func() { RequestTimeout = old })
	ctx := context.Background()
	s, err := Open(ctx, uri)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ops := map[string]func() error{
		"stat":   func() error { _, err := s.Stat(ctx, "latest.json"); return err },
		"get":    func() error { _, err := s.Get(ctx, "latest.json"); return err },
		"list":   func() error { _, err := s.List(ctx, ""); return err },
		"put":    func() error { return s.Put(ctx, "runs/r1/plan.json", []byte("{}")) },
		"exists": func() error { _, err := s.Exists(ctx, "latest.json"); return err },
		"delete": func() error { return s.Delete(ctx, "latest.json") },
		"copy":   func() error { return s.Copy(ctx, "b.json", "a.json") },
	}
	for name, op := range ops {
		got := make(chan error, 1)
		go func() { got <- op() }()
		select {
		case err := <-got:
			if !errors.Is(err, ErrTimeout) || !errors.Is(err, context.DeadlineExceeded) || !strings.Contains(err.Error(), "no answer within 300ms") {
				t.Errorf("%s: %v, want ErrTimeout naming the bound", name, err)
			}
		case <-time.After(2 * time.Minute): // a hang, not a speed target: the bound is 300 ms
			t.Fatalf("%s: still waiting on a silent endpoint after 2 minutes", name)
		}
	}
}
