package store

import (
	"context"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestCleanKey(t *testing.T) {
	for key, ok := range map[string]bool{
		"runs/r1/plan.json":    true,
		"data/part-0001.csv":   true,
		"runs/r1/units/":       true,
		"":                     false,
		"/etc/passwd":          false,
		"../secret":            false,
		"runs/../../x":         false,
		"runs/./x":             false,
		"a//b":                 false,
		`a\b`:                  false,
		"a\x00b":               false,
		"a\nb":                 false,
		"caf\xe9/not-utf8.csv": false,
	} {
		_, err := CleanKey(key)
		if (err == nil) != ok {
			t.Errorf("CleanKey(%q) error %v, want ok=%v", key, err, ok)
		}
		if err != nil && !errors.Is(err, ErrBadKey) {
			t.Errorf("CleanKey(%q) error %v does not wrap ErrBadKey", key, err)
		}
	}
}

func TestOpenRejectsBadURIs(t *testing.T) {
	ctx := context.Background()
	for _, uri := range []string{
		"ftp://host/data/",
		"http://example.invalid/x",
		"data/relative",
		"file://relative/path",
		"s3:///no-bucket",
		"mem://m/../escape/",
		"%zz",
	} {
		if _, err := Open(ctx, uri); !errors.Is(err, ErrBadURI) && !errors.Is(err, ErrBadKey) {
			t.Errorf("Open(%q) = %v, want ErrBadURI or ErrBadKey", uri, err)
		}
	}
}

func TestRedactDropsSecrets(t *testing.T) {
	got := Redact("s3://user:pw@bucket/p/?endpoint=http://127.0.0.1:9000&secret_access_key=abc&sig=def")
	for _, leak := range []string{"pw", "abc", "def", "user"} {
		if strings.Contains(got, leak) {
			t.Errorf("Redact leaked %q: %s", leak, got)
		}
	}
	if !strings.Contains(got, "127.0.0.1") {
		t.Errorf("Redact dropped the endpoint: %s", got)
	}
}

// roundTrip exercises one store: put, get, list, traversal refusal, an aborted write, copy, delete.
func roundTrip(t *testing.T, s *Store) {
	t.Helper()
	ctx := context.Background()
	if err := s.Put(ctx, "in/a.csv", []byte("series,date,value\n")); err != nil {
		t.Fatal(err)
	}
	if err := s.Put(ctx, "in/b.csv", []byte("x")); err != nil {
		t.Fatal(err)
	}
	b, err := s.Get(ctx, "in/a.csv")
	if err != nil || string(b) != "series,date,value\n" {
		t.Fatalf("Get = %q, %v", b, err)
	}
	objs, err := s.List(ctx, "in/")
	if err != nil {
		t.Fatal(err)
	}
	if len(objs) != 2 || objs[0].Key != "in/a.csv" || objs[1].Key != "in/b.csv" || objs[0].Size != 18 {
		t.Fatalf("List = %+v", objs)
	}
	if err := s.Put(ctx, "../escape.csv", []byte("x")); !errors.Is(err, ErrBadKey) {
		t.Fatalf("Put(../escape.csv) = %v, want ErrBadKey", err)
	}
	// A write whose producer fails must leave the old object in place, whole.
	boom := errors.New("producer failed")
	err = s.Write(ctx, "in/a.csv", func(w io.Writer) error {
		_, _ = w.Write([]byte("partial"))
		return boom
	})
	if !errors.Is(err, boom) {
		t.Fatalf("aborted Write = %v", err)
	}
	if b, _ := s.Get(ctx, "in/a.csv"); string(b) != "series,date,value\n" {
		t.Fatalf("aborted write changed the object to %q", b)
	}
	if ok, _ := s.Exists(ctx, "in/never.csv"); ok {
		t.Fatal("Exists(never) = true")
	}
	if err := s.Write(ctx, "in/never.csv", func(w io.Writer) error { return boom }); !errors.Is(err, boom) {
		t.Fatal(err)
	}
	if ok, _ := s.Exists(ctx, "in/never.csv"); ok {
		t.Fatal("an aborted write created the object")
	}
	if _, err := s.Get(ctx, "in/missing.csv"); !errors.Is(err, ErrNotFound) {
		t.Fatalf("Get(missing) = %v, want ErrNotFound", err)
	} else if !strings.Contains(err.Error(), "in/missing.csv") {
		t.Fatalf("error %q does not name the object", err)
	}
	if err := s.Copy(ctx, "out/a.csv", "in/a.csv"); err != nil {
		t.Fatal(err)
	}
	ra, size, err := s.NewReaderAt(ctx, "out/a.csv")
	if err != nil || size != 18 {
		t.Fatalf("NewReaderAt = %v, %v", size, err)
	}
	p := make([]byte, 4)
	if n, err := ra.ReadAt(p, 7); err != nil || n != 4 || string(p) != "date" {
		t.Fatalf("ReadAt = %d %q %v", n, p, err)
	}
	if err := s.Delete(ctx, "out/a.csv"); err != nil {
		t.Fatal(err)
	}
	if err := s.Delete(ctx, "out/a.csv"); err != nil {
		t.Fatalf("second Delete = %v", err)
	}
}

func TestFileStore(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(context.Background(), "file://"+dir+"/sub")
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	roundTrip(t, s)
	// An interrupted fileblob write leaves a *.tmp file; listing must not show it.
	if err := os.WriteFile(filepath.Join(dir, "sub", "in", "c.csv.18a2.tmp"), []byte("half"), 0o644); err != nil {
		t.Fatal(err)
	}
	objs, _ := s.List(context.Background(), "in/")
	for _, o := range objs {
		if strings.HasSuffix(o.Key, ".tmp") {
			t.Fatalf("List shows in-flight write %s", o.Key)
		}
	}
}

func TestOpenExistingDoesNotCreate(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	missing := filepath.Join(dir, "typo")
	if _, err := OpenExisting(ctx, "file://"+missing); !errors.Is(err, ErrNotFound) {
		t.Fatalf("OpenExisting(missing dir) = %v, want ErrNotFound", err)
	}
	if _, err := os.Stat(missing); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("OpenExisting created %s (stat: %v)", missing, err)
	}
	file := filepath.Join(dir, "plain")
	if err := os.WriteFile(file, []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := OpenExisting(ctx, "file://"+file); !errors.Is(err, ErrBadURI) {
		t.Fatalf("OpenExisting(file) = %v, want ErrBadURI", err)
	}
	s, err := OpenExisting(ctx, "file://"+dir)
	if err != nil {
		t.Fatalf("OpenExisting(existing dir) = %v", err)
	}
	s.Close()
}

func TestMemStoreIsSharedByName(t *testing.T) {
	ctx := context.Background()
	a, err := Open(ctx, "mem://store-test/prefix/")
	if err != nil {
		t.Fatal(err)
	}
	roundTrip(t, a)
	b, _ := Open(ctx, "mem://store-test/prefix")
	if got, err := b.Get(ctx, "in/b.csv"); err != nil || string(got) != "x" {
		t.Fatalf("second Open of the same mem bucket: %q, %v", got, err)
	}
	c, _ := Open(ctx, "mem://store-test/")
	if _, err := c.Get(ctx, "prefix/in/b.csv"); err != nil {
		t.Fatalf("prefix not applied: %v", err)
	}
}

func TestClassify(t *testing.T) {
	if err := classify(&fs.PathError{Op: "open", Path: "x", Err: fs.ErrPermission}); !errors.Is(err, ErrPermission) {
		t.Errorf("permission error classified as %v", err)
	}
	if err := classify(&fs.PathError{Op: "open", Path: "x", Err: fs.ErrNotExist}); !errors.Is(err, ErrNotFound) {
		t.Errorf("not-exist error classified as %v", err)
	}
}

func TestLatestPointerRefusesIncompleteRun(t *testing.T) {
	ctx := context.Background()
	s, _ := Open(ctx, "mem://latest-test/")
	if _, ok, err := s.ReadLatest(ctx); ok || err != nil {
		t.Fatalf("ReadLatest on empty store = %v, %v", ok, err)
	}
	man := RunKey("r1", ManifestName)
	if err := s.WriteLatest(ctx, Pointer{Run: "r1", Manifest: man, ManifestSHA256: "00"}); err == nil {
		t.Fatal("WriteLatest pointed at a run without a manifest")
	}
	b, err := s.PutJSON(ctx, man, map[string]string{"run": "r1"})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.WriteLatest(ctx, Pointer{Run: "r1", Manifest: man, ManifestSHA256: "00"}); err == nil {
		t.Fatal("WriteLatest accepted a wrong checksum")
	}
	p := Pointer{Run: "r1", Manifest: man, ManifestSHA256: SHA256(b)}
	if err := s.WriteLatest(ctx, p); err != nil {
		t.Fatal(err)
	}
	got, ok, err := s.ReadLatest(ctx)
	if err != nil || !ok || got != p {
		t.Fatalf("ReadLatest = %+v %v %v", got, ok, err)
	}
	// A manifest changed after the pointer was written is detected.
	if err := s.Put(ctx, man, []byte(`{"run":"r1","tampered":true}`)); err != nil {
		t.Fatal(err)
	}
	if _, _, err := s.ReadLatest(ctx); err == nil {
		t.Fatal("ReadLatest followed a pointer whose manifest changed")
	}
}

func TestCheckName(t *testing.T) {
	for name, ok := range map[string]bool{"nightly-20261202": true, "u-0042": true, "..": false, "A": false, "a/b": false, "": false} {
		if err := CheckName("run", name); (err == nil) != ok {
			t.Errorf("CheckName(%q) = %v, want ok=%v", name, err, ok)
		}
	}
}

func FuzzCleanKey(f *testing.F) {
	for _, s := range []string{"runs/r1/plan.json", "../x", "a//b", "/abs", "a/./b", "ok/"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, key string) {
		k, err := CleanKey(key)
		if err != nil {
			return
		}
		for _, seg := range strings.Split(strings.TrimSuffix(k, "/"), "/") {
			if seg == ".." || seg == "." || seg == "" {
				t.Fatalf("CleanKey accepted %q", key)
			}
		}
		if filepath.IsAbs(k) || strings.Contains(k, `\`) {
			t.Fatalf("CleanKey accepted %q", key)
		}
	})
}

func FuzzOpenURI(f *testing.F) {
	for _, s := range []string{"mem://fz/a/", "file:///tmp/x", "s3://b/p?endpoint=http://127.0.0.1:1", "ftp://x", "%", "mem://fz/../../"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, uri string) {
		if !strings.HasPrefix(uri, "mem://") {
			// Only mem:// is opened for real under fuzzing; the others would touch disk or network.
			_ = Redact(uri)
			return
		}
		s, err := Open(context.Background(), uri)
		if err != nil {
			return
		}
		if strings.Contains(s.prefix, "..") && !strings.Contains(strings.ReplaceAll(s.prefix, "..", ""), "/") {
			t.Fatalf("prefix %q escaped", s.prefix)
		}
		for _, seg := range strings.Split(strings.TrimSuffix(s.prefix, "/"), "/") {
			if seg == ".." || seg == "." {
				t.Fatalf("Open(%q) accepted prefix %q", uri, s.prefix)
			}
		}
	})
}
