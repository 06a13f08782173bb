package packaging

import (
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/prometheus/client_golang/prometheus"
	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	"sigs.k8s.io/yaml"

	"almanac.dev/almanac/controllers"
)

// The chart's monitoring: alert rules (charts/almanac/monitoring/rules.yaml), the Grafana
// dashboard (monitoring/dashboard.json), and the ServiceMonitor, PrometheusRule and dashboard
// ConfigMap that ship them. TestServerSideApply applies them with their CRDs.

var (
	rulesFile     = filepath.Join(chartDir, "monitoring", "rules.yaml")
	dashboardFile = filepath.Join(chartDir, "monitoring", "dashboard.json")
)

// ruleFile is a Prometheus rule file.
type ruleFile struct {
	Groups []struct {
		Name  string `json:"name"`
		Rules []struct {
			Alert       string            `json:"alert"`
			Record      string            `json:"record"`
			Expr        string            `json:"expr"`
			For         string            `json:"for"`
			Labels      map[string]string `json:"labels"`
			Annotations map[string]string `json:"annotations"`
		} `json:"rules"`
	} `json:"groups"`
}

func readRules(t *testing.T) ruleFile {
	t.Helper()
	var rf ruleFile
	if err := yaml.UnmarshalStrict(mustRead(t, rulesFile), &rf); err != nil {
		t.Fatalf("%s: %v", rulesFile, err)
	}
	return rf
}

// dashboard is the part of a Grafana dashboard the tests read.
type dashboard struct {
	UID        string  `json:"uid"`
	Title      string  `json:"title"`
	Panels     []panel `json:"panels"`
	Templating struct {
		List []struct {
			Name       string `json:"name"`
			Definition string `json:"definition"`
		} `json:"list"`
	} `json:"templating"`
}

// panel is one dashboard panel.
type panel struct {
	ID      int    `json:"id"`
	Type    string `json:"type"`
	Title   string `json:"title"`
	GridPos struct {
		X, Y, W, H int
	} `json:"gridPos"`
	Targets []struct {
		Expr string `json:"expr"`
	} `json:"targets"`
}

func readDashboard(t *testing.T) dashboard {
	t.Helper()
	var d dashboard
	if err := json.Unmarshal(mustRead(t, dashboardFile), &d); err != nil {
		t.Fatalf("%s: %v", dashboardFile, err)
	}
	return d
}

// TestAlertRules has promtool check the rule file and run its unit tests, and checks that
// every alert has a test that fires it, a runbook line and a row in README's runbook.
func TestAlertRules(t *testing.T) {
	rf := readRules(t)
	var alerts []string
	for _, g := range rf.Groups {
		for _, r := range g.Rules {
			if r.Alert == "" {
				continue
			}
			alerts = append(alerts, r.Alert)
			for _, a := range []string{"summary", "description", "runbook"} {
				if r.Annotations[a] == "" {
					t.Errorf("alert %s has no %s annotation", r.Alert, a)
				}
			}
			if s := r.Labels["severity"]; s != "warning" && s != "info" && s != "critical" {
				t.Errorf("alert %s: severity %q, want info, warning or critical", r.Alert, s)
			}
		}
	}
	if len(alerts) < 6 {
		t.Fatalf("%s has %d alerts, want at least failed, degraded, missed schedule, stalled, not progressing, drift", rulesFile, len(alerts))
	}

	var tests struct {
		Tests []struct {
			Name          string `json:"name"`
			AlertRuleTest []struct {
				Alertname string `json:"alertname"`
				ExpAlerts []any  `json:"exp_alerts"`
			} `json:"alert_rule_test"`
		} `json:"tests"`
	}
	if err := yaml.Unmarshal(mustRead(t, filepath.Join("testdata", "rules_test.yaml")), &tests); err != nil {
		t.Fatal(err)
	}
	fires, quiet := map[string]bool{}, map[string]bool{}
	for _, tc := range tests.Tests {
		for _, at := range tc.AlertRuleTest {
			if len(at.ExpAlerts) > 0 {
				fires[at.Alertname] = true
			} else {
				quiet[at.Alertname] = true
			}
		}
	}
	runbook := readmeSection(t, "#### Alerts and runbook")
	for _, a := range alerts {
		if !fires[a] || !quiet[a] {
			t.Errorf("alert %s: testdata/rules_test.yaml needs a case where it fires and one where it does not (fires %v, quiet %v)", a, fires[a], quiet[a])
		}
		if !strings.Contains(runbook, "| `"+a+"` |") {
			t.Errorf("alert %s has no row in README's Alerts and runbook table", a)
		}
	}

	promtool, err := exec.LookPath("promtool")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("promtool not found; `make debian-tools` installs Debian's prometheus package")
		}
		t.Skip("promtool not found (Debian package prometheus; make debian-tools installs it)")
	}
	for _, args := range [][]string{
		{"check", "rules", rulesFile},
		{"test", "rules", filepath.Join("testdata", "rules_test.yaml")},
	} {
		out, err := exec.Command(promtool, args...).CombinedOutput()
		if err != nil {
			t.Errorf("promtool %s: %v\n%s", strings.Join(args, " "), err, out)
		} else {
			t.Logf("promtool %s:\n%s", strings.Join(args, " "), out)
		}
	}
}

