package store

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"regexp"
)

// Keys of the run layout under the output URI (see PROJECT-NOTES.md, Part 1, "Contracts").
const (
	LatestKey    = "latest.json"
	ManifestName = "MANIFEST.json"
	PlanName     = "plan.json"
	ConfigName   = "config.json"
	// UnitDoneName is written by train last in a unit's folder: the unit's files, counts and
	// checksums. Publish trusts a unit only when it exists and every checksum matches.
	UnitDoneName = "unit.json"
	// RejectedName is always CSV so a person can read it without tools.
	RejectedName = "rejected.csv"
)

var nameRE = regexp.MustCompile(`^[a-z0-9]([a-z0-9.-]{0,251}[a-z0-9])?$`)

// CheckName reports whether a run or unit name is a safe single key segment (lower-case
// letters, digits, '-' and '.', as Kubernetes object names).
func CheckName(kind, name string) error {
	if !nameRE.MatchString(name) || name == "." || name == ".." {
		return fmt.Errorf("%s name %q must be lower-case letters, digits, '-' or '.': %w", kind, name, ErrBadKey)
	}
	return nil
}

// RunKey returns runs/<run>/<name>.
func RunKey(run, name string) string { return "runs/" + run + "/" + name }

// UnitKey returns runs/<run>/units/<unit>/<name>.
func UnitKey(run, unit, name string) string { return "runs/" + run + "/units/" + unit + "/" + name }

// Pointer is latest.json: the newest published run and the checksum of its manifest, so a
// reader can tell the pointer and the run belong together.
type Pointer struct {
	Run            string `json:"run"`
	Manifest       string `json:"manifest"`
	ManifestSHA256 string `json:"manifestSHA256"`
}

// SHA256 returns the hex SHA-256 of b.
func SHA256(b []byte) string {
	h := sha256.Sum256(b)
	return hex.EncodeToString(h[:])
}

// GetJSON reads key and decodes it into v; decode errors name the object.
func (s *Store) GetJSON(ctx context.Context, key string, v any) error {
	b, err := s.Get(ctx, key)
	if err != nil {
		return err
	}
	if err := json.Unmarshal(b, v); err != nil {
		return fmt.Errorf("store: %s: %w", s.Describe(key), err)
	}
	return nil
}

// PutJSON encodes v (indented, stable field order) and writes it atomically; it returns the
// bytes written.
func (s *Store) PutJSON(ctx context.Context, key string, v any) ([]byte, error) {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("store: encode %s: %w", key, err)
	}
	b = append(b, '\n')
	return b, s.Put(ctx, key, b)
}

// ReadLatest returns the current pointer, or ok == false when nothing was published yet. It
// verifies the manifest it points at exists and matches the recorded checksum, so a caller
// never follows a pointer to an incomplete run.
func (s *Store) ReadLatest(ctx context.Context) (p Pointer, ok bool, err error) {
	b, err := s.Get(ctx, LatestKey)
	if errors.Is(err, ErrNotFound) {
		return Pointer{}, false, nil
	}
	if err != nil {
		return Pointer{}, false, err
	}
	if err := json.Unmarshal(b, &p); err != nil {
		return Pointer{}, false, fmt.Errorf("store: %s: %w: %w", s.Describe(LatestKey), ErrDamaged, err)
	}
	if err := CheckName("run", p.Run); err != nil {
		return Pointer{}, false, fmt.Errorf("store: %s: %w: %w", s.Describe(LatestKey), ErrDamaged, err)
	}
	m, err := s.Get(ctx, p.Manifest)
	if errors.Is(err, ErrNotFound) || errors.Is(err, ErrBadKey) {
		return Pointer{}, false, fmt.Errorf("store: %s points at %s: %w: %w", s.Describe(LatestKey), p.Manifest, ErrDamaged, err)
	}
	if err != nil {
		return Pointer{}, false, fmt.Errorf("store: %s points at %s: %w", s.Describe(LatestKey), p.Manifest, err)
	}
	if got := SHA256(m); got != p.ManifestSHA256 {
		return Pointer{}, false, fmt.Errorf("store: %s: manifest checksum %s, pointer says %s: %w", s.Describe(p.Manifest), got, p.ManifestSHA256, ErrDamaged)
	}
	return p, true, nil
}

// WriteLatest replaces latest.json atomically after checking that the manifest it names exists
// and has the given checksum.
func (s *Store) WriteLatest(ctx context.Context, p Pointer) error {
	m, err := s.Get(ctx, p.Manifest)
	if err != nil {
		return fmt.Errorf("store: refusing to point latest at %s: %w", p.Manifest, err)
	}
	if got := SHA256(m); got != p.ManifestSHA256 {
		return fmt.Errorf("store: refusing to point latest at %s: checksum %s, want %s", p.Manifest, got, p.ManifestSHA256)
	}
	_, err = s.PutJSON(ctx, LatestKey, p)
	return err
}
