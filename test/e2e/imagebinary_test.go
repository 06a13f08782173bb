package e2e

import (
	"archive/tar"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path"
	"path/filepath"
	"strings"
	"testing"

	"almanac.dev/almanac/test/ociarchive"
)

// imageEntrypoint writes the entrypoint binary of an OCI image archive (what `make images`
// writes: an OCI layout in a tar, one manifest, gzip layers) to dst and returns the
// entrypoint's path in the image. With ALMANAC_IMAGES set, the suite runs the scenarios with
// the trainer binary taken from bin/almanac-trainer.oci.tar instead of one built from source.
// Every blob is checked against its digest; the last layer holding the path wins.
func imageEntrypoint(archive, dst string) (string, error) {
	a, err := ociarchive.Read(archive)
	if err != nil {
		return "", err
	}
	var config struct {
		Config struct{ Entrypoint []string }
	}
	if err := a.Config(&config); err != nil {
		return "", err
	}
	if len(config.Config.Entrypoint) == 0 {
		return "", fmt.Errorf("%s: the image has no entrypoint", archive)
	}
	entry := config.Config.Entrypoint[0]
	var found []byte
	for _, l := range a.Manifest.Layers {
		lr, err := a.Layer(l)
		if err != nil {
			return "", err
		}
		for {
			h, err := lr.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				return "", fmt.Errorf("%s: layer %s: %w", archive, l.Digest, err)
			}
			if h.Typeflag == tar.TypeReg && "/"+strings.TrimPrefix(path.Clean(h.Name), "./") == entry {
				if found, err = io.ReadAll(lr); err != nil {
					return "", err
				}
			}
		}
	}
	if found == nil {
		return "", fmt.Errorf("%s: entrypoint %s is not in any layer", archive, entry)
	}
	if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
		return "", err
	}
	return entry, os.WriteFile(dst, found, 0o755)
}

// TestImageEntrypoint takes the trainer out of its image and runs `version`: the binary the
// scenarios run under ALMANAC_IMAGES is the image's, whole and executable.
func TestImageEntrypoint(t *testing.T) {
	images := os.Getenv("ALMANAC_IMAGES")
	if images == "" {
		t.Skip("ALMANAC_IMAGES is not set (make test sets it after make images)")
	}
	dst := filepath.Join(t.TempDir(), "almanac-trainer")
	entry, err := imageEntrypoint(filepath.Join(images, "almanac-trainer.oci.tar"), dst)
	if err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(dst, "version").CombinedOutput()
	if err != nil || !strings.Contains(string(out), "almanac-trainer") {
		t.Fatalf("%s version: %v: %s", entry, err, out)
	}
	if _, err := imageEntrypoint(filepath.Join(images, "absent.oci.tar"), dst); err == nil {
		t.Fatal("a missing archive gave no error")
	}
}