// readmeSection returns README.md from the heading to the next heading of the same or a
// higher level.
func readmeSection(t *testing.T, heading string) string {
	t.Helper()
	readme := string(mustRead(t, filepath.Join(repoRoot, "README.md")))
	i := strings.Index(readme, "\n"+heading+"\n")
	if i < 0 {
		t.Fatalf("README.md has no %q section", heading)
	}
	rest := readme[i+1+len(heading):]
	level := strings.Index(heading, " ")
	if loc := regexp.MustCompile(`\n#{1,` + strconv.Itoa(level) + `} `).FindStringIndex(rest); loc != nil {
		rest = rest[:loc[0]]
	}
	return rest
}

// exportedMetrics returns the names of the series the controller registers, read from the
// collectors' descriptions (a registry's Gather would leave out vectors without children).
func exportedMetrics(t *testing.T) []string {
	t.Helper()
	rec := &describingRegisterer{}
	if _, err := controllers.NewMetrics(rec); err != nil {
		t.Fatal(err)
	}
	if len(rec.names) == 0 {
		t.Fatal("controllers.NewMetrics registered nothing")
	}
	return rec.names
}

// describingRegisterer records the metric names of what is registered on it.
type describingRegisterer struct{ names []string }

var fqName = regexp.MustCompile(`fqName: "([^"]+)"`)

func (r *describingRegisterer) Register(c prometheus.Collector) error {
	ch := make(chan *prometheus.Desc, 16)
	go func() { c.Describe(ch); close(ch) }()
	for d := range ch {
		if m := fqName.FindStringSubmatch(d.String()); m != nil {
			r.names = append(r.names, m[1])
		}
	}
	return nil
}

func (r *describingRegisterer) MustRegister(cs ...prometheus.Collector) {
	for _, c := range cs {
		_ = r.Register(c)
	}
}

func (r *describingRegisterer) Unregister(prometheus.Collector) bool { return false }

// seriesName matches almanac series names in PromQL.
var seriesName = regexp.MustCompile(`\balmanac_[a-z_]+\b`)

// usedMetrics returns the almanac_ names in exprs, with a histogram's _bucket, _sum and _count
// suffix mapped to its name when that name is exported.
func usedMetrics(exprs []string, exported []string) []string {
	var out []string
	for _, e := range exprs {
		for _, n := range seriesName.FindAllString(e, -1) {
			for _, suffix := range []string{"_bucket", "_sum", "_count"} {
				if base, ok := strings.CutSuffix(n, suffix); ok && slices.Contains(exported, base) {
					n = base
				}
			}
			if !slices.Contains(out, n) {
				out = append(out, n)
			}
		}
	}
	slices.Sort(out)
	return out
}

