package offline

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"k8s.io/apimachinery/pkg/util/validation/field"

	"almanac.dev/almanac/api/v1alpha1"
)

// The same files are applied to a real apiserver in api/v1alpha1/offline_test.go, which checks
// that it refuses them for the same fields.

// wantPaths reads the "# want: PATH" lines of a test file.
func wantPaths(t *testing.T, data []byte) []string {
	t.Helper()
	var want []string
	for _, line := range strings.Split(string(data), "\n") {
		if p, ok := strings.CutPrefix(line, "# want: "); ok {
			want = append(want, strings.TrimSpace(p))
		}
	}
	if len(want) == 0 {
		t.Fatal("test file has no '# want: PATH' line")
	}
	slices.Sort(want)
	return want
}

// refusedName is the metadata.name a test file gives its object.
func refusedName(lines []string) string {
	for _, l := range lines {
		if n, ok := strings.CutPrefix(strings.TrimSpace(l), "name: "); ok {
			return n
		}
	}
	return ""
}

func paths(errs field.ErrorList) []string {
	out := make([]string, len(errs))
	for i, e := range errs {
		out[i] = e.Field
	}
	slices.Sort(out)
	return out
}

func refused(t *testing.T, err error) *Error {
	t.Helper()
	var e *Error
	if !errors.As(err, &e) {
		t.Fatalf("want an *offline.Error, got %v", err)
	}
	return e
}

func TestSamplesAreValid(t *testing.T) {
	files, err := filepath.Glob(filepath.Join("..", "..", "config", "samples", "forecasting_*.yaml"))
	if err != nil || len(files) < 3 {
		t.Fatalf("samples: %v %v", files, err)
	}
	kinds := map[string]int{}
	for _, f := range files {
		objs, err := LoadFile(f)
		if err != nil {
			t.Errorf("%s: %v", f, err)
		}
		for _, o := range objs {
			kinds[o.Kind()]++
			if o.Name() == "" {
				t.Errorf("%s: object without a name", f)
			}
		}
	}
	if kinds["ForecastPortfolio"] < 2 || kinds["ForecastRun"] < 1 {
		t.Errorf("samples hold %v, want both portfolios and the run", kinds)
	}
}

// A portfolio that leaves the optional blocks out gets the defaults the +kubebuilder:default
// markers in api/v1alpha1 declare (the same values the envtest suite reads back from the
// apiserver).
func TestAppliesTheCRDDefaults(t *testing.T) {
	data, err := os.ReadFile(filepath.Join("testdata", "bad-cron.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	data = []byte(strings.Replace(string(data), `"15 2 * *"`, `"15 2 * * *"`, 1))
	objs, err := Load("minimal.yaml", data)
	if err != nil {
		t.Fatal(err)
	}
	p := objs[0].Portfolio
	if p == nil {
		t.Fatalf("want a portfolio, got %+v", objs[0])
	}
	s := p.Spec
	if s.ConcurrencyPolicy != v1alpha1.ForbidConcurrent || s.Source.Format != v1alpha1.FormatCSV ||
		s.Output.Format != v1alpha1.FormatParquet || s.Selection.Metric != v1alpha1.MetricMASE ||
		s.Selection.BacktestOrigins != 3 || s.Selection.BacktestRefit != v1alpha1.RefitOnce ||
		s.Sharding.TargetSeriesPerShard != 2000 || s.Sharding.MaxParallel != 8 ||
		s.Drift.ThresholdPercent != 130 || s.Drift.Action != v1alpha1.DriftReport ||
		s.SuccessfulRunsHistoryLimit == nil || *s.SuccessfulRunsHistoryLimit != 3 {
		t.Errorf("defaults not applied: %+v", s)
	}
	// Values written in the file stay as written.
	if s.Source.Columns.Date != "day" || s.Horizon != 28 || !slices.Equal(s.QuantilePercents, []int32{10, 50, 90}) {
		t.Errorf("written values changed: %+v", s)
	}
}

// Each file in testdata is refused for exactly the fields its "# want:" lines name, and the
// message names each of them.
func TestRefusesNamingTheField(t *testing.T) {
	files, err := filepath.Glob(filepath.Join("testdata", "*.yaml"))
	if err != nil || len(files) < 4 {
		t.Fatalf("testdata: %v %v", files, err)
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			data, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			objs, err := Load(f, data)
			if len(objs) != 0 {
				t.Errorf("accepted %+v", objs)
			}
			e := refused(t, err)
			if got, want := paths(e.Fields()), wantPaths(t, data); !slices.Equal(got, want) {
				t.Errorf("refused fields %q, want %q:\n%v", got, want, err)
			}
			for _, p := range wantPaths(t, data) {
				if p != "<nil>" && !strings.Contains(err.Error(), p) {
					t.Errorf("message does not name %s:\n%v", p, err)
				}
			}
			// Each field is reported at the line of its own key (the last name of its path, the
			// first such key after the document starts); a refusal without a path at the
			// document's first line.
			lines := strings.Split(string(data), "\n")
			start := slices.IndexFunc(lines, func(l string) bool { return strings.HasPrefix(l, "apiVersion:") })
			for _, p := range wantPaths(t, data) {
				line, what := start+1, "ForecastPortfolio "
				if p != "<nil>" {
					key := p[strings.LastIndexByte(p, '.')+1:] + ":"
					line = start + 1 + slices.IndexFunc(lines[start:], func(l string) bool { return strings.HasPrefix(strings.TrimSpace(l), key) })
					what = fmt.Sprintf("ForecastPortfolio %q %s: ", refusedName(lines), p)
				}
				if !strings.Contains(err.Error(), fmt.Sprintf("%s:%d: %s", f, line, what)) {
					t.Errorf("message does not name file, line %d and kind for %s:\n%v", line, p, err)
				}
			}
		})
	}
}

