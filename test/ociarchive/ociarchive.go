// Package ociarchive reads an OCI image layout packed in a tar file, what `make images` writes
// (bin/<name>.oci.tar): the blobs, each checked against its sha256 digest, the index's single
// manifest, the image config and the gzip layers (OCI image-spec v1.1: image layout, index,
// manifest, layer media types). The image tests (test/packaging) and the e2e suite's
// image-binary mode (test/e2e) share it.
package ociarchive

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
	"path"
	"strings"
)

// Descriptor points at a blob (OCI image-spec, descriptor).
type Descriptor struct {
	MediaType string `json:"mediaType"`
	Digest    string `json:"digest"`
	Size      int64  `json:"size"`
}

// Manifest is an image manifest: the config blob and the layers, base first.
type Manifest struct {
	Config Descriptor
	Layers []Descriptor
}

// Archive is an OCI layout read whole into memory (the images are tens of MB).
type Archive struct {
	Path     string
	Manifest Manifest
	blobs    map[string][]byte
}

// Read reads file and its index's manifest; an index with other than one manifest, or a
// manifest blob that is missing or does not match its digest, is an error naming the file.
func Read(file string) (*Archive, error) {
	f, err := os.Open(file)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	a := &Archive{Path: file, blobs: map[string][]byte{}}
	tr := tar.NewReader(f)
	for {
		h, err := tr.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w", file, err)
		}
		if h.Typeflag == tar.TypeReg {
			b, err := io.ReadAll(tr)
			if err != nil {
				return nil, fmt.Errorf("%s: %s: %w", file, h.Name, err)
			}
			a.blobs[path.Clean(h.Name)] = b
		}
	}
	var index struct{ Manifests []Descriptor }
	if err := json.Unmarshal(a.blobs["index.json"], &index); err != nil || len(index.Manifests) != 1 {
		return nil, fmt.Errorf("%s: index.json: %v, %d manifests (want 1)", file, err, len(index.Manifests))
	}
	b, err := a.Blob(index.Manifests[0].Digest)
	if err != nil {
		return nil, err
	}
	if err := json.Unmarshal(b, &a.Manifest); err != nil {
		return nil, fmt.Errorf("%s: manifest: %w", file, err)
	}
	return a, nil
}

// Blob returns the blob of a "sha256:<hex>" digest, checked against it.
func (a *Archive) Blob(digest string) ([]byte, error) {
	algo, hexDigest, _ := strings.Cut(digest, ":")
	b, ok := a.blobs["blobs/"+algo+"/"+hexDigest]
	if !ok || algo != "sha256" {
		return nil, fmt.Errorf("%s: blob %s missing", a.Path, digest)
	}
	if sum := sha256.Sum256(b); hex.EncodeToString(sum[:]) != hexDigest {
		return nil, fmt.Errorf("%s: blob %s does not match its digest", a.Path, digest)
	}
	return b, nil
}

// Config decodes the image config blob into v.
func (a *Archive) Config(v any) error {
	b, err := a.Blob(a.Manifest.Config.Digest)
	if err != nil {
		return err
	}
	if err := json.Unmarshal(b, v); err != nil {
		return fmt.Errorf("%s: config: %w", a.Path, err)
	}
	return nil
}

// Layer returns a reader over the files of a gzip layer.
func (a *Archive) Layer(l Descriptor) (*tar.Reader, error) {
	b, err := a.Blob(l.Digest)
	if err != nil {
		return nil, err
	}
	zr, err := gzip.NewReader(bytes.NewReader(b))
	if err != nil {
		return nil, fmt.Errorf("%s: layer %s: %w", a.Path, l.Digest, err)
	}
	return tar.NewReader(zr), nil
}