// TestMonitoringReadsExportedMetrics: every series the rules and the dashboard read is one
// the controller exports, and the dashboard shows every series it exports.
func TestMonitoringReadsExportedMetrics(t *testing.T) {
	exported := exportedMetrics(t)
	var ruleExprs, dashExprs []string
	for _, g := range readRules(t).Groups {
		for _, r := range g.Rules {
			ruleExprs = append(ruleExprs, r.Expr)
		}
	}
	d := readDashboard(t)
	for _, p := range d.Panels {
		for _, tg := range p.Targets {
			dashExprs = append(dashExprs, tg.Expr)
		}
	}
	for _, v := range d.Templating.List {
		dashExprs = append(dashExprs, v.Definition)
	}
	for what, exprs := range map[string][]string{"rules.yaml": ruleExprs, "dashboard.json": dashExprs} {
		used := usedMetrics(exprs, exported)
		if len(used) == 0 {
			t.Errorf("%s reads no almanac_ series", what)
		}
		for _, n := range used {
			if !slices.Contains(exported, n) {
				t.Errorf("%s reads %s, which the controller does not export (controllers/metrics.go exports %v)", what, n, exported)
			}
		}
		if what == "dashboard.json" {
			for _, n := range exported {
				if !slices.Contains(used, n) {
					t.Errorf("the dashboard shows no panel of %s", n)
				}
			}
		}
	}
}

func TestDashboard(t *testing.T) {
	d := readDashboard(t)
	if d.UID == "" || d.Title == "" {
		t.Errorf("dashboard uid %q title %q: both are needed for a stable import", d.UID, d.Title)
	}
	ids := map[int]bool{}
	panels := 0
	for _, p := range d.Panels {
		if ids[p.ID] {
			t.Errorf("panel id %d repeats", p.ID)
		}
		ids[p.ID] = true
		if p.GridPos.X < 0 || p.GridPos.W <= 0 || p.GridPos.X+p.GridPos.W > 24 {
			t.Errorf("panel %q: gridPos x %d w %d outside Grafana's 24 columns", p.Title, p.GridPos.X, p.GridPos.W)
		}
		if p.Type == "row" {
			continue
		}
		panels++
		if len(p.Targets) == 0 {
			t.Errorf("panel %q has no query", p.Title)
		}
		for _, tg := range p.Targets {
			// Every query follows the dashboard's namespace and portfolio selectors.
			if !strings.Contains(tg.Expr, `namespace=~"$namespace",portfolio=~"$portfolio"`) {
				t.Errorf("panel %q: %s ignores the namespace and portfolio variables", p.Title, tg.Expr)
			}
		}
	}
	for _, want := range []string{"Portfolio", "Runs", "Shards pending", "Parallelism", "Expected vs realized"} {
		if !slices.ContainsFunc(d.Panels, func(p panel) bool { return strings.Contains(p.Title, want) }) {
			t.Errorf("no panel titled %q", want)
		}
	}
	if panels < 8 {
		t.Errorf("%d panels", panels)
	}
}

// monitoringValues reads testdata/monitoring-values.yaml: every monitoring object on.
func monitoringValues(t *testing.T) map[string]any {
	t.Helper()
	var vals map[string]any
	if err := yaml.Unmarshal(mustRead(t, filepath.Join("testdata", "monitoring-values.yaml")), &vals); err != nil {
		t.Fatal(err)
	}
	return vals
}

// monitoringCRDs are the ServiceMonitor and PrometheusRule CRDs (testdata/monitoring-crds,
// generated from the operator's Go types by generate.sh there).
func monitoringCRDs(t *testing.T) []*unstructured.Unstructured {
	t.Helper()
	var out []*unstructured.Unstructured
	for _, f := range []string{"monitoring.coreos.com_servicemonitors.yaml", "monitoring.coreos.com_prometheusrules.yaml"} {
		objs, err := decodeObjects(mustRead(t, filepath.Join("testdata", "monitoring-crds", f)))
		if err != nil || len(objs) != 1 {
			t.Fatalf("%s: %d objects, %v", f, len(objs), err)
		}
		out = append(out, objs...)
	}
	return out
}

