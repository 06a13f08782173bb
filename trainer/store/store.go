// Package store is the trainer's storage: blob buckets behind one URI syntax (file, s3, gs,
// azblob, mem), safe keys, atomic writes, the run layout and the CSV/Parquet codecs.
//
// Credentials come only from the environment the pod gets (the Secret the portfolio names is
// mounted as environment variables or files the cloud SDKs read); this package never reads,
// logs or prints them, and Redact strips them from any URI it reports.
//
// Atomicity: every write goes through a gocloud.dev blob.Writer, which commits only when Close
// returns nil — fileblob writes a temporary file beside the target and renames it, S3 and GCS
// make the object visible only when the upload completes, Azure commits the block list at the
// end. On any error before Close the write context is cancelled and nothing is committed, so a
// reader sees either the old object or the whole new one, never a part.
package store

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/url"
	"os"
	"strings"
	"sync"
	"syscall"
	"time"

	"gocloud.dev/blob"
	_ "gocloud.dev/blob/azureblob" // azblob://
	"gocloud.dev/blob/fileblob"
	_ "gocloud.dev/blob/gcsblob" // gs://
	"gocloud.dev/blob/memblob"
	_ "gocloud.dev/blob/s3blob" // s3://
	"gocloud.dev/gcerrors"
)

// Schemes lists the URI schemes Open accepts.
var Schemes = []string{"file", "s3", "gs", "azblob", "mem"}

// Errors a caller can test with errors.Is; the command maps them to exit codes.
var (
	// ErrBadURI: the URI cannot be used (unknown scheme, malformed). A configuration error.
	ErrBadURI = errors.New("bad storage uri")
	// ErrBadKey: a key is empty, absolute, or walks out of its prefix. A configuration or data error.
	ErrBadKey = errors.New("bad storage key")
	// ErrNotFound: the object does not exist.
	ErrNotFound = errors.New("object not found")
	// ErrPermission: the credentials do not allow the operation. Not retried.
	ErrPermission = errors.New("permission denied")
	// ErrDamaged: published state is unreadable or inconsistent (latest.json not a pointer,
	// its manifest gone or with another checksum). Retrying cannot repair it.
	ErrDamaged = errors.New("damaged published state")
)

// Store is a bucket and a key prefix inside it; every key a caller passes is relative to the
// prefix and checked by CleanKey.
type Store struct {
	bucket *blob.Bucket
	prefix string // "" or ends in "/"
	uri    string // redacted, for messages
	owned  bool   // Close closes the bucket
	// dir is the directory of a file:// store ("" for the others), whose writes go through
	// writeFile (fsync of data and directory).
	dir string
	// timeout is RequestTimeout when the store was opened.
	timeout time.Duration
}

var (
	memMu      sync.Mutex
	memBuckets = map[string]*blob.Bucket{}
)

// Open opens the store a URI names. The URI's path is the prefix: s3://bucket/a/b/ stores keys
// under a/b/. file:///abs/dir is a directory (created if absent). mem://name is a process-wide
// in-memory bucket shared by every Open of the same name (tests and the local demo). Query
// parameters go to the driver (for S3-compatible servers: endpoint, use_path_style,
// disable_https, region).
func Open(ctx context.Context, uri string) (*Store, error) { return open(ctx, uri, true) }

// OpenExisting opens the store a URI names for reading: like Open, but a file:// directory
// that does not exist is ErrNotFound instead of being created, so a mistyped input folder is
// reported as missing rather than read as empty.
func OpenExisting(ctx context.Context, uri string) (*Store, error) { return open(ctx, uri, false) }

