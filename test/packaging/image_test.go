package packaging

import (
	"archive/tar"
	"bytes"
	"context"
	"crypto/sha256"
	"crypto/x509"
	"debug/elf"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"os/exec"
	"path"
	"path/filepath"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"almanac.dev/almanac/test/ociarchive"
	"almanac.dev/almanac/test/sandbox"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/pipeline"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/summary"
	"almanac.dev/almanac/trainer/synth"
)

// The images `make images` built (bin/almanac-*.oci.tar) are read here as OCI image layouts:
// index.json, the manifest, the config and the gzip'd layer tars, each blob checked against its
// digest. No container engine is needed; the trainer image is then run with its own binary, as
// uid 65532, on its own root file system mounted read-only, with only /tmp writable.

// nonRootUID is the user both images run as (images/root.sh, Dockerfile USER).
const nonRootUID = 65532

// imagesDir is where `make images` left the archives: $ALMANAC_IMAGES, which `make test`
// sets after building them. Unset (a plain `go test`), the image tests skip.
func imagesDir(t *testing.T) string {
	t.Helper()
	dir := os.Getenv("ALMANAC_IMAGES")
	if dir == "" {
		t.Skip("ALMANAC_IMAGES is not set: run `make images` and set it to bin/ (make test does both)")
	}
	return dir
}

// imageConfig is the part of an OCI image configuration the tests read (OCI image spec, config.md).
type imageConfig struct {
	Config ociarchive.ImageConfig `json:"config"`
	RootFS struct {
		DiffIDs []string `json:"diff_ids"`
	} `json:"rootfs"`
}

// entry is one file of an image's tree, or of a tree on disk, in the terms both share.
type entry struct {
	typ      byte   // tar.TypeReg, TypeDir, TypeSymlink
	mode     int64  // permission bits with setuid/setgid/sticky
	uid, gid int    // owner
	link     string // symlink target
	sha256   string // regular files
	size     int64
}

func (e entry) String() string {
	return fmt.Sprintf("type %c mode %#o owner %d:%d link %q size %d sha256 %.12s", e.typ, e.mode, e.uid, e.gid, e.link, e.size, e.sha256)
}

// ociImage is an image read from an OCI archive.
type ociImage struct {
	name        string
	archiveSize int64    // the .oci.tar file
	layerSizes  []int64  // compressed, as pushed to a registry
	layers      []string // digests
	unpacked    int64    // bytes of regular files
	config      imageConfig
	files       map[string]entry // "/etc/passwd" -> entry
	data        map[string][]byte
}

// readImage reads bin/<name>.oci.tar: its config, layers and files (unpacked only in memory).
func readImage(t *testing.T, dir, name string) *ociImage {
	t.Helper()
	file := filepath.Join(dir, name+".oci.tar")
	st, err := os.Stat(file)
	if err != nil {
		t.Fatalf("%v (ALMANAC_IMAGES is set, so `make images` should have written it)", err)
	}
	a, err := ociarchive.Read(file)
	if err != nil {
		t.Fatal(err)
	}
	img := &ociImage{name: name, archiveSize: st.Size(), files: map[string]entry{}, data: map[string][]byte{}}
	if err := a.Config(&img.config); err != nil {
		t.Fatal(err)
	}
	for _, l := range a.Manifest.Layers {
		img.layers = append(img.layers, l.Digest)
		img.layerSizes = append(img.layerSizes, l.Size)
		if l.MediaType != "application/vnd.oci.image.layer.v1.tar+gzip" {
			t.Fatalf("%s: layer %s has media type %s", file, l.Digest, l.MediaType)
		}
		lr, err := a.Layer(l)
		if err != nil {
			t.Fatal(err)
		}
		img.readLayer(t, lr)
	}
	return img
}

