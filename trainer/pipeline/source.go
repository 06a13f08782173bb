package pipeline

import (
	"context"
	"errors"
	"fmt"
	"net/url"
	"path"
	"strings"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

// source is the opened input: the store and, when the URI names one object, its key.
type source struct {
	st     *store.Store
	single string // key of the one object, or "" for a prefix
	cfg    runconfig.Source
}

// openSource opens the source URI. A URI ending in "/" is a prefix whose objects with the
// format's extension (".csv" or ".parquet", any case) are the input; otherwise the URI names
// one object and its parent is the store.
func openSource(ctx context.Context, src runconfig.Source) (*source, error) {
	u, err := url.Parse(src.URI)
	if err != nil {
		return nil, fmt.Errorf("source.uri: %s: %w", store.Redact(src.URI), store.ErrBadURI)
	}
	single := ""
	if !strings.HasSuffix(u.Path, "/") {
		dir, file := path.Split(u.Path)
		if file == "" {
			return nil, fmt.Errorf("source.uri: %s names no object: %w", store.Redact(src.URI), store.ErrBadURI)
		}
		single = file
		u.Path = dir
		if u.Path == "" {
			u.Path = "/"
		}
	}
	st, err := store.OpenExisting(ctx, u.String())
	if errors.Is(err, store.ErrNotFound) {
		// No such prefix or folder: the configuration names input that is not there.
		return nil, fmt.Errorf("source.uri: %w: %w", ErrConfig, err)
	}
	if err != nil {
		// Other failures to open it (a symlink loop, a folder that cannot be read) are input errors.
		return nil, inputErr(err)
	}
	return &source{st: st, single: single, cfg: src}, nil
}

// ScanInput streams every row of the input src names to fn, object by object in key order,
// listed and read exactly as plan and train read them. It is for tools that read a run's
// history outside the Jobs (the report page).
func ScanInput(ctx context.Context, src runconfig.Source, fn func(ingest.Row) error) error {
	s, err := openSource(ctx, src)
	if err != nil {
		return err
	}
	defer s.st.Close()
	objs, err := s.list(ctx)
	if err != nil {
		return err
	}
	for _, o := range objs {
		if err := s.scan(ctx, o.Key, nil, fn); err != nil {
			return err
		}
	}
	return nil
}

// list returns the input objects, sorted by key.
func (s *source) list(ctx context.Context) ([]Object, error) {
	if s.single != "" {
		info, err := s.st.Stat(ctx, s.single)
		if err != nil {
			return nil, inputErr(err)
		}
		return []Object{{Key: s.single, Size: info.Size, ETag: info.ETag}}, nil
	}
	objs, err := s.st.List(ctx, "")
	if err != nil {
		return nil, storageErr(err)
	}
	ext := "." + s.cfg.Format
	var out []Object
	for _, o := range objs {
		if strings.HasSuffix(strings.ToLower(o.Key), ext) {
			out = append(out, Object{Key: o.Key, Size: o.Size})
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%s: no %s objects: %w", s.st.String(), ext, ingest.ErrBrokenInput)
	}
	// Listing gives no version tag; one metadata request per object does (plan reads every
	// object anyway).
	for i, o := range out {
		info, err := s.st.Stat(ctx, o.Key)
		if err != nil {
			return nil, inputErr(err)
		}
		out[i].Size, out[i].ETag = info.Size, info.ETag
	}
	return out, nil
}

// unchanged checks that the object is still the one plan listed: same size and, when both
// sides have one, the same version tag. A changed object is broken input for this run: its
// rows may no longer match the units and counts the plan cut, so a shard reading it would
// silently forecast other series than planned.
func (s *source) unchanged(ctx context.Context, o Object) error {
	info, err := s.st.Stat(ctx, o.Key)
	if err != nil {
		return inputErr(err)
	}
	if info.Size != o.Size || (o.ETag != "" && info.ETag != "" && info.ETag != o.ETag) {
		return fmt.Errorf("%s changed since plan (size %d, version %s; plan recorded size %d, version %s): %w",
			s.st.Describe(o.Key), info.Size, orNone(info.ETag), o.Size, orNone(o.ETag), ingest.ErrBrokenInput)
	}
	return nil
}

// scan streams the rows of one object (Parquet: the row groups in groups, nil for all).
func (s *source) scan(ctx context.Context, key string, groups *ingest.GroupRange, fn func(ingest.Row) error) error {
	name := s.st.Describe(key)
	if s.cfg.Format == "parquet" {
		ra, size, err := s.st.NewReaderAt(ctx, key)
		if err != nil {
			return inputErr(err)
		}
		return inputErr(ingest.ScanParquet(ctx, ra, size, name, s.cfg, groups, fn))
	}
	r, err := s.st.Open(ctx, key)
	if err != nil {
		return inputErr(err)
	}
	defer r.Close()
	return inputErr(ingest.ScanCSV(ctx, r, name, s.cfg, fn))
}

// rowGroups returns a Parquet object's row groups.
func (s *source) rowGroups(ctx context.Context, key string) ([]ingest.GroupInfo, error) {
	ra, size, err := s.st.NewReaderAt(ctx, key)
	if err != nil {
		return nil, inputErr(err)
	}
	g, err := ingest.RowGroups(ra, size, s.st.Describe(key))
	return g, inputErr(err)
}

// ErrStorage marks a storage failure that may pass (a timeout, a refused connection, a 5xx);
// the command exits with exitcode.Transient.
var ErrStorage = errors.New("storage failure")

// ErrConfig marks a configuration error; the command exits with exitcode.Config.
var ErrConfig = errors.New("configuration error")

// storageErr classifies an error from the store: the store's own sentinels pass through,
// anything else is marked ErrStorage.
func storageErr(err error) error {
	switch {
	case err == nil:
		return nil
	case errors.Is(err, store.ErrBadURI), errors.Is(err, store.ErrBadKey), errors.Is(err, store.ErrPermission),
		errors.Is(err, store.ErrNotFound), errors.Is(err, ErrStorage), errors.Is(err, ingest.ErrBrokenInput), errors.Is(err, store.ErrDamaged),
		errors.Is(err, ingest.ErrColumns),
		errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		return err
	}
	return fmt.Errorf("%w: %w", ErrStorage, err)
}

// inputErr classifies an error reading input: an object that plan listed and that is now
// gone is broken input (retrying the shard cannot bring it back); the rest as storageErr.
func inputErr(err error) error {
	if errors.Is(err, store.ErrNotFound) && !errors.Is(err, ingest.ErrBrokenInput) {
		return fmt.Errorf("%w: %w", ingest.ErrBrokenInput, err)
	}
	return storageErr(err)
}