func open(ctx context.Context, uri string, create bool) (*Store, error) {
	u, err := url.Parse(uri)
	if err != nil {
		return nil, fmt.Errorf("store: %s: %w", Redact(uri), ErrBadURI)
	}
	red := Redact(uri)
	switch u.Scheme {
	case "file":
		if u.Host != "" && u.Host != "localhost" {
			return nil, fmt.Errorf("store: %s: file uri must be file:///absolute/path: %w", red, ErrBadURI)
		}
		dir := u.Path
		if dir == "" || !strings.HasPrefix(dir, "/") {
			return nil, fmt.Errorf("store: %s: file uri needs an absolute path: %w", red, ErrBadURI)
		}
		if create {
			if err := os.MkdirAll(dir, 0o755); err != nil {
				if errors.Is(err, syscall.EEXIST) || errors.Is(err, syscall.ENOTDIR) {
					// A file where the directory should be: the URI is wrong, not the store.
					return nil, fmt.Errorf("store: %s: not a directory: %w: %w", red, ErrBadURI, err)
				}
				return nil, fmt.Errorf("store: %s: %w", red, classify(err))
			}
		} else if fi, err := os.Stat(dir); err != nil {
			return nil, fmt.Errorf("store: %s: %w", red, classify(err))
		} else if !fi.IsDir() {
			return nil, fmt.Errorf("store: %s: not a directory: %w", red, ErrBadURI)
		}
		b, err := fileblob.OpenBucket(dir, &fileblob.Options{Metadata: fileblob.MetadataDontWrite, NoTempDir: true})
		if err != nil {
			return nil, fmt.Errorf("store: %s: %w", red, classify(err))
		}
		return &Store{bucket: b, uri: red, owned: true, dir: dir, timeout: RequestTimeout}, nil
	case "mem":
		name := u.Host
		memMu.Lock()
		b, ok := memBuckets[name]
		if !ok {
			b = memblob.OpenBucket(nil)
			memBuckets[name] = b
		}
		memMu.Unlock()
		p, err := prefixOf(u.Path)
		if err != nil {
			return nil, fmt.Errorf("store: %s: %w", red, err)
		}
		return &Store{bucket: b, prefix: p, uri: red, timeout: RequestTimeout}, nil
	case "s3", "gs", "azblob":
		if u.Host == "" {
			return nil, fmt.Errorf("store: %s: missing bucket name: %w", red, ErrBadURI)
		}
		p, err := prefixOf(u.Path)
		if err != nil {
			return nil, fmt.Errorf("store: %s: %w", red, err)
		}
		bu := url.URL{Scheme: u.Scheme, Host: u.Host, RawQuery: u.RawQuery}
		b, err := blob.OpenBucket(ctx, bu.String())
		if err != nil {
			return nil, fmt.Errorf("store: %s: %w: %w", red, ErrBadURI, err)
		}
		return &Store{bucket: b, prefix: p, uri: red, owned: true, timeout: RequestTimeout}, nil
	}
	return nil, fmt.Errorf("store: %s: scheme %q is not one of %v: %w", red, u.Scheme, Schemes, ErrBadURI)
}

// prefixOf turns a URI path into a key prefix ("" or "a/b/").
func prefixOf(p string) (string, error) {
	p = strings.Trim(p, "/")
	if p == "" {
		return "", nil
	}
	if _, err := CleanKey(p); err != nil {
		return "", err
	}
	return p + "/", nil
}

// Redact returns uri without user info and without query values that may carry secrets, for
// messages and logs.
func Redact(uri string) string {
	u, err := url.Parse(uri)
	if err != nil {
		return "(unparsable uri)"
	}
	u.User = nil
	q := u.Query()
	for k := range q {
		lk := strings.ToLower(k)
		if strings.Contains(lk, "key") || strings.Contains(lk, "secret") || strings.Contains(lk, "token") ||
			strings.Contains(lk, "sig") || strings.Contains(lk, "password") || strings.Contains(lk, "credential") {
			q.Set(k, "REDACTED")
		}
	}
	u.RawQuery = q.Encode()
	return u.String()
}

// String returns the store's redacted URI.
func (s *Store) String() string { return s.uri }

// Close releases the bucket (mem buckets stay alive for the process).
func (s *Store) Close() error {
	if s.owned {
		return s.bucket.Close()
	}
	return nil
}

// CleanKey checks a relative key: no empty, "." or ".." segments, no leading "/", no backslash,
// no control or NUL bytes, valid UTF-8. It returns the key unchanged or an error wrapping ErrBadKey.
func CleanKey(key string) (string, error) {
	if key == "" {
		return "", fmt.Errorf("empty key: %w", ErrBadKey)
	}
	if strings.HasPrefix(key, "/") {
		return "", fmt.Errorf("key %q is absolute: %w", key, ErrBadKey)
	}
	for _, r := range key {
		if r < 0x20 || r == 0x7f || r == '\\' || r == 0xfffd {
			return "", fmt.Errorf("key %q has a forbidden character %q: %w", key, r, ErrBadKey)
		}
	}
	segs := strings.Split(strings.TrimSuffix(key, "/"), "/")
	for _, seg := range segs {
		if seg == "" || seg == "." || seg == ".." {
			return "", fmt.Errorf("key %q has a %q segment: %w", key, seg, ErrBadKey)
		}
	}
	return key, nil
}

func (s *Store) full(key string) (string, error) {
	if _, err := CleanKey(key); err != nil {
		return "", fmt.Errorf("store: %s: %w", s.uri, err)
	}
	return s.prefix + key, nil
}

