package main

import (
	"os/exec"
	"slices"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
)

// TestParseFlags checks the flag names the Helm chart and the kustomize Deployment pass
// (charts/almanac/templates/deployment.yaml, config/manager/manager.yaml) and the defaults.
func TestParseFlags(t *testing.T) {
	c, err := parseFlags(nil)
	if err != nil {
		t.Fatal(err)
	}
	if c.metricsAddr != ":8080" || c.probeAddr != ":8081" || c.leaderElect || c.namespaces != nil || c.maxConcurrentShards != 32 {
		t.Errorf("defaults = %+v", c)
	}
	c, err = parseFlags([]string{"--leader-elect", "--metrics-bind-address=:9090", "--health-probe-bind-address=:9091",
		"--max-concurrent-shards=8", "--zap-log-level=debug", "--watch-namespace=depot-north, depot-south,",
		"--trainer-image-prefixes=registry.fenwick.example/almanac/,registry.fenwick.example/tools/almanac-trainer"})
	if err != nil {
		t.Fatal(err)
	}
	if diff := cmp.Diff([]string{"depot-north", "depot-south"}, c.namespaces); diff != "" {
		t.Errorf("namespaces (-want,+got):\n%s", diff)
	}
	if diff := cmp.Diff([]string{"registry.fenwick.example/almanac/", "registry.fenwick.example/tools/almanac-trainer"}, []string(c.images)); diff != "" {
		t.Errorf("trainer image prefixes (-want,+got):\n%s", diff)
	}
	if !c.leaderElect || c.metricsAddr != ":9090" || c.probeAddr != ":9091" || c.maxConcurrentShards != 8 {
		t.Errorf("parsed = %+v", c)
	}
	for _, bad := range [][]string{{"--max-concurrent-shards=-1"}, {"--max-concurrent-shards=many"}, {"--shards=3"},
		{"--trainer-image-prefixes=registry.fenwick.example/almanac/almanac-trainer:1.4"}} {
		if _, err := parseFlags(bad); err == nil {
			t.Errorf("parseFlags(%v) accepted", bad)
		} else if !strings.Contains(err.Error(), strings.TrimLeft(strings.SplitN(bad[0], "=", 2)[0], "-")) {
			t.Errorf("parseFlags(%v) error %q does not name the flag", bad, err)
		}
	}
}

// TestControllerLinksNoEngine: the controller binary links the contracts with the trainer (run
// configuration, summary, exit codes) but none of the forecasting engine: no model, learner
// or gonum package. The engine is the trainer's; the controller only writes its configuration.
func TestControllerLinksNoEngine(t *testing.T) {
	out, err := exec.Command("go", "list", "-deps", ".").Output()
	if err != nil {
		t.Skipf("go list: %v", err)
	}
	deps := strings.Fields(string(out))
	if !slices.Contains(deps, "almanac.dev/almanac/trainer/runconfig") {
		t.Fatalf("go list -deps . does not list trainer/runconfig; the check below would prove nothing:\n%s", out)
	}
	for _, p := range deps {
		if strings.HasPrefix(p, "almanac.dev/almanac/trainer/models") || strings.HasPrefix(p, "almanac.dev/almanac/trainer/learn") ||
			strings.HasPrefix(p, "almanac.dev/almanac/trainer/features") || strings.HasPrefix(p, "almanac.dev/almanac/trainer/selection") ||
			strings.HasPrefix(p, "gonum.org/") {
			t.Errorf("the controller depends on %s", p)
		}
	}
}
