package e2e

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"almanac.dev/almanac/test/sandbox"
)

// unpackImage unpacks an OCI image archive (what `make images` writes: an OCI layout in a tar,
// one manifest, gzip layers, every blob checked against its digest) into dir/rootfs and checks
// that its entrypoint is a file of the image. With ALMANAC_IMAGES set, the suite runs the
// scenarios with the trainer image's binary instead of one built from source, and, as root,
// runs trainerImage pods inside the image's root.
func unpackImage(archive, dir string) (*sandbox.Image, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	img, err := sandbox.Unpack(archive, dir)
	if err != nil {
		return nil, err
	}
	if len(img.Entrypoint) == 0 {
		return nil, fmt.Errorf("%s: the image has no entrypoint", archive)
	}
	if st, err := os.Stat(filepath.Join(img.Root, img.Entrypoint[0])); err != nil || !st.Mode().IsRegular() || st.Mode()&0o111 == 0 {
		return nil, fmt.Errorf("%s: entrypoint %s is not an executable file of the image", archive, img.Entrypoint[0])
	}
	return img, nil
}

// TestImageEntrypoint unpacks the trainer image and runs its entrypoint's `version` on the
// host: the binary the scenarios run under ALMANAC_IMAGES is the image's, whole and executable.
func TestImageEntrypoint(t *testing.T) {
	images := os.Getenv("ALMANAC_IMAGES")
	if images == "" {
		t.Skip("ALMANAC_IMAGES is not set (make test sets it after make images)")
	}
	img, err := unpackImage(filepath.Join(images, "almanac-trainer.oci.tar"), t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(filepath.Join(img.Root, img.Entrypoint[0]), "version").CombinedOutput()
	if err != nil || !strings.Contains(string(out), "almanac-trainer") {
		t.Fatalf("%s version: %v: %s", img.Entrypoint[0], err, out)
	}
	if _, err := unpackImage(filepath.Join(images, "absent.oci.tar"), t.TempDir()); err == nil {
		t.Fatal("a missing archive gave no error")
	}
}
