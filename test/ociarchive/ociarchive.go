// Package ociarchive reads an OCI image layout packed in a tar file, what `make images` writes
// (bin/<name>.oci.tar): the blobs, each checked against its sha256 digest, the index's single
// manifest, the image config and the gzip layers (OCI image-spec v1.1: image layout, index,
// manifest, layer media types), and unpacks its layers into a directory. The image tests
// (test/packaging), the sandbox they and localnode run images in (test/sandbox) and the e2e
// suite's image mode (test/e2e) share it.
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
	"io/fs"
	"os"
	"path"
	"path/filepath"
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

// ImageConfig is the part of an image configuration a runtime reads to start the image, and
// the image's labels (OCI image-spec v1.1, config.md: config.User, Entrypoint, Cmd, Env,
// WorkingDir, Labels).
type ImageConfig struct {
	User       string            `json:"User"`
	Entrypoint []string          `json:"Entrypoint"`
	Cmd        []string          `json:"Cmd"`
	Env        []string          `json:"Env"`
	WorkingDir string            `json:"WorkingDir"`
	Labels     map[string]string `json:"Labels"`
}

// RuntimeConfig returns the image's runtime configuration.
func (a *Archive) RuntimeConfig() (ImageConfig, error) {
	var c struct {
		Config ImageConfig `json:"config"`
	}
	err := a.Config(&c)
	return c.Config, err
}

// Unpack writes the layers, base first, into root (which must exist): regular files,
// directories and symbolic links, with the modes the layers record, and with their owners when
// the caller is root, as a container runtime is (otherwise the caller owns them, as with tar).
// A later layer's file replaces an earlier one. A
// whiteout (a deletion by a later layer, OCI image-spec layer.md), another entry type, a name
// leaving root or a path through a symbolic link of the tree is an error naming the archive and
// the entry: the images `make images` builds FROM scratch with COPY only add files.
func (a *Archive) Unpack(root string) error {
	for _, l := range a.Manifest.Layers {
		tr, err := a.Layer(l)
		if err != nil {
			return err
		}
		for {
			h, err := tr.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				return fmt.Errorf("%s: layer %s: %w", a.Path, l.Digest, err)
			}
			if err := unpackEntry(root, h, tr); err != nil {
				return fmt.Errorf("%s: layer %s: %s: %w", a.Path, l.Digest, h.Name, err)
			}
		}
	}
	return nil
}

// unpackEntry writes one tar entry under root.
func unpackEntry(root string, h *tar.Header, r io.Reader) error {
	name := path.Clean("/" + h.Name)
	if strings.HasPrefix(path.Base(name), ".wh.") {
		return errors.New("whiteout: this reader does not apply deletions")
	}
	if name == "/" {
		return nil
	}
	// Every parent must be a real directory of the tree, so that nothing is written outside root.
	dst := root
	for _, part := range strings.Split(path.Dir(name), "/")[1:] {
		if part == "" {
			continue
		}
		dst = filepath.Join(dst, part)
		if st, err := os.Lstat(dst); err == nil && !st.IsDir() {
			return fmt.Errorf("parent %s is not a directory", dst)
		}
	}
	dst = filepath.Join(root, filepath.FromSlash(name))
	if st, err := os.Lstat(dst); err == nil && !(st.IsDir() && h.Typeflag == tar.TypeDir) {
		if err := os.RemoveAll(dst); err != nil {
			return err
		}
	}
	var err error
	switch h.Typeflag {
	case tar.TypeDir:
		err = os.MkdirAll(dst, 0o755)
	case tar.TypeReg:
		var f *os.File
		if f, err = os.OpenFile(dst, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, 0o600); err == nil {
			_, err = io.Copy(f, r)
			if cerr := f.Close(); err == nil {
				err = cerr
			}
		}
	case tar.TypeSymlink:
		err = os.Symlink(h.Linkname, dst)
	default:
		return fmt.Errorf("tar type %c: the images hold only files, directories and symbolic links", h.Typeflag)
	}
	if err == nil && os.Geteuid() == 0 {
		err = os.Lchown(dst, h.Uid, h.Gid)
	}
	if err == nil && h.Typeflag != tar.TypeSymlink {
		err = os.Chmod(dst, FileMode(h.Mode))
	}
	return err
}

// FileMode converts a tar mode (permission bits with setuid 04000, setgid 02000 and sticky
// 01000, as in POSIX ustar) to an fs.FileMode.
func FileMode(mode int64) fs.FileMode {
	m := fs.FileMode(mode & 0o777)
	if mode&0o4000 != 0 {
		m |= fs.ModeSetuid
	}
	if mode&0o2000 != 0 {
		m |= fs.ModeSetgid
	}
	if mode&0o1000 != 0 {
		m |= fs.ModeSticky
	}
	return m
}