// readLayer adds a layer's files. Whiteouts (deletions by a later layer) are refused: images
// built FROM scratch with COPY only add files.
func (img *ociImage) readLayer(t *testing.T, tr *tar.Reader) {
	t.Helper()
	for {
		h, err := tr.Next()
		if errors.Is(err, io.EOF) {
			return
		}
		if err != nil {
			t.Fatalf("%s: layer: %v", img.name, err)
		}
		name := path.Clean("/" + h.Name)
		if strings.HasPrefix(path.Base(name), ".wh.") {
			t.Fatalf("%s: whiteout %s: a layer deletes files; this reader does not apply deletions", img.name, name)
		}
		e := entry{typ: h.Typeflag, mode: h.Mode & 0o7777, uid: h.Uid, gid: h.Gid, link: h.Linkname, size: h.Size}
		switch h.Typeflag {
		case tar.TypeReg:
			data, err := io.ReadAll(tr)
			if err != nil {
				t.Fatalf("%s: %s: %v", img.name, name, err)
			}
			sum := sha256.Sum256(data)
			e.sha256 = hex.EncodeToString(sum[:])
			img.data[name] = data
			img.unpacked += h.Size
		case tar.TypeDir, tar.TypeSymlink:
		default:
			t.Fatalf("%s: %s has tar type %c; the images hold only files, directories and symlinks", img.name, name, h.Typeflag)
		}
		img.files[name] = e
	}
}

// treeOnDisk describes the files under dir as image entries.
func treeOnDisk(t *testing.T, dir string) map[string]entry {
	t.Helper()
	out := map[string]entry{}
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		name := path.Clean("/" + filepath.ToSlash(rel))
		if name == "/" {
			return nil
		}
		info, err := d.Info()
		if err != nil {
			return err
		}
		st := info.Sys().(*syscall.Stat_t)
		e := entry{mode: int64(st.Mode & 0o7777), uid: int(st.Uid), gid: int(st.Gid)}
		switch {
		case d.IsDir():
			e.typ = tar.TypeDir
		case d.Type()&fs.ModeSymlink != 0:
			e.typ = tar.TypeSymlink
			e.mode = 0o777
			if e.link, err = os.Readlink(p); err != nil {
				return err
			}
		case d.Type().IsRegular():
			e.typ = tar.TypeReg
			data, err := os.ReadFile(p)
			if err != nil {
				return err
			}
			sum := sha256.Sum256(data)
			e.sha256, e.size = hex.EncodeToString(sum[:]), int64(len(data))
		default:
			return fmt.Errorf("%s: unexpected file type %v", p, d.Type())
		}
		out[name] = e
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// rootScriptTree runs images/root.sh on this machine, as `make images` does, and returns its tree.
func rootScriptTree(t *testing.T) map[string]entry {
	t.Helper()
	dest := filepath.Join(t.TempDir(), "root")
	cmd := exec.Command("sh", filepath.Join(repoRoot, "images", "root.sh"), dest)
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("images/root.sh: %v\n%s", err, out)
	}
	return treeOnDisk(t, dest)
}

