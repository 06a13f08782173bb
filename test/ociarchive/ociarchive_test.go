package ociarchive

import (
	"archive/tar"
	"bytes"
	"compress/gzip"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// file is one tar entry of a test layer.
type file struct {
	name, body, link string
	typ              byte
	mode             int64
}

// writeArchive writes an OCI layout tar (OCI image-spec v1.1: index.json, blobs/sha256/<hex>)
// with one manifest, a config naming entrypoint, and one gzip layer per element of layers.
// corrupt, when set, replaces the config blob's content after its digest was taken.
func writeArchive(t *testing.T, layers [][]file, corrupt bool) string {
	t.Helper()
	blobs := map[string][]byte{}
	put := func(b []byte) Descriptor {
		sum := sha256.Sum256(b)
		d := Descriptor{Digest: "sha256:" + hex.EncodeToString(sum[:]), Size: int64(len(b))}
		blobs["blobs/sha256/"+hex.EncodeToString(sum[:])] = b
		return d
	}
	var m Manifest
	for _, files := range layers {
		var buf bytes.Buffer
		zw := gzip.NewWriter(&buf)
		tw := tar.NewWriter(zw)
		for _, f := range files {
			h := &tar.Header{Name: f.name, Typeflag: f.typ, Mode: f.mode, Linkname: f.link, Size: int64(len(f.body)), Uid: 0, Gid: 0}
			if err := tw.WriteHeader(h); err != nil {
				t.Fatal(err)
			}
			if _, err := tw.Write([]byte(f.body)); err != nil {
				t.Fatal(err)
			}
		}
		if err := tw.Close(); err != nil || zw.Close() != nil {
			t.Fatal(err)
		}
		d := put(buf.Bytes())
		d.MediaType = "application/vnd.oci.image.layer.v1.tar+gzip"
		m.Layers = append(m.Layers, d)
	}
	config, _ := json.Marshal(map[string]any{"config": map[string]any{"User": "65532:65532", "Entrypoint": []string{"/almanac-trainer"}, "Env": []string{"PATH=/"}}})
	m.Config = put(config)
	if corrupt {
		blobs["blobs/sha256/"+strings.TrimPrefix(m.Config.Digest, "sha256:")] = []byte(`{"config":{}}`)
	}
	mb, _ := json.Marshal(m)
	md := put(mb)
	index, _ := json.Marshal(map[string]any{"schemaVersion": 2, "manifests": []Descriptor{md}})
	blobs["index.json"] = index
	var out bytes.Buffer
	tw := tar.NewWriter(&out)
	for name, b := range blobs {
		if err := tw.WriteHeader(&tar.Header{Name: name, Typeflag: tar.TypeReg, Mode: 0o644, Size: int64(len(b))}); err != nil {
			t.Fatal(err)
		}
		if _, err := tw.Write(b); err != nil {
			t.Fatal(err)
		}
	}
	if err := tw.Close(); err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "image.oci.tar")
	if err := os.WriteFile(p, out.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestUnpack: files, directories and links land with their modes (setuid, setgid and sticky
// bits included), a later layer replaces a file, and the runtime config is read.
func TestUnpack(t *testing.T) {
	p := writeArchive(t, [][]file{
		{
			{name: "tmp/", typ: tar.TypeDir, mode: 0o1777},
			{name: "etc/", typ: tar.TypeDir, mode: 0o755},
			{name: "etc/passwd", typ: tar.TypeReg, mode: 0o644, body: "nonroot:x:65532:65532::/nonexistent:/sbin/nologin\n"},
			{name: "etc/old", typ: tar.TypeReg, mode: 0o600, body: "first"},
			{name: "etc/alias", typ: tar.TypeSymlink, link: "passwd"},
		},
		{
			{name: "etc/old", typ: tar.TypeReg, mode: 0o640, body: "second"},
			{name: "almanac-trainer", typ: tar.TypeReg, mode: 0o755, body: "\x7fELF"},
		},
	}, false)
	a, err := Read(p)
	if err != nil {
		t.Fatal(err)
	}
	c, err := a.RuntimeConfig()
	if err != nil || c.User != "65532:65532" || len(c.Entrypoint) != 1 || c.Entrypoint[0] != "/almanac-trainer" {
		t.Fatalf("runtime config %+v, %v", c, err)
	}
	root := t.TempDir()
	if err := a.Unpack(root); err != nil {
		t.Fatal(err)
	}
	for name, want := range map[string]os.FileMode{
		"tmp":             os.ModeDir | os.ModeSticky | 0o777,
		"etc/passwd":      0o644,
		"etc/old":         0o640,
		"almanac-trainer": 0o755,
	} {
		st, err := os.Lstat(filepath.Join(root, name))
		if err != nil {
			t.Fatal(err)
		}
		if st.Mode() != want {
			t.Errorf("%s: mode %v, want %v", name, st.Mode(), want)
		}
	}
	if b, _ := os.ReadFile(filepath.Join(root, "etc", "old")); string(b) != "second" {
		t.Errorf("etc/old holds %q, want the later layer's", b)
	}
	if l, err := os.Readlink(filepath.Join(root, "etc", "alias")); err != nil || l != "passwd" {
		t.Errorf("etc/alias -> %q (%v), want passwd", l, err)
	}
}

// TestUnpackRefuses: a whiteout, a path through a symbolic link of the tree, a device file
// and a blob that does not match its digest are errors naming what is wrong.
func TestUnpackRefuses(t *testing.T) {
	for name, tc := range map[string]struct {
		layers [][]file
		want   string
	}{
		"whiteout":       {[][]file{{{name: "etc/.wh.passwd", typ: tar.TypeReg, mode: 0o644}}}, "etc/.wh.passwd: whiteout"},
		"through a link": {[][]file{{{name: "up", typ: tar.TypeSymlink, link: "/"}, {name: "up/escaped", typ: tar.TypeReg, mode: 0o644}}}, "up/escaped: parent"},
		"device":         {[][]file{{{name: "dev/null", typ: tar.TypeChar, mode: 0o666}}}, "dev/null: tar type"},
	} {
		t.Run(name, func(t *testing.T) {
			a, err := Read(writeArchive(t, tc.layers, false))
			if err != nil {
				t.Fatal(err)
			}
			root := t.TempDir()
			err = a.Unpack(root)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want one containing %q", err, tc.want)
			}
			if _, err := os.Stat("/escaped"); err == nil {
				t.Fatal("a file was written outside the root")
			}
		})
	}
	a, err := Read(writeArchive(t, [][]file{{}}, true))
	if err == nil {
		_, err = a.RuntimeConfig()
	}
	if err == nil || !strings.Contains(err.Error(), "does not match its digest") {
		t.Fatalf("corrupt config blob: %v, want a digest error", err)
	}
}