func TestChartMonitoring(t *testing.T) {
	for _, kind := range []string{"ServiceMonitor", "PrometheusRule"} {
		if objs := ofKind(mustRenderChart(t, "fenwick", "fenwick-system", nil), kind); len(objs) != 0 {
			t.Errorf("defaults render a %s; the kind exists only where the operator is installed", kind)
		}
	}
	objs := mustRenderChart(t, "fenwick", "fenwick-system", monitoringValues(t))

	// The ServiceMonitor selects the metrics Service and names its port.
	sm := findIn(objs, "ServiceMonitor", "fenwick-system", "fenwick-controller-manager-metrics")
	svc := findIn(objs, "Service", "fenwick-system", "fenwick-controller-manager-metrics")
	if sm == nil || svc == nil {
		t.Fatalf("ServiceMonitor %v, metrics Service %v", sm != nil, svc != nil)
	}
	if sm.GetLabels()["release"] != "fenwick-prometheus" {
		t.Errorf("ServiceMonitor labels %v lack monitoring.serviceMonitor.labels", sm.GetLabels())
	}
	match, _, _ := unstructured.NestedStringMap(sm.Object, "spec", "selector", "matchLabels")
	if len(match) == 0 {
		t.Fatal("ServiceMonitor selects no labels")
	}
	for k, v := range match {
		if svc.GetLabels()[k] != v {
			t.Errorf("ServiceMonitor selects %s=%s; the metrics Service has %v", k, v, svc.GetLabels())
		}
	}
	// The metrics Service is the only Service it selects.
	for _, o := range ofKind(objs, "Service") {
		if o != svc && labelsMatch(o.GetLabels(), match) {
			t.Errorf("ServiceMonitor also selects Service %s", o.GetName())
		}
	}
	endpoints, _, _ := unstructured.NestedSlice(sm.Object, "spec", "endpoints")
	ports, _, _ := unstructured.NestedSlice(svc.Object, "spec", "ports")
	if len(endpoints) != 1 || len(ports) != 1 {
		t.Fatalf("%d endpoints, %d Service ports; want 1 and 1", len(endpoints), len(ports))
	}
	ep, port := endpoints[0].(map[string]any), ports[0].(map[string]any)
	if ep["port"] != port["name"] || ep["path"] != "/metrics" || ep["interval"] != "30s" || ep["scrapeTimeout"] != "10s" {
		t.Errorf("endpoint %v; Service port %v", ep, port)
	}

	// The PrometheusRule carries rules.yaml unchanged.
	pr := findIn(objs, "PrometheusRule", "fenwick-system", "fenwick-alerts")
	if pr == nil {
		t.Fatal("no PrometheusRule fenwick-alerts")
	}
	var want map[string]any
	if err := yaml.Unmarshal(mustRead(t, rulesFile), &want); err != nil {
		t.Fatal(err)
	}
	if !equalJSON(pr.Object["spec"], want) {
		t.Error("PrometheusRule spec differs from monitoring/rules.yaml")
	}

	// The dashboard ConfigMap: the sidecar's label and the JSON unchanged.
	cm := findIn(objs, "ConfigMap", "fenwick-system", "fenwick-dashboard")
	if cm == nil {
		t.Fatal("no ConfigMap fenwick-dashboard")
	}
	if cm.GetLabels()["grafana_dashboard"] != "1" || cm.GetAnnotations()["grafana_folder"] != "Forecasting" {
		t.Errorf("dashboard ConfigMap labels %v annotations %v", cm.GetLabels(), cm.GetAnnotations())
	}
	data, _, _ := unstructured.NestedString(cm.Object, "data", "almanac.json")
	var got, file any
	if err := json.Unmarshal([]byte(data), &got); err != nil {
		t.Fatalf("ConfigMap almanac.json: %v", err)
	}
	if err := json.Unmarshal(mustRead(t, dashboardFile), &file); err != nil {
		t.Fatal(err)
	}
	if !equalJSON(got, file) {
		t.Error("the ConfigMap's dashboard differs from monitoring/dashboard.json")
	}
	// The sidecar may watch another namespace.
	vals := monitoringValues(t)
	vals["monitoring"].(map[string]any)["dashboard"].(map[string]any)["namespace"] = "grafana"
	if findIn(mustRenderChart(t, "fenwick", "fenwick-system", vals), "ConfigMap", "grafana", "fenwick-dashboard") == nil {
		t.Error("monitoring.dashboard.namespace grafana: no ConfigMap there")
	}
}

func labelsMatch(labels, selector map[string]string) bool {
	for k, v := range selector {
		if labels[k] != v {
			return false
		}
	}
	return true
}