// TestImages checks both images: their configuration, that they hold one static binary and
// exactly the tree images/root.sh writes (so no shell, no package manager, nothing else), that
// they share that tree as one identical base layer, and that the certificates and zoneinfo in it
// are usable. It logs the sizes.
func TestImages(t *testing.T) {
	dir := imagesDir(t)
	want := rootScriptTree(t)
	images := map[string]*ociImage{}
	for _, name := range []string{"almanac-controller", "almanac-trainer"} {
		img := readImage(t, dir, name)
		images[name] = img
		t.Run(name, func(t *testing.T) {
			c := img.config.Config
			if c.User != "65532:65532" {
				t.Errorf("User %q, want 65532:65532 (numeric, so runAsNonRoot can verify it)", c.User)
			}
			if !slices.Equal(c.Entrypoint, []string{"/" + name}) || len(c.Cmd) != 0 {
				t.Errorf("Entrypoint %q Cmd %q, want [/%s] and no Cmd", c.Entrypoint, c.Cmd, name)
			}
			for _, l := range []string{"org.opencontainers.image.source", "org.opencontainers.image.version", "org.opencontainers.image.revision"} {
				if c.Labels[l] == "" {
					t.Errorf("label %s is missing", l)
				}
			}
			bin := img.data["/"+name]
			if bin == nil {
				t.Fatalf("no /%s in the image", name)
			}
			if v := c.Labels["org.opencontainers.image.version"]; !bytes.Contains(bin, []byte(v)) {
				t.Errorf("/%s does not carry the version label's value %q (-X main.version)", name, v)
			}
			if e := img.files["/"+name]; e.mode&0o111 == 0 || e.uid != 0 {
				t.Errorf("/%s: %v, want executable and owned by root (not writable by the user)", name, e)
			}
			checkStatic(t, name, bin)

			// Everything but the binary is root.sh's tree, entry by entry.
			got := map[string]entry{}
			for p, e := range img.files {
				if p != "/"+name {
					got[p] = e
				}
			}
			compareTrees(t, got, want)

			// No shell: no other executable at all.
			for p, data := range img.data {
				if p != "/"+name && (bytes.HasPrefix(data, []byte("\x7fELF")) || bytes.HasPrefix(data, []byte("#!"))) {
					t.Errorf("%s is an executable; the image should hold only /%s", p, name)
				}
			}
			if len(img.layers) != 2 {
				t.Errorf("%d layers, want 2 (the shared tree, the binary)", len(img.layers))
			}
			t.Logf("%s: archive %.1f MB, layers %.1f MB compressed, %.1f MB unpacked (binary %.1f MB)",
				name, mb(img.archiveSize), mb(sum(img.layerSizes)), mb(img.unpacked), mb(int64(len(bin))))
		})
	}
	c, tr := images["almanac-controller"], images["almanac-trainer"]
	if len(c.layers) > 0 && len(tr.layers) > 0 && c.layers[0] != tr.layers[0] {
		t.Errorf("the images' first layers differ (%s, %s): the shared tree should be one identical layer", c.layers[0], tr.layers[0])
	}

	t.Run("certificates and zoneinfo", func(t *testing.T) {
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(tr.data["/etc/ssl/certs/ca-certificates.crt"]) {
			t.Fatal("/etc/ssl/certs/ca-certificates.crt (the first file Go's crypto/x509 reads on Linux) holds no certificate")
		}
		// Go's time package reads /usr/share/zoneinfo first; a zone with daylight saving time
		// shows the data is a real TZif file, not a stub.
		loc, err := time.LoadLocationFromTZData("Europe/London", tr.data["/usr/share/zoneinfo/Europe/London"])
		if err != nil {
			t.Fatalf("zoneinfo Europe/London: %v", err)
		}
		if _, off := time.Date(2026, 7, 1, 12, 0, 0, 0, loc).Zone(); off != 3600 {
			t.Errorf("Europe/London on 2026-07-01: offset %d s, want 3600 (BST)", off)
		}
		// Every symbolic link resolves inside the image.
		for p, e := range tr.files {
			if e.typ != tar.TypeSymlink {
				continue
			}
			target := e.link
			if !path.IsAbs(target) {
				target = path.Join(path.Dir(p), target)
			}
			if _, ok := tr.files[path.Clean(target)]; !ok {
				t.Errorf("symlink %s -> %s dangles in the image", p, e.link)
			}
		}
	})
}

// checkStatic fails unless data is a statically linked ELF executable (FROM scratch has no loader).
func checkStatic(t *testing.T, name string, data []byte) {
	t.Helper()
	f, err := elf.NewFile(bytes.NewReader(data))
	if err != nil {
		t.Fatalf("/%s: %v", name, err)
	}
	defer f.Close()
	for _, p := range f.Progs {
		if p.Type == elf.PT_INTERP || p.Type == elf.PT_DYNAMIC {
			t.Errorf("/%s is dynamically linked", name)
		}
	}
}

// compareTrees reports every path whose entry differs between got (the image) and want.
func compareTrees(t *testing.T, got, want map[string]entry) {
	t.Helper()
	var diffs []string
	for p, w := range want {
		g, ok := got[p]
		switch {
		case !ok:
			diffs = append(diffs, p+": missing from the image")
		case g != w:
			diffs = append(diffs, fmt.Sprintf("%s: image %v, root.sh %v", p, g, w))
		}
	}
	for p := range got {
		if _, ok := want[p]; !ok {
			diffs = append(diffs, p+": in the image, not written by root.sh")
		}
	}
	slices.Sort(diffs)
	if len(diffs) > 0 {
		if len(diffs) > 20 {
			diffs = append(diffs[:20], fmt.Sprintf("... %d more", len(diffs)-20))
		}
		t.Errorf("the image's tree is not root.sh's (%d paths compared):\n  %s", len(want), strings.Join(diffs, "\n  "))
	}
	if len(want) < 100 {
		t.Errorf("root.sh wrote only %d entries; zoneinfo alone has hundreds", len(want))
	}
}

