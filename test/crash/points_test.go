package crash

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"almanac.dev/almanac/test/s3test"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/synth"
)

// The crash-point enumeration (issue 18 case 8): a `crashpoints` build of the trainer kills
// itself with SIGKILL right after its k-th committed storage mutation, or just before it
// commits with its bytes written (trainer/store/crashpoint_hook.go). For each step of a second
// run (plan, each train shard, publish, and a republish after a late shard), both ways and for
// every k = 1, 2, ... until the step ends by itself, the state before the step is copied to a
// fresh output prefix, the step is killed at write k, and then:
//   - latest.json names a complete run whose every file has the manifest's checksum;
//   - rerunning the killed step and the steps after it ends with latest.json on run 2 and
//     outputs equal, byte for byte, to those of an uninterrupted run.
// On file:// and on the S3 test server. Unlike the SIGKILL loop, every crash point is hit, in
// the same order on every machine.

// stepNames of the second run, in order; "republish" is publish again after a shard that had
// failed was trained (the manifest under the pointer is replaced).
var stepNames = []string{"plan", "train-0", "train-1", "publish", "republish"}

// pointShards is the shard count of the small data set below (one depot object per shard).
const pointShards = 2

// smallDataset writes 2 depots x 12 items of Fenwick Lane Provisions data, one object per depot.
func smallDataset(t *testing.T, uri string, extra int) {
	t.Helper()
	st, err := store.Open(context.Background(), uri)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	o := synth.Options{Items: 12, Depots: pointShards, Periods: 120 + extra, End: dataEnd(extra), Bad: 1}
	if _, err := o.Write(context.Background(), st, "", synth.CSV); err != nil {
		t.Fatal(err)
	}
}

// pointRun is one output tree under test: the trainer binary, the run configurations, the
// output URI.
type pointRun struct {
	t        *testing.T
	bin      string
	out      string
	cfg1     string
	cfg2     string
	crashEnv string // "ALMANAC_CRASH_AFTER_WRITES=k", or "" for a clean step
}

// step runs one step of run 2 (or of run 1 with run1 set); with crashEnv set it returns whether
// the crash point killed it, otherwise the step must succeed.
func (r *pointRun) step(name string, run1 bool) (killed bool) {
	r.t.Helper()
	cfg := r.cfg2
	if run1 {
		cfg = r.cfg1
	}
	var args []string
	switch {
	case name == "plan":
		args = []string{"plan", "--config", cfg}
	case strings.HasPrefix(name, "train-"):
		args = []string{"train", "--config", cfg, "--shard", strings.TrimPrefix(name, "train-")}
	default: // publish, republish
		args = []string{"publish", "--config", cfg}
	}
	cmd := exec.Command(r.bin, append(args, "--termination-log", "")...)
	cmd.Env = os.Environ()
	if r.crashEnv != "" {
		cmd.Env = append(cmd.Env, r.crashEnv)
	}
	var stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stderr, &stderr
	err := cmd.Run()
	crashed := strings.Contains(stderr.String(), store.CrashMarker)
	if crashed != (err != nil) || (err != nil && r.crashEnv == "") {
		r.t.Fatalf("%s (%s): %v, crash marker %v\n%s", name, r.crashEnv, err, crashed, stderr.String())
	}
	return crashed
}

// stepsBefore runs what comes before step `name` of run 2 cleanly. The republish case trains
// shard 1 only after a first publish, which carries shard 1's unit forward from run 1.
func (r *pointRun) stepsBefore(name string) {
	r.t.Helper()
	order := []string{"plan", "train-0", "train-1", "publish"}
	if name == "republish" {
		order = []string{"plan", "train-0", "publish", "train-1"}
	}
	for _, s := range order {
		if s == name {
			return
		}
		r.step(s, false)
	}
}

// stepsFrom reruns step `name` cleanly and then every step after it.
func (r *pointRun) stepsFrom(name string) {
	r.t.Helper()
	order := []string{"plan", "train-0", "train-1", "publish"}
	if name == "republish" {
		order = []string{"republish"}
	}
	started := false
	for _, s := range order {
		started = started || s == name
		if started {
			r.step(s, false)
		}
	}
}

// smallShards rewrites a configuration of writeConfig to one depot object (12 series) per shard.
func smallShards(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err == nil {
		b = bytes.Replace(b, []byte(`"targetSeriesPerShard":150`), []byte(`"targetSeriesPerShard":12`), 1)
		err = os.WriteFile(path, b, 0o644)
	}
	if err != nil || !bytes.Contains(b, []byte(`"targetSeriesPerShard":12`)) {
		t.Fatalf("%s: %v", path, err)
	}
	return path
}

// openTree opens an output tree; the test closes it when it ends.
func openTree(t *testing.T, uri string) *store.Store {
	t.Helper()
	st, err := store.Open(context.Background(), uri)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = st.Close() })
	return st
}

// storeFiles reads every object of an output tree except config.json (it names the output URI)
// and the temporaries a killed file:// write leaves.
func storeFiles(t *testing.T, uri string) map[string][]byte {
	t.Helper()
	return readTree(t, openTree(t, uri), func(key string) bool {
		return !strings.HasSuffix(key, ".tmp") && filepath.Base(key) != store.ConfigName
	})
}

