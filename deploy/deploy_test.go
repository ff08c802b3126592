package deploy_test

// The files of deploy/ are checked here as a site would use them: parsed
// with the same parsers, and handed to the tools that load them (promtool,
// amtool, systemd-analyze) where those are installed. These tests reach
// the rest of the project only through files and the built binary.

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"maps"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"
)

// deployDir is deploy/ itself: go test runs in the package's directory,
// and these tests live beside the files they check.
var deployDir = "."

// deployMustMetrics are the metric names fixed as the daemon's interface and the
// notifier metrics that came with the notifiers. The daemon may export
// more; deployExportedMetrics finds those.
var deployMustMetrics = map[string]bool{
	"cleanmon_particle_concentration_per_cubic_meter":    true,
	"cleanmon_class_limit_per_cubic_meter":               true,
	"cleanmon_zone_in_class":                             true,
	"cleanmon_zone_state":                                true,
	"cleanmon_differential_pressure_pascals":             true,
	"cleanmon_alarm_active":                              true,
	"cleanmon_readings_total":                            true,
	"cleanmon_instrument_last_reading_timestamp_seconds": true,
	"cleanmon_instrument_flow_liters_per_minute":         true,
	"cleanmon_notifications_total":                       true,
	"cleanmon_notification_queue":                        true,
	"cleanmon_notifier_up":                               true,
}

// deployStateMetrics are the one-series-per-state metrics the dashboard
// shows as words, with the values of their state label (the
// zone object's `state` and `operating_state`).
var deployStateMetrics = []struct {
	metric string
	states []string
}{
	{"cleanmon_zone_state", []string{"in-class", "alert", "action", "out-of-class", "unknown"}},
	{"cleanmon_zone_operating_state", []string{"at-rest", "in-operation", "maintenance"}},
}

// deployExportedMetrics lists the metric names the daemon's code defines:
// every Go string literal that is exactly a cleanmon_… name, in the
// repository's non-test Go files. Reading the source rather than a list
// kept here means a renamed metric fails the dashboard and rules checks.
func deployExportedMetrics(t *testing.T) map[string]bool {
	t.Helper()
	lit := regexp.MustCompile(`"(cleanmon_[a-z_]+)"`)
	found := map[string]bool{}
	root := ".."
	err := filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			switch d.Name() {
			case ".git", "testdata", "deploy", "node_modules":
				return filepath.SkipDir
			}
			return nil
		}
		if !strings.HasSuffix(path, ".go") || strings.HasSuffix(path, "_test.go") {
			return nil
		}
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		for _, m := range lit.FindAllSubmatch(b, -1) {
			found[string(m[1])] = true
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return found
}

// TestDeployMetricsExported checks that the metric names the deploy files
// are built around are all defined by the code.
func TestDeployMetricsExported(t *testing.T) {
	exported := deployExportedMetrics(t)
	for _, m := range slices.Sorted(maps.Keys(deployMustMetrics)) {
		if !exported[m] {
			t.Errorf("%s: no Go file of the repository defines it", m)
		}
	}
	for _, sm := range deployStateMetrics {
		if !exported[sm.metric] {
			t.Errorf("%s: no Go file of the repository defines it", sm.metric)
		}
	}
}

// deployMetricRef finds metric names in a PromQL expression. Recording
// rules (cleanmon:…) have colons and are not matched.
var deployMetricRef = regexp.MustCompile(`cleanmon_[a-z_]+`)

func deployPath(parts ...string) string {
	return filepath.Join(append([]string{deployDir}, parts...)...)
}

func deployRead(t *testing.T, parts ...string) []byte {
	t.Helper()
	b, err := os.ReadFile(deployPath(parts...))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// deployTool finds an outside tool. Without it the test skips, saying
// which Debian package brings it; under CLEANMON_REQUIRE_TOOLS (set by
// .ci/run, which installs the tools) it fails instead.
func deployTool(t *testing.T, name, debPackage string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatalf("%s not on PATH (Debian package %s) and CLEANMON_REQUIRE_TOOLS is set", name, debPackage)
		}
		t.Skipf("%s not on PATH (apt-get install %s): the check it makes did not run", name, debPackage)
	}
	return p
}

// deployRun runs a command with a time limit and returns its combined
// output.
func deployRun(t *testing.T, name string, args ...string) (string, error) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	cmd := exec.CommandContext(ctx, name, args...)
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	err := cmd.Run()
	if ctx.Err() != nil {
		return out.String(), fmt.Errorf("%s: %w", name, ctx.Err())
	}
	return out.String(), err
}