func mb(n int64) float64 { return float64(n) / 1e6 }

func sum(xs []int64) int64 {
	var s int64
	for _, x := range xs {
		s += x
	}
	return s
}

// sandboxCommand returns the command that runs the image's entrypoint with args the way a
// restricted pod runs it (test/sandbox): the image's root read-only, as uid and gid 65532, work
// mounted on /tmp (the emptyDir), and only the image's PATH and env (NAME=value) in the
// environment.
func sandboxCommand(t *testing.T, img *sandbox.Image, work string, env []string, args ...string) *exec.Cmd {
	t.Helper()
	pathEnv := "PATH=/"
	for _, e := range img.Env {
		if strings.HasPrefix(e, "PATH=") {
			pathEnv = e
		}
	}
	cmd, err := sandbox.Spec{
		Root: img.Root, ReadOnlyRoot: true, UID: nonRootUID, GID: nonRootUID,
		Env:    append([]string{pathEnv}, env...),
		Mounts: []sandbox.Mount{{Source: work, Target: "/tmp"}},
		Argv:   append(slices.Clone(img.Entrypoint), args...),
	}.Command()
	if err != nil {
		t.Fatal(err)
	}
	return cmd
}

// unpackForSandbox skips unless this process can run sandboxes, then unpacks an image into a
// new directory of its own (the sandbox makes its mount points there) and returns it with an
// empty directory for /tmp (mode 1777, like the image's /tmp and an emptyDir).
func unpackForSandbox(t *testing.T, dir, name string) (img *sandbox.Image, work string) {
	t.Helper()
	if err := sandbox.Available(); err != nil {
		t.Skip(err)
	}
	base := t.TempDir()
	img, err := sandbox.Unpack(filepath.Join(dir, name+".oci.tar"), base)
	if err != nil {
		t.Fatal(err)
	}
	work = filepath.Join(base, "tmp")
	if err := os.Mkdir(work, 0o755); err != nil || os.Chmod(work, 0o777|fs.ModeSticky) != nil {
		t.Fatal(err)
	}
	return img, work
}

