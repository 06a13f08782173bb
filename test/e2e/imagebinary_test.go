package e2e

import (
	"archive/tar"
	"bytes"
	"compress/gzip"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path"
	"path/filepath"
	"strings"
	"testing"
)

// imageEntrypoint writes the entrypoint binary of an OCI image archive (what `make images`
// writes: an OCI layout in a tar, one manifest, gzip layers) to dst and returns the
// entrypoint's path in the image. With ALMANAC_IMAGES set, the suite runs the scenarios with
// the trainer binary taken from bin/almanac-trainer.oci.tar instead of one built from source.
// Every blob is checked against its digest; the last layer holding the path wins.
func imageEntrypoint(archive, dst string) (string, error) {
	f, err := os.Open(archive)
	if err != nil {
		return "", err
	}
	defer f.Close()
	blobs := map[string][]byte{}
	tr := tar.NewReader(f)
	for {
		h, err := tr.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return "", fmt.Errorf("%s: %w", archive, err)
		}
		if h.Typeflag == tar.TypeReg {
			b, err := io.ReadAll(tr)
			if err != nil {
				return "", fmt.Errorf("%s: %s: %w", archive, h.Name, err)
			}
			blobs[path.Clean(h.Name)] = b
		}
	}
	blob := func(digest string) ([]byte, error) {
		algo, hexDigest, _ := strings.Cut(digest, ":")
		b, ok := blobs["blobs/"+algo+"/"+hexDigest]
		if sum := sha256.Sum256(b); !ok || algo != "sha256" || hex.EncodeToString(sum[:]) != hexDigest {
			return nil, fmt.Errorf("%s: blob %s missing or not matching its digest", archive, digest)
		}
		return b, nil
	}
	type descriptor struct{ Digest string }
	var index struct{ Manifests []descriptor }
	if err := json.Unmarshal(blobs["index.json"], &index); err != nil || len(index.Manifests) != 1 {
		return "", fmt.Errorf("%s: index.json: %v, %d manifests (want 1)", archive, err, len(index.Manifests))
	}
	var manifest struct {
		Config descriptor
		Layers []descriptor
	}
	var config struct {
		Config struct{ Entrypoint []string }
	}
	b, err := blob(index.Manifests[0].Digest)
	if err == nil {
		err = json.Unmarshal(b, &manifest)
	}
	if err == nil {
		b, err = blob(manifest.Config.Digest)
	}
	if err == nil {
		err = json.Unmarshal(b, &config)
	}
	if err != nil {
		return "", fmt.Errorf("%s: manifest or config: %w", archive, err)
	}
	if len(config.Config.Entrypoint) == 0 {
		return "", fmt.Errorf("%s: the image has no entrypoint", archive)
	}
	entry := config.Config.Entrypoint[0]
	var found []byte
	for _, l := range manifest.Layers {
		b, err := blob(l.Digest)
		if err != nil {
			return "", err
		}
		zr, err := gzip.NewReader(bytes.NewReader(b))
		if err != nil {
			return "", fmt.Errorf("%s: layer %s: %w", archive, l.Digest, err)
		}
		lr := tar.NewReader(zr)
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