const minimalRun = `apiVersion: forecasting.almanac.dev/v1alpha1
kind: ForecastRun
metadata:
  name: fenwick-daily-manual-1
  namespace: planning
spec:
  portfolioName: fenwick-daily
  trigger: Manual
`

func TestMultiDocumentFiles(t *testing.T) {
	bad := strings.Replace(minimalRun, "trigger: Manual", "trigger: Cron", 1)
	data := "# runs\n" + minimalRun + "---\n# nothing here\n--- # a comment\n" + bad + "---\n" + minimalRun
	objs, err := Load("runs.yaml", []byte(data))
	if len(objs) != 2 || objs[0].Document != 1 || objs[0].Line != 2 || objs[1].Document != 4 || objs[1].Line != 22 {
		t.Errorf("valid documents: %+v", objs)
	}
	e := refused(t, err)
	if len(e.Documents) != 1 || e.Documents[0].Document != 3 || e.Documents[0].Line != 13 {
		t.Fatalf("refused documents: %+v", e.Documents)
	}
	// The field at its own line (20: "trigger: Cron"), the pathless refusal at the document's.
	if got := e.Error(); !strings.HasPrefix(got, `runs.yaml:20: ForecastRun "fenwick-daily-manual-1" spec.trigger: Unsupported value: "Cron"`) ||
		!strings.Contains(got, "\nruns.yaml:13: ForecastRun \"fenwick-daily-manual-1\" some validation rules were not checked") {
		t.Errorf("message %q", got)
	}
}

func TestDecodingAndKinds(t *testing.T) {
	for _, c := range []struct {
		name, data string
		want       string // in the message
		path       string // refused field, if any
	}{
		{"empty file", "# nothing\n", "no ForecastPortfolio or ForecastRun in the file", ""},
		{"duplicate key", strings.Replace(minimalRun, "  trigger: Manual\n", "  trigger: Manual\n  trigger: Drift\n", 1), `"trigger" already set`, ""},
		{"a list, not an object", "- a\n- b\n", "not an object", ""},
		{"another kind", strings.Replace(minimalRun, "kind: ForecastRun", "kind: ConfigMap", 1), `kind: Unsupported value: "ConfigMap"`, "kind"},
		{"another version", strings.Replace(minimalRun, "v1alpha1", "v1beta1", 1), `apiVersion: Unsupported value: "forecasting.almanac.dev/v1beta1"`, "apiVersion"},
		{"name not a DNS subdomain", strings.Replace(minimalRun, "fenwick-daily-manual-1", "Fenwick_1", 1), "metadata.name: Invalid value", "metadata.name"},
		{"unknown metadata field", strings.Replace(minimalRun, "  namespace: planning\n", "  namespace: planning\n  label: x\n", 1), "metadata.label: Forbidden: unknown field", "metadata.label"},
		{"namespace not a DNS label", strings.Replace(minimalRun, "planning", "planning.eu", 1), "metadata.namespace: Invalid value", "metadata.namespace"},
	} {
		t.Run(c.name, func(t *testing.T) {
			objs, err := Load("x.yaml", []byte(c.data))
			if len(objs) != 0 || err == nil {
				t.Fatalf("accepted: %+v", objs)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("message %q does not contain %q", err, c.want)
			}
			if c.path != "" {
				if got := paths(refused(t, err).Fields()); !slices.Equal(got, []string{c.path}) {
					t.Errorf("refused fields %q, want %q", got, c.path)
				}
			}
		})
	}
}

