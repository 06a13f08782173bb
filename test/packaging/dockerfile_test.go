package packaging

import (
	"bufio"
	"bytes"
	"debug/elf"
	"encoding/json"
	"os"
	"os/exec"
	"path"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// No container engine runs here, so the Dockerfile is checked by reading it: its targets,
// users and entrypoints, and that its go build lines are the Makefile's, which CI runs.

// instruction is one Dockerfile instruction, continuation lines joined.
type instruction struct {
	cmd  string // upper case: FROM, RUN, COPY...
	args string
}

// globalArgs names the instructions before the first FROM (the global ARGs).
const globalArgs = "(global)"

// stage is one FROM ... AS name block.
type stage struct {
	name, from string
	body       []instruction
}

// parseDockerfile splits a Dockerfile into stages. It knows only what this Dockerfile uses:
// comments, backslash continuations, and FROM image [AS name].
func parseDockerfile(t *testing.T) []stage {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(repoRoot, "Dockerfile"))
	if err != nil {
		t.Fatal(err)
	}
	var stages []stage
	var line string
	sc := bufio.NewScanner(bytes.NewReader(data))
	for sc.Scan() {
		text := strings.TrimSpace(sc.Text())
		if strings.HasPrefix(text, "#") || (text == "" && line == "") {
			continue
		}
		if cont, ok := strings.CutSuffix(text, `\`); ok {
			line += cont + " "
			continue
		}
		line += text
		cmd, args, _ := strings.Cut(line, " ")
		line = ""
		in := instruction{strings.ToUpper(cmd), strings.TrimSpace(args)}
		if in.cmd == "FROM" {
			f := strings.Fields(in.args)
			st := stage{from: f[0]}
			if len(f) == 3 && strings.EqualFold(f[1], "AS") {
				st.name = f[2]
			}
			stages = append(stages, st)
			continue
		}
		if len(stages) == 0 {
			// ARGs before the first FROM: kept as a stage named globalArgs.
			stages = append(stages, stage{name: globalArgs})
		}
		stages[len(stages)-1].body = append(stages[len(stages)-1].body, in)
	}
	return stages
}

func stageNamed(t *testing.T, stages []stage, name string) stage {
	t.Helper()
	for _, s := range stages {
		if s.name == name {
			return s
		}
	}
	t.Fatalf("Dockerfile has no stage %q", name)
	return stage{}
}

// last returns the args of the stage's last instruction cmd, or "".
func (s stage) last(cmd string) string {
	for i := len(s.body) - 1; i >= 0; i-- {
		if s.body[i].cmd == cmd {
			return s.body[i].args
		}
	}
	return ""
}

func TestDockerfileTargets(t *testing.T) {
	stages := parseDockerfile(t)
	base := stageNamed(t, stages, "base")
	if base.from != "scratch" {
		t.Errorf("base stage is FROM %s, want scratch (one static binary, nothing else)", base.from)
	}
	for _, target := range []struct{ name, binary string }{
		{"controller", "almanac-controller"},
		{"trainer", "almanac-trainer"},
	} {
		s := stageNamed(t, stages, target.name)
		if s.from != "base" {
			t.Errorf("%s: FROM %s, want base", target.name, s.from)
		}
		// The user must be numeric and not root, or runAsNonRoot cannot verify it.
		user := s.last("USER")
		if user == "" {
			user = base.last("USER")
		}
		uid, _, _ := strings.Cut(user, ":")
		if n, err := strconv.Atoi(uid); err != nil || n == 0 {
			t.Errorf("%s: USER %q, want a numeric non-root uid", target.name, user)
		}
		var entrypoint []string
		if err := json.Unmarshal([]byte(s.last("ENTRYPOINT")), &entrypoint); err != nil || !slices.Equal(entrypoint, []string{"/" + target.binary}) {
			t.Errorf("%s: ENTRYPOINT %q, want exec form [\"/%s\"]", target.name, s.last("ENTRYPOINT"), target.binary)
		}
		if want := "--from=files /files/" + target.binary + " /" + target.binary; !slices.Contains(s.body, instruction{"COPY", want}) {
			t.Errorf("%s: no COPY %s", target.name, want)
		}
	}
	// The passwd entry of the base image (written by images/root.sh) names the same uid, so
	// tools that map uid to name (and glibc-free Go's os/user) find it.
	uid, _, _ := strings.Cut(base.last("USER"), ":")
	if !bytes.Contains(mustRead(t, filepath.Join(repoRoot, "images", "root.sh")), []byte("nonroot:x:"+uid+":")) {
		t.Errorf("images/root.sh writes no passwd entry for uid %s", uid)
	}
}

// TestDockerfileBothWaysShareTheFinalStages checks that the two ways of getting the files,
// compiling in the Go image (FILES=build) and taking them from the context `make images`
// prepares (FILES=context), both lay out /files the same way from the same sources, and that
// the final stages read only that layout. TestImages shows the context way gives exactly
// root.sh's tree plus the binary; the build way runs the same root.sh on the same Debian
// release (the Go image's bookworm, this machine's Debian 12) and builds with the Makefile's
// flags (TestDockerfileBuildFlagsAreTheMakefiles). It cannot be built here: the Go image
// needs a registry.
func TestDockerfileBothWaysShareTheFinalStages(t *testing.T) {
	stages := parseDockerfile(t)
	if got := stageNamed(t, stages, globalArgs).last("ARG"); got != "FILES=build" {
		t.Errorf("global ARG %q, want FILES=build (the multi-stage build stays the default)", got)
	}
	files := stageNamed(t, stages, "files")
	if files.from != "${FILES}" || len(files.body) != 0 {
		t.Errorf("files stage: FROM %s with %d instructions, want FROM ${FILES} and nothing else", files.from, len(files.body))
	}
	build := stageNamed(t, stages, "build")
	if !strings.HasSuffix(build.from, "-bookworm") {
		t.Errorf("build stage FROM %s: root.sh's tree comes from its Debian release; keep it the one make images runs on (bookworm) or say why not", build.from)
	}
	if !slices.Contains(build.body, instruction{"RUN", "sh images/root.sh /files/root"}) {
		t.Error("build stage does not run `sh images/root.sh /files/root`")
	}
	var outs []string
	for _, in := range build.body {
		for _, m := range goBuildLine.FindAllStringSubmatch(in.args, -1) {
			outs = append(outs, m[2])
		}
	}
	if !slices.Equal(outs, []string{"/files/almanac-controller", "/files/almanac-trainer"}) {
		t.Errorf("build stage writes the binaries to %q, want /files/almanac-controller and /files/almanac-trainer", outs)
	}
	ctx := stageNamed(t, stages, "context")
	if ctx.from != "scratch" || !slices.Equal(ctx.body, []instruction{{"COPY", "files/ /files/"}}) {
		t.Errorf("context stage: FROM %s %v, want FROM scratch and only COPY files/ /files/", ctx.from, ctx.body)
	}
	script := string(mustRead(t, filepath.Join(repoRoot, "images", "build.sh")))
	for _, want := range []string{`sh images/root.sh "$ctx/files/root"`, `cp "$bin/almanac-controller" "$bin/almanac-trainer" "$ctx/files/"`, "--build-arg FILES=context"} {
		if !strings.Contains(script, want) {
			t.Errorf("images/build.sh lacks %s", want)
		}
	}
	// The final stages take files only from the files stage.
	for _, name := range []string{"base", "controller", "trainer"} {
		for _, in := range stageNamed(t, stages, name).body {
			if in.cmd == "COPY" && !strings.HasPrefix(in.args, "--from=files /files/") {
				t.Errorf("%s: COPY %s does not come from the files stage", name, in.args)
			}
			if in.cmd == "RUN" {
				t.Errorf("%s: RUN %s: the final stages have no shell to run it", name, in.args)
			}
		}
	}
}

// goBuildLine matches `go build <flags> -o <output> <package>` in a RUN line.
var goBuildLine = regexp.MustCompile(`go build (.+?) -o (\S+) (\S+)`)

// makefileBuildFlags returns GO_BUILD_FLAGS and the packages of the build target, with
// $(VAR) written as ${VAR} as in the Dockerfile.
func makefileBuildFlags(t *testing.T) (string, []string) {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(repoRoot, "Makefile"))
	if err != nil {
		t.Fatal(err)
	}
	var flags string
	var pkgs []string
	for _, line := range strings.Split(string(data), "\n") {
		if v, ok := strings.CutPrefix(line, "GO_BUILD_FLAGS ?= "); ok {
			flags = regexp.MustCompile(`\$\((\w+)\)`).ReplaceAllString(strings.TrimSpace(v), "$${$1}")
		}
		if strings.Contains(line, "go build $(GO_BUILD_FLAGS)") {
			f := strings.Fields(line)
			pkgs = append(pkgs, f[len(f)-1])
		}
	}
	if flags == "" || len(pkgs) == 0 {
		t.Fatal("Makefile: GO_BUILD_FLAGS or its go build lines not found")
	}
	return flags, pkgs
}

func TestDockerfileBuildFlagsAreTheMakefiles(t *testing.T) {
	wantFlags, wantPkgs := makefileBuildFlags(t)
	build := stageNamed(t, parseDockerfile(t), "build")
	var pkgs []string
	for _, in := range build.body {
		if in.cmd != "RUN" {
			continue
		}
		for _, m := range goBuildLine.FindAllStringSubmatch(in.args, -1) {
			if m[1] != wantFlags {
				t.Errorf("Dockerfile builds %s with\n  %s\nMakefile GO_BUILD_FLAGS:\n  %s", m[3], m[1], wantFlags)
			}
			pkgs = append(pkgs, m[3])
		}
	}
	if !slices.Equal(pkgs, wantPkgs) {
		t.Errorf("Dockerfile builds %q, the Makefile %q", pkgs, wantPkgs)
	}
	for _, want := range []instruction{{"ARG", "VERSION=dev"}, {"ARG", "COMMIT=unknown"}} {
		if !slices.Contains(build.body, want) {
			t.Errorf("build stage lacks %s %s", want.cmd, want.args)
		}
	}
	if env := build.last("ENV"); !strings.Contains(env, "CGO_ENABLED=0") {
		t.Errorf("build stage ENV %q does not set CGO_ENABLED=0 (static binaries)", env)
	}
}

// dockerignored reports whether rel (slash-separated, relative to the context) is left out
// of the build context by .dockerignore. It handles the pattern forms the file uses: a path
// or glob (which also leaves out everything below a matching directory) and a leading **/.
func dockerignored(t *testing.T, rel string) bool {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(repoRoot, ".dockerignore"))
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range strings.Split(string(data), "\n") {
		p = strings.TrimSpace(p)
		if p == "" || strings.HasPrefix(p, "#") {
			continue
		}
		if strings.HasPrefix(p, "!") {
			t.Fatalf(".dockerignore: exception %q is not understood by this test; extend dockerignored", p)
		}
		p, anyDepth := strings.CutPrefix(p, "**/")
		parts := strings.Split(rel, "/")
		for i := range parts {
			for j := i + 1; j <= len(parts); j++ {
				if i > 0 && !anyDepth {
					break
				}
				if ok, _ := path.Match(p, strings.Join(parts[i:j], "/")); ok {
					return true
				}
			}
		}
	}
	return false
}

// The images are built from a context without tests, docs and manifests; every package and
// embedded file the two binaries need must still be in it.
func TestDockerignoreKeepsWhatTheBuildNeeds(t *testing.T) {
	if testing.Short() {
		t.Skip("runs go list")
	}
	_, pkgs := makefileBuildFlags(t)
	args := append([]string{"list", "-deps", "-f", `{{if .Module}}{{if .Module.Main}}{{.Dir}}{{range .EmbedFiles}} {{$.Dir}}/{{.}}{{end}}{{end}}{{end}}`}, pkgs...)
	cmd := exec.Command("go", args...)
	cmd.Dir = repoRoot
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("go list: %v", err)
	}
	root, _ := filepath.Abs(repoRoot)
	needed := []string{"go.mod", "go.sum", "images/root.sh"}
	for _, f := range strings.Fields(string(out)) {
		rel, err := filepath.Rel(root, f)
		if err != nil {
			t.Fatal(err)
		}
		needed = append(needed, filepath.ToSlash(rel))
	}
	if len(needed) < 4 {
		t.Fatalf("go list found only %q", needed)
	}
	t.Logf("%d directories and embedded files needed", len(needed))
	for _, rel := range needed {
		if rel != "." && dockerignored(t, rel) {
			t.Errorf("%s is needed by go build but .dockerignore leaves it out", rel)
		}
	}
	// And the matcher does leave things out.
	for _, rel := range []string{"test/packaging", "charts/almanac/values.yaml", "trainer/store/store_test.go"} {
		if !dockerignored(t, rel) {
			t.Errorf(".dockerignore keeps %s", rel)
		}
	}
}

// TestDockerfileBuildFlagsWork builds the binaries with the Dockerfile's go build flags and
// environment: static executables that report the version and commit given at build time.
func TestDockerfileBuildFlagsWork(t *testing.T) {
	if testing.Short() {
		t.Skip("builds both binaries")
	}
	flags, pkgs := makefileBuildFlags(t)
	const version, commit = "v0.0.0-packaging-test", "0123abc"
	flags = strings.NewReplacer("${VERSION}", version, "${COMMIT}", commit).Replace(flags)
	// -ldflags "..." is one argument.
	var args []string
	for i, part := range strings.Split(flags, `"`) {
		if i%2 == 1 {
			args = append(args, part)
		} else {
			args = append(args, strings.Fields(part)...)
		}
	}
	dir := t.TempDir()
	for _, pkg := range pkgs {
		out := filepath.Join(dir, path.Base(strings.TrimPrefix(pkg, "./")))
		if pkg == "." {
			out = filepath.Join(dir, "almanac-controller")
		}
		cmd := exec.Command("go", append(append([]string{"build"}, args...), "-o", out, pkg)...)
		cmd.Dir = repoRoot
		cmd.Env = append(os.Environ(), "CGO_ENABLED=0", "GOFLAGS=-buildvcs=false")
		if msg, err := cmd.CombinedOutput(); err != nil {
			t.Fatalf("go build %s: %v\n%s", pkg, err, msg)
		}
		f, err := elf.Open(out)
		if err != nil {
			t.Fatalf("%s: %v", out, err)
		}
		for _, p := range f.Progs {
			if p.Type == elf.PT_INTERP || p.Type == elf.PT_DYNAMIC {
				t.Errorf("%s is dynamically linked; FROM scratch has no loader", filepath.Base(out))
			}
		}
		if s := f.Section(".symtab"); s != nil {
			t.Errorf("%s keeps its symbol table; -s -w should strip it", filepath.Base(out))
		}
		f.Close()
		if !bytes.Contains(mustRead(t, out), []byte(version)) {
			t.Errorf("%s does not carry the version %s (-X main.version)", filepath.Base(out), version)
		}
	}
	got, err := exec.Command(filepath.Join(dir, "almanac-trainer"), "version").Output()
	if want := "almanac-trainer " + version + " (" + commit + ")"; err != nil || strings.TrimSpace(string(got)) != want {
		t.Errorf("almanac-trainer version: %q (err %v), want %q", got, err, want)
	}
}

func mustRead(t *testing.T, file string) []byte {
	t.Helper()
	data, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	return data
}