// classify maps driver and OS errors to the package's sentinels while keeping the original.
func classify(err error) error {
	if err == nil {
		return nil
	}
	switch {
	case errors.Is(err, ErrNotFound), errors.Is(err, ErrPermission):
		return err
	case errors.Is(err, fs.ErrNotExist), errors.Is(err, syscall.ELOOP):
		// A symlink loop names no object that can ever be read: not found, not a passing fault.
		return fmt.Errorf("%w: %w", ErrNotFound, err)
	case errors.Is(err, fs.ErrPermission):
		return fmt.Errorf("%w: %w", ErrPermission, err)
	}
	switch gcerrors.Code(err) {
	case gcerrors.NotFound:
		return fmt.Errorf("%w: %w", ErrNotFound, err)
	case gcerrors.PermissionDenied:
		return fmt.Errorf("%w: %w", ErrPermission, err)
	}
	return err
}

// ObjectInfo describes one listed object.
type ObjectInfo struct {
	// Key is relative to the store's prefix.
	Key  string
	Size int64
	// ETag is the backend's version tag when it has one (empty otherwise).
	ETag string
}

// List returns the objects under prefix (relative, "" for all, a directory-like prefix should
// end in "/"), sorted by key. Keys that fileblob uses for in-flight writes are skipped.
func (s *Store) List(ctx context.Context, prefix string) ([]ObjectInfo, error) {
	if prefix != "" {
		if _, err := CleanKey(prefix); err != nil {
			return nil, fmt.Errorf("store: %s: %w", s.uri, err)
		}
	}
	it := s.bucket.List(&blob.ListOptions{Prefix: s.prefix + prefix})
	var out []ObjectInfo
	for {
		var o *blob.ListObject
		err := s.request(ctx, "list "+s.uri+prefix, func(ctx context.Context) (err error) {
			o, err = it.Next(ctx)
			return err
		})
		if err == io.EOF {
			break
		}
		if errors.Is(err, ErrTimeout) {
			return nil, err
		}
		if err != nil {
			return nil, fmt.Errorf("store: list %s%s: %w", s.uri, prefix, classify(err))
		}
		if o.IsDir || strings.HasSuffix(o.Key, ".tmp") {
			continue
		}
		out = append(out, ObjectInfo{Key: strings.TrimPrefix(o.Key, s.prefix), Size: o.Size})
	}
	return out, nil
}

// Stat returns an object's size and version tag.
func (s *Store) Stat(ctx context.Context, key string) (ObjectInfo, error) {
	k, err := s.full(key)
	if err != nil {
		return ObjectInfo{}, err
	}
	var a *blob.Attributes
	err = s.request(ctx, "stat "+s.Describe(key), func(ctx context.Context) (err error) {
		a, err = s.bucket.Attributes(ctx, k)
		return err
	})
	if errors.Is(err, ErrTimeout) {
		return ObjectInfo{}, err
	}
	if err != nil {
		return ObjectInfo{}, fmt.Errorf("store: stat %s: %w", s.Describe(key), classify(err))
	}
	return ObjectInfo{Key: key, Size: a.Size, ETag: a.ETag}, nil
}

// Describe names an object for error messages: the store's redacted URI joined with the key.
func (s *Store) Describe(key string) string {
	return strings.TrimSuffix(s.uri, "/") + "/" + key
}

// Open returns a reader of the whole object; the caller closes it.
func (s *Store) Open(ctx context.Context, key string) (io.ReadCloser, error) {
	return s.OpenRange(ctx, key, 0, -1)
}

// OpenRange returns a reader of length bytes from offset (length < 0: to the end).
func (s *Store) OpenRange(ctx context.Context, key string, offset, length int64) (io.ReadCloser, error) {
	k, err := s.full(key)
	if err != nil {
		return nil, err
	}
	rctx, wd := newWatchdog(ctx, s.timeout, "read "+s.Describe(key))
	var r *blob.Reader
	err = wd.call(func() (err error) {
		r, err = s.bucket.NewRangeReader(rctx, k, offset, length, nil)
		return err
	})
	if errors.Is(err, ErrTimeout) {
		wd.stop()
		return nil, err
	}
	if err != nil {
		wd.stop()
		return nil, fmt.Errorf("store: read %s: %w", s.Describe(key), classify(err))
	}
	return &watchedReader{r: r, w: wd, name: s.Describe(key)}, nil
}

// Get reads a whole object.
func (s *Store) Get(ctx context.Context, key string) ([]byte, error) {
	r, err := s.Open(ctx, key)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	return io.ReadAll(r)
}

// Exists reports whether key exists.
func (s *Store) Exists(ctx context.Context, key string) (bool, error) {
	k, err := s.full(key)
	if err != nil {
		return false, err
	}
	var ok bool
	err = s.request(ctx, "stat "+s.Describe(key), func(ctx context.Context) (err error) {
		ok, err = s.bucket.Exists(ctx, k)
		return err
	})
	if errors.Is(err, ErrTimeout) {
		return false, err
	}
	if err != nil {
		return false, fmt.Errorf("store: stat %s: %w", s.Describe(key), classify(err))
	}
	return ok, nil
}