// TestDeployFilesPresent keeps the set of files a site installs complete,
// and each of them described in deploy/README.md.
func TestDeployFilesPresent(t *testing.T) {
	want := []string{
		"README.md",
		"Dockerfile",
		"Dockerfile.dockerignore",
		"systemd/cleanmon.service",
		"systemd/cleanmon.sysusers.conf",
		"prometheus/prometheus.yml",
		"prometheus/federation.yml",
		"prometheus/cleanmon-rules.yml",
		"prometheus/cleanmon-alarm-rules.yml",
		"prometheus/cleanmon-rules.test.yml",
		"alertmanager/alertmanager.yml",
		"grafana/cleanmon-dashboard.json",
	}
	for _, f := range want {
		if _, err := os.Stat(deployPath(filepath.FromSlash(f))); err != nil {
			t.Errorf("deploy/%s: %v", f, err)
		}
	}
	readme := string(deployRead(t, "README.md"))
	err := filepath.WalkDir(deployDir, func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, err := filepath.Rel(deployDir, path)
		if err != nil {
			return err
		}
		rel = filepath.ToSlash(rel)
		if rel != "README.md" && !strings.HasSuffix(rel, "_test.go") && !strings.Contains(readme, rel) {
			t.Errorf("deploy/README.md does not mention %s", rel)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}

// TestDeployYAMLParses decodes every YAML file under deploy/, every
// document of it, as the project's YAML library does; duplicate keys fail.
func TestDeployYAMLParses(t *testing.T) {
	n := 0
	err := filepath.WalkDir(deployDir, func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		if ext := filepath.Ext(path); ext != ".yml" && ext != ".yaml" {
			return nil
		}
		n++
		data, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		dec := yaml.NewDecoder(bytes.NewReader(data))
		for doc := 0; ; doc++ {
			var v any
			err := dec.Decode(&v)
			if errors.Is(err, io.EOF) {
				if doc == 0 {
					t.Errorf("%s: no YAML document", path)
				}
				break
			}
			if err != nil {
				t.Errorf("%s: document %d: %v", path, doc, err)
				break
			}
			if v == nil {
				t.Errorf("%s: document %d is empty", path, doc)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n < 5 {
		t.Errorf("found %d YAML files under deploy/, want at least the Prometheus, rules, rules test, federation and Alertmanager ones", n)
	}
}

// --- Grafana dashboard ---

type deployDatasource struct {
	Type string `json:"type"`
	UID  string `json:"uid"`
}

type deployVariable struct {
	Type       string            `json:"type"`
	Name       string            `json:"name"`
	Query      json.RawMessage   `json:"query"`
	Definition string            `json:"definition"`
	Datasource *deployDatasource `json:"datasource"`
}

// deployMapping is a Grafana value mapping. Options differ by type: a
// "value" mapping maps each value to {text, color}, a "special" one has
// {match, result}.
type deployMapping struct {
	Type    string                     `json:"type"`
	Options map[string]json.RawMessage `json:"options"`
}

// texts gives the word each mapped value shows, for "value" mappings.
func (m deployMapping) texts() (map[string]string, error) {
	out := map[string]string{}
	if m.Type != "value" {
		return out, nil
	}
	for value, raw := range m.Options {
		var o struct {
			Text string `json:"text"`
		}
		if err := json.Unmarshal(raw, &o); err != nil {
			return nil, fmt.Errorf("value mapping of %q: %w", value, err)
		}
		out[value] = o.Text
	}
	return out, nil
}

// deployPanelTexts merges the value mappings of a panel: value → word.
func deployPanelTexts(t *testing.T, p deployPanel) map[string]string {
	t.Helper()
	out := map[string]string{}
	for _, m := range p.FieldConfig.Defaults.Mappings {
		texts, err := m.texts()
		if err != nil {
			t.Fatalf("panel %q: %v", p.Title, err)
		}
		for k, v := range texts {
			out[k] = v
		}
	}
	return out
}

type deployTarget struct {
	RefID      string            `json:"refId"`
	Expr       string            `json:"expr"`
	Datasource *deployDatasource `json:"datasource"`
}

type deployPanel struct {
	ID         int               `json:"id"`
	Type       string            `json:"type"`
	Title      string            `json:"title"`
	Repeat     string            `json:"repeat"`
	Datasource *deployDatasource `json:"datasource"`
	GridPos    struct{ H, W, X, Y int }
	Targets    []deployTarget `json:"targets"`
	Panels     []deployPanel  `json:"panels"`
	// FieldConfig keeps what the checks read: value mappings and the axis
	// scale.
	FieldConfig struct {
		Defaults struct {
			Mappings []deployMapping `json:"mappings"`
			Custom   struct {
				ScaleDistribution struct {
					Type string `json:"type"`
					Log  int    `json:"log"`
				} `json:"scaleDistribution"`
			} `json:"custom"`
		} `json:"defaults"`
	} `json:"fieldConfig"`
}

type deployDashboard struct {
	UID           string `json:"uid"`
	Title         string `json:"title"`
	SchemaVersion int    `json:"schemaVersion"`
	Templating    struct {
		List []deployVariable `json:"list"`
	} `json:"templating"`
	Panels []deployPanel `json:"panels"`
}

func deployLoadDashboard(t *testing.T) *deployDashboard {
	t.Helper()
	var d deployDashboard
	dec := json.NewDecoder(bytes.NewReader(deployRead(t, "grafana", "cleanmon-dashboard.json")))
	if err := dec.Decode(&d); err != nil {
		t.Fatalf("grafana/cleanmon-dashboard.json: %v", err)
	}
	return &d
}

// panels lists every panel, those inside collapsed rows too.
func (d *deployDashboard) panels() []deployPanel {
	var out []deployPanel
	var walk func([]deployPanel)
	walk = func(ps []deployPanel) {
		for _, p := range ps {
			out = append(out, p)
			walk(p.Panels)
		}
	}
	walk(d.Panels)
	return out
}

func (p deployPanel) metrics() []string {
	var out []string
	for _, tg := range p.Targets {
		out = append(out, deployMetricRef.FindAllString(tg.Expr, -1)...)
	}
	return out
}

func (p deployPanel) uses(metric string) bool { return slices.Contains(p.metrics(), metric) }

// deployStateCodes reads the code each state gets in a state query:
// `cleanmon_zone_state{…, state="alert"} * 2`.
func deployStateCodes(metric, expr string) map[string]string {
	re := regexp.MustCompile(regexp.QuoteMeta(metric) + `\{[^}]*state="([a-z-]+)"[^}]*\}\s*\*\s*(\d+)`)
	codes := map[string]string{}
	for _, m := range re.FindAllStringSubmatch(expr, -1) {
		codes[m[1]] = m[2]
	}
	return codes
}

// deployStatePanel is the stat panel that shows a state metric as words
// through a value mapping.
func deployStatePanel(d *deployDashboard, metric string) (deployPanel, bool) {
	for _, p := range d.panels() {
		if p.Type == "stat" && p.uses(metric) && len(p.FieldConfig.Defaults.Mappings) > 0 {
			return p, true
		}
	}
	return deployPanel{}, false
}

func TestDeployDashboard(t *testing.T) {
	d := deployLoadDashboard(t)
	exported := deployExportedMetrics(t)
	if d.UID == "" || len(d.UID) > 40 {
		t.Errorf("uid %q: want 1 to 40 characters (Grafana's limit)", d.UID)
	}
	if d.Title == "" {
		t.Error("no title")
	}
	// 36 is the first schema whose panels name their data source by uid,
	// which the ${ds} references below need (Grafana 9, from memory).
	if d.SchemaVersion < 36 {
		t.Errorf("schemaVersion %d, want at least 36", d.SchemaVersion)
	}

	dsVar := ""
	vars := map[string]deployVariable{}
	for _, v := range d.Templating.List {
		vars[v.Name] = v
		if v.Type == "datasource" {
			var q string
			if err := json.Unmarshal(v.Query, &q); err != nil || q != "prometheus" {
				t.Errorf("data source variable %s: query %s, want \"prometheus\"", v.Name, v.Query)
			}
			dsVar = v.Name
		}
	}
	if dsVar == "" {
		t.Fatal("no data source template variable")
	}
	wantDS := "${" + dsVar + "}"
	zone, ok := vars["zone"]
	if !ok || zone.Type != "query" {
		t.Errorf("want a query variable named zone, have %+v", zone)
	}
	for _, v := range d.Templating.List {
		if v.Type != "query" {
			continue
		}
		if v.Datasource == nil || v.Datasource.UID != wantDS {
			t.Errorf("variable %s: data source %+v, want uid %s", v.Name, v.Datasource, wantDS)
		}
		for _, m := range deployMetricRef.FindAllString(v.Definition+string(v.Query), -1) {
			if !exported[m] {
				t.Errorf("variable %s queries %s, which cleanmon does not export", v.Name, m)
			}
		}
	}

	ids := map[int]string{}
	for _, p := range d.panels() {
		if prev, dup := ids[p.ID]; dup {
			t.Errorf("panel id %d used by %q and %q", p.ID, prev, p.Title)
		}
		ids[p.ID] = p.Title
		if p.Type == "row" {
			continue
		}
		if p.Datasource == nil || p.Datasource.UID != wantDS {
			t.Errorf("panel %q: data source %+v, want uid %s", p.Title, p.Datasource, wantDS)
		}
		if len(p.Targets) == 0 {
			t.Errorf("panel %q has no query", p.Title)
		}
		for _, tg := range p.Targets {
			if tg.Datasource == nil || tg.Datasource.UID != wantDS {
				t.Errorf("panel %q query %s: data source %+v, want uid %s", p.Title, tg.RefID, tg.Datasource, wantDS)
			}
			refs := deployMetricRef.FindAllString(tg.Expr, -1)
			if len(refs) == 0 {
				t.Errorf("panel %q query %s uses no cleanmon metric: %s", p.Title, tg.RefID, tg.Expr)
			}
			for _, m := range refs {
				if !exported[m] {
					t.Errorf("panel %q query %s uses %s, which cleanmon does not export", p.Title, tg.RefID, m)
				}
			}
		}
	}

	// The panels the dashboard is for, found by what they show rather
	// than by title.
	required := []struct {
		what    string
		typ     string
		metrics []string
		check   func(deployPanel) error
	}{
		{"zones overview", "stat", []string{"cleanmon_zone_state"}, func(p deployPanel) error {
			if len(p.FieldConfig.Defaults.Mappings) == 0 {
				return errors.New("no value mapping: the state would read as a number")
			}
			return nil
		}},
		{"concentrations against limits", "timeseries", []string{"cleanmon_particle_concentration_per_cubic_meter", "cleanmon_class_limit_per_cubic_meter"}, func(p deployPanel) error {
			if s := p.FieldConfig.Defaults.Custom.ScaleDistribution; s.Type != "log" || s.Log != 10 {
				return fmt.Errorf("axis scale %+v, want log 10", s)
			}
			if p.Repeat != "zone" {
				return fmt.Errorf("repeat %q, want one panel per zone", p.Repeat)
			}
			return nil
		}},
		{"DP cascade", "timeseries", []string{"cleanmon_differential_pressure_pascals"}, nil},
		{"active alarms", "table", []string{"cleanmon_alarm_active"}, nil},
	}
	for _, r := range required {
		t.Run(r.what, func(t *testing.T) {
			var found []string
			for _, p := range d.panels() {
				if p.Type != r.typ || !slices.ContainsFunc(r.metrics, p.uses) {
					continue
				}
				if !slices.ContainsFunc(r.metrics, func(m string) bool { return !p.uses(m) }) {
					if r.check == nil {
						return
					}
					err := r.check(p)
					if err == nil {
						return
					}
					found = append(found, fmt.Sprintf("%q: %v", p.Title, err))
				}
			}
			t.Errorf("no %s panel showing %v (candidates: %v)", r.typ, r.metrics, found)
		})
	}

	// Panels must not overlap: Grafana would move them, and the layout
	// would not be the one designed.
	type cell struct{ x, y int }
	taken := map[cell]string{}
layout:
	for _, p := range d.Panels {
		g := p.GridPos
		if g.W <= 0 || g.H <= 0 || g.X < 0 || g.X+g.W > 24 {
			t.Errorf("panel %q: gridPos %+v outside the 24-column grid", p.Title, g)
			continue
		}
		for x := g.X; x < g.X+g.W; x++ {
			for y := g.Y; y < g.Y+g.H; y++ {
				if other, ok := taken[cell{x, y}]; ok {
					t.Errorf("panel %q overlaps %q at column %d row %d", p.Title, other, x, y)
					continue layout
				}
				taken[cell{x, y}] = p.Title
			}
		}
	}
}

// TestDeployDashboardStateMapping checks, for each state panel, that the
// code the query gives each state and the word the value mapping shows for
// that code are the same state.
func TestDeployDashboardStateMapping(t *testing.T) {
	d := deployLoadDashboard(t)
	for _, sm := range deployStateMetrics {
		t.Run(sm.metric, func(t *testing.T) {
			p, ok := deployStatePanel(d, sm.metric)
			if !ok {
				t.Fatalf("no stat panel with a value mapping shows %s", sm.metric)
			}
			codes := deployStateCodes(sm.metric, p.Targets[0].Expr)
			words := deployPanelTexts(t, p) // code → word
			for _, state := range sm.states {
				code, ok := codes[state]
				if !ok {
					t.Errorf("state %s: not encoded by the query %s", state, p.Targets[0].Expr)
					continue
				}
				if words[code] != state {
					t.Errorf("state %s: the query gives code %s, which the mapping shows as %q", state, code, words[code])
				}
			}
			if len(codes) != len(sm.states) {
				t.Errorf("the query encodes %d states (%v), want the %d of the zone object", len(codes), codes, len(sm.states))
			}
		})
	}
}

// deployDashboardPromQL turns a dashboard expression into plain PromQL by
// giving the template variables the values "All" gives them.
func deployDashboardPromQL(expr string) string {
	return strings.NewReplacer(
		"$__rate_interval", "1m",
		"$instance", ".+",
		"$zone", ".+",
	).Replace(expr)
}

// TestDeployDashboardQueries hands every dashboard query to promtool, and
// evaluates the state queries on series for each state to see that the
// mapped word is the state that is 1.
func TestDeployDashboardQueries(t *testing.T) {
	promtool := deployTool(t, "promtool", "prometheus")
	d := deployLoadDashboard(t)
	dir := t.TempDir()

	type rule struct {
		Record string `yaml:"record"`
		Expr   string `yaml:"expr"`
	}
	var rules []rule
	for _, p := range d.panels() {
		for _, tg := range p.Targets {
			rules = append(rules, rule{fmt.Sprintf("dashboard:panel_%d_%s", p.ID, strings.ToLower(tg.RefID)), deployDashboardPromQL(tg.Expr)})
		}
	}
	rulesYAML, err := yaml.Marshal(map[string]any{"groups": []any{map[string]any{"name": "dashboard", "rules": rules}}})
	if err != nil {
		t.Fatal(err)
	}
	rulesFile := filepath.Join(dir, "dashboard-rules.yml")
	if err := os.WriteFile(rulesFile, rulesYAML, 0o644); err != nil {
		t.Fatal(err)
	}
	if out, err := deployRun(t, promtool, "check", "rules", rulesFile); err != nil {
		t.Fatalf("a dashboard query is not valid PromQL: %v\n%s", err, out)
	}

	// Each state in turn is the current one (1, the others 0); the query
	// must give the code that the mapping shows as that state's word.
	const instance = "cleanmon-c.veldmark.example:8080"
	var tests []any
	for _, sm := range deployStateMetrics {
		p, ok := deployStatePanel(d, sm.metric)
		if !ok {
			t.Fatalf("no stat panel with a value mapping shows %s", sm.metric)
		}
		codes := map[string]string{} // word → code, from the mapping
		for code, word := range deployPanelTexts(t, p) {
			codes[word] = code
		}
		for _, current := range sm.states {
			var series []any
			for _, s := range sm.states {
				v := "0x4"
				if s == current {
					v = "1x4"
				}
				series = append(series, map[string]any{
					"series": fmt.Sprintf(`%s{job="cleanmon",instance=%q,zone="assembly",state=%q}`, sm.metric, instance, s),
					"values": v,
				})
			}
			want, err := strconv.ParseFloat(codes[current], 64)
			if err != nil {
				t.Errorf("%s state %s: no numeric code in the value mapping (%q)", sm.metric, current, codes[current])
				continue
			}
			tests = append(tests, map[string]any{
				"name":         sm.metric + " " + current,
				"interval":     "1m",
				"input_series": series,
				"promql_expr_test": []any{map[string]any{
					"expr":      deployDashboardPromQL(p.Targets[0].Expr),
					"eval_time": "2m",
					"exp_samples": []any{map[string]any{
						"labels": fmt.Sprintf(`{instance=%q,zone="assembly"}`, instance),
						"value":  want,
					}},
				}},
			})
		}
	}
	testYAML, err := yaml.Marshal(map[string]any{"rule_files": []string{"dashboard-rules.yml"}, "tests": tests})
	if err != nil {
		t.Fatal(err)
	}
	testFile := filepath.Join(dir, "dashboard-state.test.yml")
	if err := os.WriteFile(testFile, testYAML, 0o644); err != nil {
		t.Fatal(err)
	}
	if out, err := deployRun(t, promtool, "test", "rules", testFile); err != nil {
		t.Fatalf("a state query does not give the code its mapping expects: %v\n%s", err, out)
	}
}

// --- Prometheus rules and configuration ---

type deployRuleFile struct {
	Groups []struct {
		Name  string `yaml:"name"`
		Rules []struct {
			Alert       string            `yaml:"alert"`
			Record      string            `yaml:"record"`
			Expr        string            `yaml:"expr"`
			For         string            `yaml:"for"`
			Labels      map[string]string `yaml:"labels"`
			Annotations map[string]string `yaml:"annotations"`
		} `yaml:"rules"`
	} `yaml:"groups"`
}

// deployValueless are the alerts that say something is missing (a scrape,
// a notifier, a judgement, an instrument): they have no value to show.
var deployValueless = map[string]bool{"CleanmonDown": true, "CleanmonNotifierDown": true, "CleanmonZoneStateUnknown": true, "CleanmonInstrumentNeverReported": true}

// TestDeployRules checks what promtool does not: the rules use only
// metrics cleanmon exports, label every alert for the Alertmanager routes,
// and each alert has a unit test.
func TestDeployRules(t *testing.T) {
	exported := deployExportedMetrics(t)
	var rf deployRuleFile
	for _, name := range []string{"cleanmon-rules.yml", "cleanmon-alarm-rules.yml"} {
		var one deployRuleFile
		if err := yaml.Unmarshal(deployRead(t, "prometheus", name), &one); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		rf.Groups = append(rf.Groups, one.Groups...)
	}
	var tf struct {
		Tests []struct {
			AlertRuleTest []struct {
				Alertname string `yaml:"alertname"`
				ExpAlerts []any  `yaml:"exp_alerts"`
			} `yaml:"alert_rule_test"`
		} `yaml:"tests"`
	}
	if err := yaml.Unmarshal(deployRead(t, "prometheus", "cleanmon-rules.test.yml"), &tf); err != nil {
		t.Fatal(err)
	}
	fires, quiet := map[string]bool{}, map[string]bool{}
	for _, tc := range tf.Tests {
		for _, a := range tc.AlertRuleTest {
			if len(a.ExpAlerts) > 0 {
				fires[a.Alertname] = true
			} else {
				quiet[a.Alertname] = true
			}
		}
	}

	labelValues := map[string][]string{
		"level":    {"action", "alert"},     // ISO 14644-2 terms
		"severity": {"critical", "warning"}, // the urgency the Alertmanager example routes on
	}
	alerts := 0
	for _, g := range rf.Groups {
		for i, r := range g.Rules {
			where := fmt.Sprintf("group %s rule %d (%s%s)", g.Name, i, r.Alert, r.Record)
			for _, m := range deployMetricRef.FindAllString(r.Expr, -1) {
				if !exported[m] {
					t.Errorf("%s: expr uses %s, which cleanmon does not export", where, m)
				}
			}
			if r.Alert == "" {
				continue
			}
			alerts++
			for label, allowed := range labelValues {
				if !slices.Contains(allowed, r.Labels[label]) {
					t.Errorf("%s: label %s=%q, want one of %v", where, label, r.Labels[label], allowed)
				}
			}
			if r.Labels["kind"] == "" {
				t.Errorf("%s: no kind label (the inhibit rules match zone and kind)", where)
			}
			if r.Annotations["summary"] == "" || r.Annotations["description"] == "" {
				t.Errorf("%s: want summary and description annotations", where)
			}
			// A reader is shown the value with its unit, except where the
			// alert is that something is missing.
			if r.Annotations["value"] == "" && !deployValueless[r.Alert] {
				t.Errorf("%s: no value annotation (the value with its unit)", where)
			}
			if !fires[r.Alert] {
				t.Errorf("%s: no unit test in cleanmon-rules.test.yml where it fires", where)
			}
			if r.For != "" && !quiet[r.Alert] {
				t.Errorf("%s: waits %s but no unit test shows it quiet before then", where, r.For)
			}
		}
	}
	if alerts < 6 {
		t.Errorf("%d alert rules, want at least out of class, unknown, counter silent, DP low, reversal and notifier down", alerts)
	}
}

func TestDeployPrometheusConfig(t *testing.T) {
	var cfg struct {
		RuleFiles     []string `yaml:"rule_files"`
		ScrapeConfigs []struct {
			JobName       string `yaml:"job_name"`
			MetricsPath   string `yaml:"metrics_path"`
			Authorization struct {
				Type            string `yaml:"type"`
				CredentialsFile string `yaml:"credentials_file"`
			} `yaml:"authorization"`
			StaticConfigs []struct {
				Targets []string `yaml:"targets"`
			} `yaml:"static_configs"`
		} `yaml:"scrape_configs"`
	}
	if err := yaml.Unmarshal(deployRead(t, "prometheus", "prometheus.yml"), &cfg); err != nil {
		t.Fatal(err)
	}
	if !slices.Contains(cfg.RuleFiles, "cleanmon-rules.yml") {
		t.Errorf("rule_files %v does not load cleanmon-rules.yml", cfg.RuleFiles)
	}
	// One paging path by default: the daemon's own notifier. The rules that
	// judge the same events are the alternative, not loaded beside it.
	if slices.Contains(cfg.RuleFiles, "cleanmon-alarm-rules.yml") {
		t.Errorf("rule_files %v loads cleanmon-alarm-rules.yml beside the daemon's notifier: one event would page twice", cfg.RuleFiles)
	}
	for _, sc := range cfg.ScrapeConfigs {
		if sc.JobName != "cleanmon" {
			continue
		}
		// The rules' CleanmonDown matches this job name.
		if sc.MetricsPath != "/metrics" {
			t.Errorf("job cleanmon: metrics_path %q, want /metrics", sc.MetricsPath)
		}
		if sc.Authorization.CredentialsFile == "" || !strings.EqualFold(sc.Authorization.Type, "bearer") {
			t.Errorf("job cleanmon: authorization %+v, want a bearer credentials_file", sc.Authorization)
		}
		if len(sc.StaticConfigs) == 0 || len(sc.StaticConfigs[0].Targets) == 0 {
			t.Error("job cleanmon: no target")
		}
		return
	}
	t.Error("no scrape job named cleanmon (the rules' CleanmonDown expects that name)")
}

// TestDeployPromtool runs promtool on the rules, their unit tests and both
// example configurations.
func TestDeployPromtool(t *testing.T) {
	promtool := deployTool(t, "promtool", "prometheus")
	prom := deployPath("prometheus")

	// The shipped scrape configuration names a token file of the server it
	// is installed on; a full check, which opens every file it names, runs
	// on a copy pointing at a token file made here.
	dir := t.TempDir()
	cfg := string(deployRead(t, "prometheus", "prometheus.yml"))
	const shippedToken = "credentials_file: /etc/prometheus/cleanmon-viewer.token"
	if !strings.Contains(cfg, shippedToken) {
		t.Fatalf("prometheus.yml: no %q", shippedToken)
	}
	token := filepath.Join(dir, "viewer.token")
	if err := os.WriteFile(token, []byte("not-a-secret\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cfg = strings.Replace(cfg, shippedToken, "credentials_file: "+token, 1)
	if err := os.WriteFile(filepath.Join(dir, "prometheus.yml"), []byte(cfg), 0o644); err != nil {
		t.Fatal(err)
	}
	rules := deployRead(t, "prometheus", "cleanmon-rules.yml")
	if err := os.WriteFile(filepath.Join(dir, "cleanmon-rules.yml"), rules, 0o644); err != nil {
		t.Fatal(err)
	}

	cases := []struct {
		name string
		args []string
		want []string // in the output
	}{
		{"check rules", []string{"check", "rules", filepath.Join(prom, "cleanmon-rules.yml")}, []string{"SUCCESS"}},
		{"check alarm rules", []string{"check", "rules", filepath.Join(prom, "cleanmon-alarm-rules.yml")}, []string{"SUCCESS"}},
		{"test rules", []string{"test", "rules", filepath.Join(prom, "cleanmon-rules.test.yml")}, []string{"SUCCESS"}},
		{"check config syntax", []string{"check", "config", "--syntax-only", filepath.Join(prom, "prometheus.yml")}, []string{"SUCCESS"}},
		{"check config with its rules", []string{"check", "config", filepath.Join(dir, "prometheus.yml")}, []string{"cleanmon-rules.yml", "SUCCESS"}},
		{"check federation config", []string{"check", "config", filepath.Join(prom, "federation.yml")}, []string{"SUCCESS"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out, err := deployRun(t, promtool, c.args...)
			if err != nil {
				t.Fatalf("promtool %s: %v\n%s", strings.Join(c.args, " "), err, out)
			}
			for _, w := range c.want {
				if !strings.Contains(out, w) {
					t.Errorf("promtool %s: output lacks %q:\n%s", strings.Join(c.args, " "), w, out)
				}
			}
		})
	}
}

// --- Alertmanager ---

func TestDeployAlertmanager(t *testing.T) {
	var cfg struct {
		InhibitRules []struct {
			SourceMatchers []string `yaml:"source_matchers"`
			TargetMatchers []string `yaml:"target_matchers"`
			Equal          []string `yaml:"equal"`
		} `yaml:"inhibit_rules"`
	}
	file := deployPath("alertmanager", "alertmanager.yml")
	if err := yaml.Unmarshal(deployRead(t, "alertmanager", "alertmanager.yml"), &cfg); err != nil {
		t.Fatal(err)
	}
	found := false
	for _, r := range cfg.InhibitRules {
		if slices.Contains(r.SourceMatchers, `level="action"`) && slices.Contains(r.TargetMatchers, `level="alert"`) &&
			slices.Contains(r.Equal, "zone") && slices.Contains(r.Equal, "kind") {
			found = true
		}
	}
	if !found {
		t.Error(`no inhibit rule by which level="action" silences level="alert" of the same zone and kind`)
	}

	amtool := deployTool(t, "amtool", "prometheus-alertmanager")
	if out, err := deployRun(t, amtool, "check-config", file); err != nil {
		t.Fatalf("amtool check-config: %v\n%s", err, out)
	}
	// Who is told of what (deploy/README.md, "Alertmanager").
	routes := []struct {
		labels   []string
		receiver string
	}{
		// The daemon's own alarms: the one paging path by default.
		{[]string{"alertname=cleanmon_out-of-class", "level=action", "severity=action", "zone=assembly", "kind=out-of-class", "site=veldmark-photonics", "suite=building-c"}, "cleanroom-pager"},
		{[]string{"alertname=cleanmon_pressure-reversal", "level=action", "severity=action", "zone=coating-hood", "kind=pressure-reversal"}, "cleanroom-pager"},
		{[]string{"alertname=cleanmon_excursion", "level=alert", "severity=alert", "zone=assembly", "kind=excursion"}, "cleanroom-chat"},
		// Its heartbeat, to the dead-man's switch, whatever its severity.
		{[]string{"alertname=cleanmon_heartbeat", "severity=action", "site=veldmark-photonics", "suite=building-c"}, "monitoring-deadman"},
		{[]string{"alertname=cleanmon_heartbeat", "severity=alert"}, "monitoring-deadman"},
		// The Prometheus rules that judge the same events are not sent.
		{[]string{"alertname=CleanmonZoneOutOfClass", "level=action", "severity=critical", "zone=assembly", "kind=out-of-class"}, "not-sent"},
		{[]string{"alertname=CleanmonZoneStateUnknown", "level=action", "severity=warning", "zone=gowning", "kind=monitoring"}, "not-sent"},
		{[]string{"alertname=CleanmonPressureReversal", "level=action", "severity=critical", "kind=pressure-reversal"}, "not-sent"},
		{[]string{"alertname=CleanmonDown", "level=alert", "severity=warning", "kind=monitoring"}, "cleanroom-chat"},
		{[]string{"level=action", "severity=warning", "zone=gowning"}, "cleanroom-pager-low"},
		{[]string{"alertname=CleanmonZoneAboveAlertLevel", "level=alert", "severity=warning", "zone=assembly", "kind=excursion"}, "not-sent"},
		{[]string{"level=alert", "zone=metrology", "kind=stale"}, "cleanroom-chat"},
		{[]string{"alertname=SomethingElse"}, "cleanroom-chat"},
	}
	for _, r := range routes {
		t.Run(strings.Join(r.labels, ","), func(t *testing.T) {
			args := append([]string{"config", "routes", "test", "--config.file=" + file, "--verify.receivers=" + r.receiver}, r.labels...)
			out, err := deployRun(t, amtool, args...)
			if err != nil {
				t.Errorf("labels %v: want receiver %s: %v\n%s", r.labels, r.receiver, err, out)
			}
		})
	}
}

// --- systemd unit ---

// deployUnit is a systemd unit file: section → key → values in order
// (keys such as ExecReload may repeat).
type deployUnit map[string]map[string][]string

func deployParseUnit(data []byte) (deployUnit, error) {
	u := deployUnit{}
	section := ""
	for i, line := range strings.Split(string(data), "\n") {
		line = strings.TrimSpace(line)
		if line == "" || strings.HasPrefix(line, "#") || strings.HasPrefix(line, ";") {
			continue
		}
		if strings.HasPrefix(line, "[") && strings.HasSuffix(line, "]") {
			section = line[1 : len(line)-1]
			u[section] = map[string][]string{}
			continue
		}
		k, v, ok := strings.Cut(line, "=")
		if !ok || section == "" {
			return nil, fmt.Errorf("line %d: %q is neither a section nor key=value", i+1, line)
		}
		k, v = strings.TrimSpace(k), strings.TrimSpace(v)
		u[section][k] = append(u[section][k], v)
	}
	return u, nil
}

func (u deployUnit) last(section, key string) (string, bool) {
	vs := u[section][key]
	if len(vs) == 0 {
		return "", false
	}
	return vs[len(vs)-1], true
}

func TestDeploySystemdUnit(t *testing.T) {
	u, err := deployParseUnit(deployRead(t, "systemd", "cleanmon.service"))
	if err != nil {
		t.Fatalf("systemd/cleanmon.service: %v", err)
	}
	equals := func(want string) func(string) bool { return func(v string) bool { return v == want } }
	checks := []struct {
		section, key string
		ok           func(string) bool
		want         string
	}{
		{"Service", "User", equals("cleanmon"), "the dedicated user"},
		{"Service", "Group", equals("cleanmon"), "its group"},
		{"Service", "StateDirectory", equals("cleanmon"), "/var/lib/cleanmon made by systemd"},
		{"Service", "ExecStart", func(v string) bool {
			return strings.Contains(v, " serve ") && strings.Contains(v, "--config /etc/cleanmon/cleanmon.yaml") && strings.Contains(v, "--data /var/lib/cleanmon")
		}, "serve --config /etc/cleanmon/cleanmon.yaml --data /var/lib/cleanmon"},
		{"Service", "ExecReload", func(v string) bool { return strings.HasSuffix(v, "kill -HUP $MAINPID") }, "SIGHUP to the main process"},
		{"Service", "KillSignal", equals("SIGTERM"), "graceful stop"},
		{"Service", "ProtectSystem", equals("strict"), "a read-only system"},
		{"Service", "ProtectHome", equals("yes"), "no home directories"},
		{"Service", "NoNewPrivileges", equals("yes"), "no privilege gain"},
		{"Service", "CapabilityBoundingSet", equals(""), "no capabilities"},
		{"Service", "PrivateTmp", equals("yes"), "a private /tmp"},
		{"Service", "PrivateDevices", equals("yes"), "no devices"},
		{"Service", "Restart", equals("on-failure"), "restart after a crash"},
		{"Install", "WantedBy", equals("multi-user.target"), "started at boot"},
	}
	for _, c := range checks {
		v, ok := u.last(c.section, c.key)
		if !ok || !c.ok(v) {
			t.Errorf("[%s] %s=%q (set: %v), want %s", c.section, c.key, v, ok, c.want)
		}
	}
	if v, _ := u.last("Service", "User"); v == "root" || v == "0" {
		t.Errorf("the service runs as %s", v)
	}

	// The sysusers file makes the user the unit runs as.
	users := string(deployRead(t, "systemd", "cleanmon.sysusers.conf"))
	user, _ := u.last("Service", "User")
	made := false
	for _, line := range strings.Split(users, "\n") {
		f := strings.Fields(line)
		if len(f) >= 2 && f[0] == "u" && f[1] == user {
			made = true
		}
	}
	if !made {
		t.Errorf("cleanmon.sysusers.conf does not create user %q", user)
	}
}

// --- Dockerfile ---

type deployInstruction struct {
	line int
	cmd  string // upper case
	args string
}

type deployStage struct {
	from, name string
	body       []deployInstruction
}

// deployParseDockerfile splits a Dockerfile into stages, joining
// continuation lines and dropping comments.
func deployParseDockerfile(data []byte) ([]deployStage, error) {
	var stages []deployStage
	var cur strings.Builder
	start := 0
	flush := func() error {
		text := strings.TrimSpace(cur.String())
		cur.Reset()
		if text == "" {
			return nil
		}
		cmd, args, _ := strings.Cut(text, " ")
		in := deployInstruction{start, strings.ToUpper(cmd), strings.TrimSpace(args)}
		if in.cmd == "FROM" {
			f := strings.Fields(in.args)
			st := deployStage{from: f[0]}
			if len(f) == 3 && strings.EqualFold(f[1], "AS") {
				st.name = f[2]
			}
			stages = append(stages, st)
			return nil
		}
		if len(stages) == 0 {
			if in.cmd == "ARG" {
				return nil
			}
			return fmt.Errorf("line %d: %s before the first FROM", in.line, in.cmd)
		}
		stages[len(stages)-1].body = append(stages[len(stages)-1].body, in)
		return nil
	}
	for i, line := range strings.Split(string(data), "\n") {
		trimmed := strings.TrimSpace(line)
		if strings.HasPrefix(trimmed, "#") {
			continue
		}
		if cur.Len() == 0 {
			start = i + 1
		}
		if strings.HasSuffix(trimmed, "\\") {
			cur.WriteString(strings.TrimSuffix(trimmed, "\\") + " ")
			continue
		}
		cur.WriteString(trimmed)
		if err := flush(); err != nil {
			return nil, err
		}
	}
	if err := flush(); err != nil {
		return nil, err
	}
	return stages, nil
}

func (s deployStage) all(cmd string) []deployInstruction {
	var out []deployInstruction
	for _, in := range s.body {
		if in.cmd == cmd {
			out = append(out, in)
		}
	}
	return out
}

func (s deployStage) execForm(cmd string) ([]string, error) {
	ins := s.all(cmd)
	if len(ins) == 0 {
		return nil, fmt.Errorf("no %s", cmd)
	}
	var argv []string
	if err := json.Unmarshal([]byte(ins[len(ins)-1].args), &argv); err != nil {
		return nil, fmt.Errorf("line %d: %s is not in exec form: %v", ins[len(ins)-1].line, cmd, err)
	}
	return argv, nil
}

func TestDeployDockerfile(t *testing.T) {
	stages, err := deployParseDockerfile(deployRead(t, "Dockerfile"))
	if err != nil {
		t.Fatalf("Dockerfile: %v", err)
	}
	if len(stages) < 2 {
		t.Fatalf("%d stages, want a build stage and a run stage", len(stages))
	}
	build, final := stages[0], stages[len(stages)-1]
	checks := []struct {
		what  string
		check func() error
	}{
		{"build stage on golang:1.26", func() error {
			if !strings.HasPrefix(build.from, "golang:1.26") || build.name == "" {
				return fmt.Errorf("first stage FROM %s AS %q", build.from, build.name)
			}
			return nil
		}},
		{"static build", func() error {
			for _, in := range build.all("RUN") {
				if strings.Contains(in.args, "CGO_ENABLED=0") && strings.Contains(in.args, "go build") {
					return nil
				}
			}
			return errors.New("no RUN with CGO_ENABLED=0 go build")
		}},
		{"run stage without a toolchain", func() error {
			if strings.HasPrefix(final.from, "golang") {
				return fmt.Errorf("last stage FROM %s", final.from)
			}
			return nil
		}},
		{"non-root user", func() error {
			users := final.all("USER")
			if len(users) == 0 {
				return errors.New("no USER in the run stage")
			}
			u := users[len(users)-1].args
			name, _, _ := strings.Cut(u, ":")
			if name == "root" || name == "0" {
				return fmt.Errorf("USER %s", u)
			}
			return nil
		}},
		{"binary copied from the build stage and run", func() error {
			dests := map[string]bool{}
			for _, in := range final.all("COPY") {
				f := strings.Fields(in.args)
				if slices.Contains(f, "--from="+build.name) {
					dests[f[len(f)-1]] = true
				}
			}
			argv, err := final.execForm("ENTRYPOINT")
			if err != nil {
				return err
			}
			if !dests[argv[0]] {
				return fmt.Errorf("ENTRYPOINT %s is not a file copied from stage %s (%v)", argv[0], build.name, dests)
			}
			return nil
		}},
		{"serves the mounted configuration", func() error {
			argv, err := final.execForm("CMD")
			if err != nil {
				return err
			}
			cmd := strings.Join(argv, " ")
			if !strings.HasPrefix(cmd, "serve ") || !strings.Contains(cmd, "--config /etc/cleanmon/cleanmon.yaml") {
				return fmt.Errorf("CMD %s", cmd)
			}
			return nil
		}},
	}
	for _, c := range checks {
		if err := c.check(); err != nil {
			t.Errorf("%s: %v", c.what, err)
		}
	}
}

// --- command lines against the binary ---

// TestDeployCommandLines builds the binary and checks that the command
// lines the unit and the image run name sub-commands and flags it has,
// then lets systemd-analyze load the unit.
func TestDeployCommandLines(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary; not in -short")
	}
	goTool := deployTool(t, "go", "golang-go")
	bin := filepath.Join(t.TempDir(), "cleanmon")
	if out, err := deployRun(t, goTool, "build", "-o", bin, "../cmd/cleanmon"); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}

	u, err := deployParseUnit(deployRead(t, "systemd", "cleanmon.service"))
	if err != nil {
		t.Fatal(err)
	}
	type cmdLine struct {
		where string
		argv  []string
	}
	var lines []cmdLine
	for _, key := range []string{"ExecStartPre", "ExecStart", "ExecReload"} {
		for i, v := range u["Service"][key] {
			argv := strings.Fields(v)
			if filepath.Base(argv[0]) == "cleanmon" {
				lines = append(lines, cmdLine{fmt.Sprintf("unit %s[%d]", key, i), argv[1:]})
			}
		}
	}
	stages, err := deployParseDockerfile(deployRead(t, "Dockerfile"))
	if err != nil {
		t.Fatal(err)
	}
	cmd, err := stages[len(stages)-1].execForm("CMD")
	if err != nil {
		t.Fatal(err)
	}
	lines = append(lines, cmdLine{"image CMD", cmd})
	if len(lines) < 4 {
		t.Fatalf("found %d cleanmon command lines, want ExecStartPre, ExecStart, ExecReload and the image's CMD", len(lines))
	}

	for _, l := range lines {
		argv := l.argv
		t.Run(l.where, func(t *testing.T) {
			// `-h` prints the flags of the sub-command; an unknown
			// sub-command exits 2.
			out, err := deployRun(t, bin, argv[0], "-h")
			if err != nil {
				t.Fatalf("cleanmon %s -h: %v\n%s", argv[0], err, out)
			}
			for _, a := range argv[1:] {
				name, ok := strings.CutPrefix(a, "--")
				if !ok {
					continue
				}
				name, _, _ = strings.Cut(name, "=")
				if !regexp.MustCompile(`(?m)^\s+-` + regexp.QuoteMeta(name) + `\b`).MatchString(out) {
					t.Errorf("cleanmon %s has no flag --%s:\n%s", argv[0], name, out)
				}
			}
		})
	}

	t.Run("systemd-analyze verify", func(t *testing.T) {
		sa := deployTool(t, "systemd-analyze", "systemd")
		// verify wants the executables to exist: the unit is loaded with
		// the binary just built in place of /usr/local/bin/cleanmon.
		unit := strings.ReplaceAll(string(deployRead(t, "systemd", "cleanmon.service")), "/usr/local/bin/cleanmon", bin)
		path := filepath.Join(t.TempDir(), "cleanmon.service")
		if err := os.WriteFile(path, []byte(unit), 0o644); err != nil {
			t.Fatal(err)
		}
		out, err := deployRun(t, sa, "verify", path)
		if err != nil || strings.TrimSpace(out) != "" {
			t.Errorf("systemd-analyze verify: %v\n%s", err, out)
		}
	})
}
