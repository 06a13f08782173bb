package packaging

import (
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"

	"helm.sh/helm/v3/pkg/strvals"
	"sigs.k8s.io/kustomize/api/krusty"
	"sigs.k8s.io/kustomize/kyaml/filesys"
)

// The README's Install section must work as written: its helm commands render with their
// --set flags, its kustomize overlay builds, and the names it mentions exist.

const (
	readmeRegistry = "registry.example.com/almanac"
	readmeVersion  = "v0.1.0"
)

// installSection returns the README's "## Install" section.
func installSection(t *testing.T) string {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(repoRoot, "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	_, rest, ok := strings.Cut(string(data), "\n## Install\n")
	if !ok {
		t.Fatal("README.md has no ## Install section")
	}
	if i := strings.Index(rest, "\n## "); i >= 0 {
		rest = rest[:i]
	}
	return rest
}

// codeBlocks returns the fenced blocks of that language.
func codeBlocks(section, lang string) []string {
	var blocks []string
	for _, part := range strings.Split(section, "```"+lang+"\n")[1:] {
		body, _, _ := strings.Cut(part, "```")
		blocks = append(blocks, body)
	}
	return blocks
}

// shellCommands joins continuation lines and substitutes the README's variables.
func shellCommands(block string) []string {
	block = strings.ReplaceAll(block, "\\\n", " ")
	block = strings.NewReplacer("$REG", readmeRegistry, "$VERSION", readmeVersion).Replace(block)
	var out []string
	for _, line := range strings.Split(block, "\n") {
		if line = strings.TrimSpace(line); line != "" {
			out = append(out, line)
		}
	}
	return out
}

func TestReadmeHelmCommandsRender(t *testing.T) {
	section := installSection(t)
	var installs int
	for _, block := range codeBlocks(section, "sh") {
		for _, cmd := range shellCommands(block) {
			f := strings.Fields(cmd)
			if len(f) < 4 || f[0] != "helm" || f[1] != "install" {
				continue
			}
			installs++
			release, chart := f[2], f[3]
			if chart != "charts/almanac" {
				t.Errorf("%q: chart %s, want charts/almanac", cmd, chart)
			}
			namespace := ""
			vals := map[string]any{}
			for i := 4; i+1 < len(f); i++ {
				switch f[i] {
				case "-n", "--namespace":
					namespace = f[i+1]
				case "--set":
					if err := strvals.ParseInto(strings.Trim(f[i+1], "'"), vals); err != nil {
						t.Errorf("%q: --set %s: %v", cmd, f[i+1], err)
					}
				}
			}
			objs, err := renderChart(release, namespace, vals)
			if err != nil {
				t.Errorf("%q does not render: %v", cmd, err)
				continue
			}
			c := managerContainer(t, findIn(objs, "Deployment", namespace, release+"-controller-manager"))
			if want := readmeRegistry + "/almanac-controller:" + readmeVersion; c["image"] != want {
				t.Errorf("%q: image %v, want %s", cmd, c["image"], want)
			}
			if ns, ok := vals["watchNamespaces"].([]any); ok {
				for _, n := range ns {
					if findIn(objs, "Role", n.(string), release+"-manager") == nil {
						t.Errorf("%q: no manager Role in %v", cmd, n)
					}
				}
			}
		}
	}
	if installs < 2 {
		t.Errorf("found %d helm install commands in README's Install section, want the default and the namespaced one", installs)
	}
	// Names the README tells users to type.
	objs := mustRenderChart(t, "almanac", "almanac-system", nil)
	for _, m := range regexp.MustCompile("deployment/([a-z0-9-]+)").FindAllStringSubmatch(section, -1) {
		if findIn(objs, "Deployment", "almanac-system", m[1]) == nil {
			t.Errorf("README names deployment/%s, which release almanac does not create", m[1])
		}
	}
	for _, m := range regexp.MustCompile("`((?:config|charts)/[a-zA-Z0-9_./-]+)`").FindAllStringSubmatch(section, -1) {
		if _, err := os.Stat(filepath.Join(repoRoot, m[1])); err != nil {
			t.Errorf("README names %s: %v", m[1], err)
		}
	}
}

func TestReadmeKustomizeOverlayBuilds(t *testing.T) {
	blocks := codeBlocks(installSection(t), "yaml")
	if len(blocks) != 1 {
		t.Fatalf("want one yaml block (the overlay) in README's Install section, got %d", len(blocks))
	}
	overlay := blocks[0]
	// The README places the overlay next to a checkout of this repository named almanac.
	dir := t.TempDir()
	root, err := filepath.Abs(repoRoot)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink(root, filepath.Join(dir, "almanac")); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(filepath.Join(dir, "overlay"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "overlay", "kustomization.yaml"), []byte(overlay), 0o644); err != nil {
		t.Fatal(err)
	}
	resources, err := krusty.MakeKustomizer(krusty.MakeDefaultOptions()).Run(filesys.MakeFsOnDisk(), filepath.Join(dir, "overlay"))
	if err != nil {
		t.Fatalf("README overlay does not build: %v", err)
	}
	out, err := resources.AsYaml()
	if err != nil {
		t.Fatal(err)
	}
	objs, err := decodeObjects(out)
	if err != nil {
		t.Fatal(err)
	}
	c := managerContainer(t, find(objs, "Deployment", "almanac-controller-manager"))
	if want := readmeRegistry + "/almanac-controller:" + readmeVersion; c["image"] != want {
		t.Errorf("overlay image %v, want %s", c["image"], want)
	}
	if got, want := kindsAndNames(objs), kindsAndNames(renderKustomize(t, "config/default")); !slices.Equal(got, want) {
		t.Errorf("overlay objects %q differ from config/default's %q", got, want)
	}
}