// readTree reads the objects of st whose keys keep says to keep.
func readTree(t *testing.T, st *store.Store, keep func(key string) bool) map[string][]byte {
	t.Helper()
	ctx := context.Background()
	list, err := st.List(ctx, "")
	if err != nil {
		t.Fatal(err)
	}
	got := map[string][]byte{}
	for _, o := range list {
		if !keep(o.Key) {
			continue
		}
		if got[o.Key], err = st.Get(ctx, o.Key); err != nil {
			t.Fatal(err)
		}
	}
	return got
}

// copyTree copies every object of one output tree to another (the state before a step).
func copyTree(t *testing.T, from, to string) {
	t.Helper()
	dst := openTree(t, to)
	for key, b := range readTree(t, openTree(t, from), func(string) bool { return true }) {
		if err := dst.Put(context.Background(), key, b); err != nil {
			t.Fatal(err)
		}
	}
}

// diffTrees reports the keys whose content differs between two output trees.
func diffTrees(want, got map[string][]byte) []string {
	var out []string
	for k, v := range want {
		if !bytes.Equal(v, got[k]) {
			out = append(out, fmt.Sprintf("%s differs (%d vs %d bytes)", k, len(got[k]), len(v)))
		}
	}
	for k := range got {
		if _, ok := want[k]; !ok {
			out = append(out, k+" exists only in the crashed tree")
		}
	}
	sort.Strings(out)
	return out
}

// crashPoints enumerates the crash points of the steps on one kind of store; uri(prefix) names
// an output tree. It returns how many crash points it hit.
func crashPoints(t *testing.T, bin, dir string, uri func(prefix string) string, steps []string) (points int) {
	in1, in2 := "file://"+filepath.Join(dir, "in1")+"/", "file://"+filepath.Join(dir, "in2")+"/"
	if _, err := os.Stat(filepath.Join(dir, "in1")); err != nil {
		smallDataset(t, in1, 0)
		smallDataset(t, in2, 10)
	}
	newRun := func(prefix string) *pointRun {
		out := uri(prefix)
		return &pointRun{t: t, bin: bin, out: out,
			cfg1: smallShards(t, writeConfig(t, dir+"/"+prefix+"-", "flp-r1", in1, out, 0)),
			cfg2: smallShards(t, writeConfig(t, dir+"/"+prefix+"-", "flp-r2", in2, out, 10))}
	}
	// References: uninterrupted runs, the plain order and the late-shard order.
	refs := map[string]map[string][]byte{}
	for _, order := range []string{"publish", "republish"} {
		r := newRun("ref-" + order)
		for _, s := range []string{"plan", "train-0", "train-1", "publish"} {
			r.step(s, true)
		}
		r.stepsBefore(order)
		r.stepsFrom(order)
		refs[order] = storeFiles(t, r.out)
	}
	for _, name := range steps {
		// The state before the step, built once and copied for each crash point.
		base := newRun("base-" + name)
		for _, s := range []string{"plan", "train-0", "train-1", "publish"} {
			base.step(s, true)
		}
		base.stepsBefore(name)
		want := refs["publish"]
		if name == "republish" {
			want = refs["republish"]
		}
		for _, mode := range []struct{ env, when string }{{store.CrashAfterWritesEnv, "after"}, {store.CrashBeforeWritesEnv, "before"}} {
			for k := 1; ; k++ {
				where := fmt.Sprintf("%s killed %s write %d", name, mode.when, k)
				r := newRun(fmt.Sprintf("%s-%s%d", name, mode.when, k))
				copyTree(t, base.out, r.out)
				r.crashEnv = fmt.Sprintf("%s=%d", mode.env, k)
				killed := r.step(name, false)
				r.crashEnv = ""
				latest := checkLatest(t, r.out, where)
				if !killed {
					if k == 1 {
						t.Errorf("%s: no write at all", name)
					}
					t.Logf("%s: %d crash points %s a write", name, k-1, mode.when)
					break
				}
				points++
				r.stepsFrom(name)
				if run := checkLatest(t, r.out, where+", rerun"); run != "flp-r2" {
					t.Errorf("%s: latest -> %s after the rerun, want flp-r2", where, run)
				}
				if d := diffTrees(want, storeFiles(t, r.out)); len(d) > 0 {
					t.Errorf("%s (latest then %s), rerun: %s", where, latest, strings.Join(d, "; "))
				}
				if k > 200 {
					t.Fatalf("%s: the step never ends", where)
				}
			}
		}
	}
	return points
}

func TestCrashPointsFile(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the trainer and runs it once per crash point")
	}
	bin := build(t, "crashpoints")
	dir := t.TempDir()
	n := crashPoints(t, bin, dir, func(prefix string) string { return "file://" + filepath.Join(dir, "out", prefix) }, stepNames)
	t.Logf("file://: %d crash points, steps %v", n, stepNames)
}

func TestCrashPointsS3(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the trainer and runs it once per crash point")
	}
	srv := s3test.Start(t, "fenwick-crash")
	bin := build(t, "crashpoints")
	dir := t.TempDir()
	n := crashPoints(t, bin, dir, func(prefix string) string { return srv.URI("fenwick-crash", prefix+"/") }, stepNames)
	t.Logf("s3://: %d crash points, steps %v", n, stepNames)
}