// As on create: status is dropped (status subresource), a missing namespace is checked as
// "default" and left empty, a generateName is checked with a generated suffix.
func TestCreateSemantics(t *testing.T) {
	data := strings.Replace(minimalRun, "  namespace: planning\n", "", 1) + "status:\n  phase: Succeeded\n"
	objs, err := Load("run.yaml", []byte(data))
	if err != nil {
		t.Fatal(err)
	}
	r := objs[0].Run
	if r.Namespace != "" || r.Status.Phase != "" || r.Spec.PortfolioName != "fenwick-daily" {
		t.Errorf("run %+v", r)
	}
	gen := strings.Replace(minimalRun, "  name: fenwick-daily-manual-1", "  generateName: fenwick-daily-manual-", 1)
	if objs, err := Load("run.yaml", []byte(gen)); err != nil || objs[0].Run.GenerateName != "fenwick-daily-manual-" {
		t.Errorf("generateName: %+v %v", objs, err)
	}
	noName := strings.Replace(minimalRun, "  name: fenwick-daily-manual-1\n", "", 1)
	if _, err := Load("run.yaml", []byte(noName)); err == nil || !slices.Equal(paths(refused(t, err).Fields()), []string{"<nil>", "metadata.name"}) {
		t.Errorf("no name: %v", err)
	}
}

func TestLoadPortfolio(t *testing.T) {
	p, err := LoadPortfolio(filepath.Join("..", "..", "config", "samples", "forecasting_v1alpha1_forecastportfolio.yaml"))
	if err != nil || p.Name != "fenwick-weekly-demand" {
		t.Fatalf("%+v %v", p, err)
	}
	if _, err := LoadPortfolio(filepath.Join("..", "..", "config", "samples", "forecasting_v1alpha1_forecastrun.yaml")); err == nil ||
		!strings.Contains(err.Error(), "want exactly one ForecastPortfolio, the file holds 0") {
		t.Errorf("a file with a run only: %v", err)
	}
	if _, err := LoadPortfolio(filepath.Join("testdata", "bad-cron.yaml")); err == nil || !strings.Contains(err.Error(), "spec.schedule") {
		t.Errorf("an invalid portfolio: %v", err)
	}
}

// A field inside a list element is reported at the element's line, and a field missing from an
// object at the line of that object's key.
func TestFieldLines(t *testing.T) {
	data, err := os.ReadFile(filepath.Join("testdata", "wrong-enum.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	valid := strings.Replace(string(data), "Fortnightly", "Weekly", 1)
	for _, c := range []struct{ name, doc, path, at, msg string }{
		{"CEL rule on a list element",
			strings.Replace(valid, "    - family: ETS\n", "    - family: ETS\n      seasonalPeriods: [\"52.18\"]\n", 1),
			"spec.models[1]", "    - family: ETS", "seasonalPeriods are only for"},
		{"CEL rule on a list element's nested block",
			strings.Replace(valid, "    - family: ETS\n", "    - family: Ridge\n      regression:\n        boosting:\n          rounds: 50\n", 1),
			"spec.models[1]", "    - family: Ridge", "regression.boosting is only for family GradientBoosting"},
		{"required field missing",
			strings.Replace(valid, "    uri: file:///data/fenwick/daily/\n", "", 1),
			"spec.source.uri", "  source:", ""},
	} {
		_, err := Load("p.yaml", []byte(c.doc))
		e := refused(t, err)
		lines := strings.Split(c.doc, "\n")
		line := 1 + slices.IndexFunc(lines, func(l string) bool { return strings.HasPrefix(l, c.at) })
		if want := fmt.Sprintf("p.yaml:%d: ForecastPortfolio \"fenwick-daily-enum\" %s: ", line, c.path); !strings.Contains(e.Error(), want) {
			t.Errorf("%s: no %q in:\n%v", c.name, want, e)
		}
		if !strings.Contains(e.Error(), c.msg) {
			t.Errorf("%s: no %q in:\n%v", c.name, c.msg, e)
		}
	}
}