// TestTrainerImageRuns runs a whole run (plan, every train shard, publish) with the trainer
// binary of the image, inside the image's own root mounted read-only, as uid 65532, with only
// /tmp writable: the input generated by the image's binary and the output both live under
// /tmp, as they would on an emptyDir with the file:// store. The Kubernetes side of a run
// (Jobs, termination messages folded by the controller) is the e2e suite's, which runs the
// same binary built from source; this test shows the image's file system and user do not stop
// the binary.
func TestTrainerImageRuns(t *testing.T) {
	dir := imagesDir(t)
	img, work := unpackForSandbox(t, dir, "almanac-trainer")
	run := func(args ...string) (string, error) {
		t.Helper()
		cmd := sandboxCommand(t, img, work, nil, args...)
		var out bytes.Buffer
		cmd.Stdout, cmd.Stderr = &out, &out
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
		defer cancel()
		done := make(chan error, 1)
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		go func() { done <- cmd.Wait() }()
		select {
		case err := <-done:
			return out.String(), err
		case <-ctx.Done():
			_ = cmd.Process.Kill()
			<-done
			t.Fatalf("%v: still running after 5 minutes\n%s", args, out.String())
			return "", nil
		}
	}
	mustRun := func(args ...string) string {
		t.Helper()
		out, err := run(args...)
		if err != nil {
			t.Fatalf("almanac-trainer %s in the image: %v\n%s", strings.Join(args, " "), err, out)
		}
		return out
	}

	labels := img.Labels
	if got, want := strings.TrimSpace(mustRun("version")), "almanac-trainer "+labels["org.opencontainers.image.version"]+" ("+labels["org.opencontainers.image.revision"]+")"; got != want {
		t.Errorf("version in the image: %q, want %q (the labels)", got, want)
	}
	// The root is read-only: writing outside /tmp fails, and says why.
	if out, err := run("generate", "--output", "file:///fenwick-data/", "--items", "2", "--depots", "1"); err == nil || !strings.Contains(out, "read-only file system") {
		t.Errorf("generate outside /tmp: err %v, output %q; want a read-only file system error", err, out)
	}

	// Fenwick Lane Provisions: 3 depots x 20 items, 200 days, written by the image's binary.
	mustRun("generate", "--output", "file:///tmp/in/", "--items", "20", "--depots", "3", "--periods", "200", "--end", "2026-11-01", "--bad", "1")
	c := runconfig.Config{APIVersion: runconfig.APIVersion, Kind: runconfig.Kind,
		Run: "flp-image", Trigger: "Manual", ScheduledTime: time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC),
		Source: runconfig.Source{URI: "file:///tmp/in/", Format: "csv", Frequency: "Daily", NonNegative: true, Partitioning: runconfig.PartitionObjects,
			Columns: runconfig.Columns{Series: []string{synth.ColItem, synth.ColDepot}, Date: synth.ColDate, Value: synth.ColUnits, Covariates: []string{synth.ColPromo}}},
		Output:           runconfig.Output{URI: "file:///tmp/out", Format: "parquet"},
		Horizon:          14,
		QuantilePercents: []int{10, 50, 90},
		QuantileWidth:    runconfig.QuantileWidthBacktest,
		Models:           []runconfig.Model{{Family: models.FamilySeasonalNaive}, {Family: models.FamilyTheta}},
		Selection: runconfig.Selection{Metric: "MASE", BacktestOrigins: 2, BacktestStep: 7, BacktestRefit: runconfig.RefitEveryOrigin,
			Design: runconfig.DesignFixed, DesignCostPercent: 500},
		Sharding: runconfig.Sharding{TargetSeriesPerShard: 20},
		Drift:    runconfig.Drift{Metric: "MASE", ThresholdPercent: 130, MinEvaluatedPoints: 5},
	}
	b, err := json.Marshal(c)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(work, "config.json"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	readSummary := func(name string) summary.Summary {
		t.Helper()
		var s summary.Summary
		data, err := os.ReadFile(filepath.Join(work, name))
		if err == nil {
			err = json.Unmarshal(data, &s)
		}
		if err != nil {
			t.Fatalf("termination log %s: %v", name, err)
		}
		return s
	}
	mustRun("plan", "--config", "/tmp/config.json", "--termination-log", "/tmp/plan.summary")
	plan := readSummary("plan.summary")
	if plan.Shards != 3 {
		t.Fatalf("plan cut %d shards, want 3 (one per depot object)", plan.Shards)
	}
	trained := 0
	for i := range plan.Shards {
		mustRun("train", "--config", "/tmp/config.json", "--shard", fmt.Sprint(i), "--termination-log", "/tmp/train.summary")
		trained += readSummary("train.summary").Trained
	}
	mustRun("publish", "--config", "/tmp/config.json", "--termination-log", "/tmp/publish.summary")
	if s := readSummary("publish.summary"); s.Missing != 0 || s.Manifest == "" {
		t.Errorf("publish: %+v, want a manifest and nothing missing", s)
	}

	// The published run, read from outside.
	ctx := context.Background()
	st, err := store.Open(ctx, "file://"+filepath.Join(work, "out"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, ok, err := st.ReadLatest(ctx)
	if err != nil || !ok {
		t.Fatalf("latest.json: ok %v, %v", ok, err)
	}
	var m pipeline.Manifest
	if err := st.GetJSON(ctx, p.Manifest, &m); err != nil {
		t.Fatal(err)
	}
	if !m.Complete || m.Totals.Series.Trained != trained || trained != 59 {
		t.Errorf("manifest: complete %v, %d series trained (shards said %d); want complete and 59 (60 generated, 1 defective)",
			m.Complete, m.Totals.Series.Trained, trained)
	}
	// Everything the run wrote belongs to uid 65532: the binary did not run as root.
	err = filepath.WalkDir(filepath.Join(work, "out"), func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		info, err := d.Info()
		if err == nil && info.Sys().(*syscall.Stat_t).Uid != nonRootUID {
			err = fmt.Errorf("%s is owned by uid %d, want %d", p, info.Sys().(*syscall.Stat_t).Uid, nonRootUID)
		}
		return err
	})
	if err != nil {
		t.Error(err)
	}
}