// Write streams an object through fn and commits it atomically when fn returns nil; if fn
// fails, nothing is written and fn's error is returned.
func (s *Store) Write(ctx context.Context, key string, fn func(w io.Writer) error) error {
	err := s.write(ctx, key, fn)
	if err == nil {
		committed("write", key)
	}
	return err
}

func (s *Store) write(ctx context.Context, key string, fn func(w io.Writer) error) error {
	k, err := s.full(key)
	if err != nil {
		return err
	}
	if s.dir != "" {
		return s.writeFile(k, fn)
	}
	wctx, wd := newWatchdog(ctx, s.timeout, "write "+s.Describe(key))
	defer wd.stop()
	var w *blob.Writer
	err = wd.call(func() (err error) {
		w, err = s.bucket.NewWriter(wctx, k, &blob.WriterOptions{ContentType: contentType(key)})
		return err
	})
	if errors.Is(err, ErrTimeout) {
		return err
	}
	if err != nil {
		return fmt.Errorf("store: write %s: %w", s.Describe(key), classify(err))
	}
	if err := fn(&watchedWriter{w: w, wd: wd}); err != nil {
		wd.cancel() // abort: the writer must not commit a partial object
		_ = w.Close()
		return err
	}
	committing("write", key)
	if err := wd.call(w.Close); err != nil {
		if errors.Is(err, ErrTimeout) {
			return err
		}
		return fmt.Errorf("store: write %s: %w", s.Describe(key), classify(err))
	}
	return nil
}

// Put writes data to key atomically.
func (s *Store) Put(ctx context.Context, key string, data []byte) error {
	return s.Write(ctx, key, func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
}

// Copy copies src to dst inside the store (server-side where the backend can).
func (s *Store) Copy(ctx context.Context, dst, src string) error {
	d, err := s.full(dst)
	if err != nil {
		return err
	}
	sk, err := s.full(src)
	if err != nil {
		return err
	}
	committing("copy", dst)
	err = s.request(ctx, "copy "+s.Describe(src), func(ctx context.Context) error { return s.bucket.Copy(ctx, d, sk, nil) })
	if errors.Is(err, ErrTimeout) {
		return err
	}
	if err != nil {
		return fmt.Errorf("store: copy %s to %s: %w", s.Describe(src), s.Describe(dst), classify(err))
	}
	committed("copy", dst)
	return nil
}

// Delete removes key; a missing key is not an error.
func (s *Store) Delete(ctx context.Context, key string) error {
	k, err := s.full(key)
	if err != nil {
		return err
	}
	committing("delete", key)
	err = s.request(ctx, "delete "+s.Describe(key), func(ctx context.Context) error { return s.bucket.Delete(ctx, k) })
	if errors.Is(err, ErrTimeout) {
		return err
	}
	if err != nil && gcerrors.Code(err) != gcerrors.NotFound {
		return fmt.Errorf("store: delete %s: %w", s.Describe(key), classify(err))
	}
	committed("delete", key)
	return nil
}

func contentType(key string) string {
	switch {
	case strings.HasSuffix(key, ".json"):
		return "application/json"
	case strings.HasSuffix(key, ".csv"):
		return "text/csv"
	case strings.HasSuffix(key, ".parquet"):
		return "application/vnd.apache.parquet"
	}
	return "application/octet-stream"
}

// ReaderAt adapts an object to io.ReaderAt with one ranged read per call, for the Parquet
// reader, which reads the footer and then only the column chunks it needs.
type ReaderAt struct {
	ctx  context.Context
	s    *Store
	key  string
	size int64
}

// NewReaderAt returns a ReaderAt over key and the object's size.
func (s *Store) NewReaderAt(ctx context.Context, key string) (*ReaderAt, int64, error) {
	info, err := s.Stat(ctx, key)
	if err != nil {
		return nil, 0, err
	}
	return &ReaderAt{ctx: ctx, s: s, key: key, size: info.Size}, info.Size, nil
}

// ReadAt implements io.ReaderAt.
func (r *ReaderAt) ReadAt(p []byte, off int64) (int, error) {
	if off >= r.size {
		return 0, io.EOF
	}
	n := int64(len(p))
	if off+n > r.size {
		n = r.size - off
	}
	rc, err := r.s.OpenRange(r.ctx, r.key, off, n)
	if err != nil {
		return 0, err
	}
	defer rc.Close()
	got, err := io.ReadFull(rc, p[:n])
	if err == nil && int64(got) < int64(len(p)) {
		err = io.EOF
	}
	return got, err
}
