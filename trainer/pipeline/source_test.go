package pipeline

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

// A mistyped input folder must be reported as missing, not read as an empty portfolio, and
// reading must not create it.
func TestMissingInputFolderIsNotFound(t *testing.T) {
	missing := filepath.Join(t.TempDir(), "histroy") + "/"
	src := runconfig.Source{URI: "file://" + missing, Format: "csv", Frequency: "Daily"}
	err := ScanInput(context.Background(), src, func(ingest.Row) error { return nil })
	if !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("ScanInput(missing folder) = %v, want store.ErrNotFound", err)
	}
	if _, serr := os.Stat(missing); !errors.Is(serr, os.ErrNotExist) {
		t.Fatalf("reading the input created %s (stat: %v)", missing, serr)
	}
}
