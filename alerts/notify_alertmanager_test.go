package alerts

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"net"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// postableAlertFields are the properties of postableAlert in the
// Alertmanager v2 API (api/v2/openapi.yaml: labels required, a map of
// strings; annotations likewise; startsAt and endsAt date-time;
// generatorURL uri). From the published OpenAPI spec, recalled from memory.
var postableAlertFields = map[string]bool{"labels": true, "annotations": true, "startsAt": true, "endsAt": true, "generatorURL": true}

type amPosted struct {
	Labels       map[string]string
	Annotations  map[string]string
	StartsAt     time.Time
	EndsAt       time.Time
	GeneratorURL string
}

// amReceiver stands in for one Alertmanager peer: it checks every post
// against the v2 schema and keeps what it got.
type amReceiver struct {
	mu       sync.Mutex
	status   int
	posts    [][]amPosted
	problems []string
}

func (m *amReceiver) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	m.mu.Lock()
	defer m.mu.Unlock()
	bad := func(f string, a ...any) { m.problems = append(m.problems, fmt.Sprintf(f, a...)) }
	if r.Method != http.MethodPost || r.URL.Path != "/api/v2/alerts" {
		bad("%s %s", r.Method, r.URL.Path)
		http.NotFound(w, r)
		return
	}
	if ct := r.Header.Get("Content-Type"); ct != "application/json" {
		bad("Content-Type %q", ct)
	}
	body, _ := io.ReadAll(r.Body)
	var raw []map[string]json.RawMessage
	if err := json.Unmarshal(body, &raw); err != nil {
		bad("body is not an array of objects: %v", err)
		http.Error(w, err.Error(), http.StatusBadRequest)
		return
	}
	var got []amPosted
	for i, o := range raw {
		for k := range o {
			if !postableAlertFields[k] {
				bad("alert %d: %q is not a postableAlert field", i, k)
			}
		}
		var p amPosted
		if err := json.Unmarshal(o["labels"], &p.Labels); err != nil || len(p.Labels) == 0 {
			bad("alert %d: labels missing or not a map of strings: %s", i, o["labels"])
		}
		if a, ok := o["annotations"]; ok {
			if err := json.Unmarshal(a, &p.Annotations); err != nil {
				bad("alert %d: annotations: %v", i, err)
			}
		}
		for _, f := range []struct {
			key string
			dst *time.Time
		}{{"startsAt", &p.StartsAt}, {"endsAt", &p.EndsAt}} {
			var s string
			if v, ok := o[f.key]; ok {
				if err := json.Unmarshal(v, &s); err != nil {
					bad("alert %d: %s is not a string", i, f.key)
				} else if t, err := time.Parse(time.RFC3339Nano, s); err != nil {
					bad("alert %d: %s %q is not a date-time", i, f.key, s)
				} else {
					*f.dst = t
				}
			}
		}
		if v, ok := o["generatorURL"]; ok {
			_ = json.Unmarshal(v, &p.GeneratorURL)
			if u, err := url.Parse(p.GeneratorURL); err != nil || !u.IsAbs() {
				bad("alert %d: generatorURL %q is not a URI", i, p.GeneratorURL)
			}
		}
		got = append(got, p)
	}
	m.posts = append(m.posts, got)
	if m.status != 0 {
		http.Error(w, "not now", m.status)
		return
	}
	w.WriteHeader(http.StatusOK)
}

func (m *amReceiver) take() ([][]amPosted, []string) {
	m.mu.Lock()
	defer m.mu.Unlock()
	p, pr := m.posts, m.problems
	m.posts, m.problems = nil, nil
	return p, pr
}

func (m *amReceiver) setStatus(code int) {
	m.mu.Lock()
	m.status = code
	m.mu.Unlock()
}

func newTestAlertmanager(t *testing.T, cfg AlertmanagerConfig, now time.Time) *Alertmanager {
	t.Helper()
	a, err := NewAlertmanager(cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	a.now = func() time.Time { return now }
	return a
}

func TestAlertmanagerPostsV2Alerts(t *testing.T) {
	rcv := &amReceiver{}
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	now := ntT0.Add(time.Minute)
	cleared := ntT0.Add(10 * time.Minute)
	excursion := map[string]string{
		"alertname": "cleanmon_excursion", "zone": "assembly", "kind": "excursion", "level": "alert",
		"location": "pc-asm-1", "counter": "pc-asm-1", "size_um": "0.5", "site": "veldmark-c", "severity": "alert",
	}

	ack := ntAlarm("alm-1", StateAcknowledged)
	ack.AcknowledgedBy, ack.Comment = "j.ortega", "door left open, closed"
	clr := ntAlarm("alm-1", StateCleared)
	clr.ClearedAt = &cleared
	neverFired := ntAlarm("alm-2", StateCleared)
	neverFired.ActiveSince = nil
	rev := Alarm{ID: "alm-3", Zone: "assembly", Kind: KindPressureReversal, Level: LevelAction, State: StateActive,
		Sensor: "dp-asm-gown", Since: ntT0, ActiveSince: &ntT0, Value: -1.5, Threshold: 0, Unit: "Pa"}

	cases := []struct {
		name     string
		alarm    Alarm
		posted   bool
		labels   map[string]string
		endsAt   time.Time
		annotate map[string]string
	}{
		{"active fires", ntAlarm("alm-1", StateActive), true, excursion, now.Add(AlertmanagerHold),
			map[string]string{"alarm_id": "alm-1", "state": "active", "value": "120000", "threshold": "100000", "unit": "particles/m³",
				"value_text": "120000 particles/m³ (threshold 100000 particles/m³)"}},
		{"acknowledged still fires", ack, true, excursion, now.Add(AlertmanagerHold),
			map[string]string{"acknowledged_by": "j.ortega", "comment": "door left open, closed"}},
		{"cleared resolves at the clear time", clr, true, excursion, cleared, map[string]string{"state": "cleared"}},
		{"pending is not posted", ntAlarm("alm-2", StateDelayed), false, nil, time.Time{}, nil},
		{"cleared before firing is not posted", neverFired, false, nil, time.Time{}, nil},
		{"pressure reversal", rev, true, map[string]string{
			"alertname": "cleanmon_pressure-reversal", "zone": "assembly", "kind": "pressure-reversal", "level": "action",
			"sensor": "dp-asm-gown", "site": "veldmark-c", "severity": "action",
		}, now.Add(AlertmanagerHold), map[string]string{"value": "-1.5", "unit": "Pa", "value_text": "-1.5 Pa (threshold 0 Pa)", "summary": "pressure-reversal action in zone assembly"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			a := newTestAlertmanager(t, AlertmanagerConfig{URLs: []string{srv.URL}, ExternalURL: "https://cleanmon.veldmark.example/", Labels: map[string]string{"site": "veldmark-c"}}, now)
			tr := Transition{Key: tc.alarm.ID + "/x", AlarmID: tc.alarm.ID, Time: now, To: tc.alarm.State, Alarm: tc.alarm}
			if err := a.Notify(context.Background(), tr); err != nil {
				t.Fatal(err)
			}
			posts, problems := rcv.take()
			for _, p := range problems {
				t.Errorf("schema: %s", p)
			}
			if !tc.posted {
				if len(posts) != 0 {
					t.Fatalf("posted %+v", posts)
				}
				return
			}
			if len(posts) != 1 || len(posts[0]) != 1 {
				t.Fatalf("want one post of one alert, got %+v", posts)
			}
			got := posts[0][0]
			if !maps.Equal(got.Labels, tc.labels) {
				t.Errorf("labels %v, want %v", got.Labels, tc.labels)
			}
			wantStart := *tc.alarm.ActiveSince
			if !got.StartsAt.Equal(wantStart) || !got.EndsAt.Equal(tc.endsAt) {
				t.Errorf("startsAt %s endsAt %s, want %s and %s", got.StartsAt, got.EndsAt, wantStart, tc.endsAt)
			}
			for k, v := range tc.annotate {
				if got.Annotations[k] != v {
					t.Errorf("annotation %s = %q, want %q", k, got.Annotations[k], v)
				}
			}
			if want := "https://cleanmon.veldmark.example/api/v1/zones/assembly"; got.GeneratorURL != want {
				t.Errorf("generatorURL %q, want %q", got.GeneratorURL, want)
			}
		})
	}
}

// When an alarm's level rises, the series posted at the old level is
// resolved at once rather than left to expire.
func TestAlertmanagerResolvesSupersededLabels(t *testing.T) {
	rcv := &amReceiver{}
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	now := ntT0.Add(time.Minute)
	a := newTestAlertmanager(t, AlertmanagerConfig{URLs: []string{srv.URL}}, now)
	al := ntAlarm("alm-1", StateActive)
	if err := a.Notify(context.Background(), Transition{Key: "k1", AlarmID: al.ID, To: StateActive, Alarm: al}); err != nil {
		t.Fatal(err)
	}
	al.Level = LevelAction
	if err := a.Notify(context.Background(), Transition{Key: "k2", AlarmID: al.ID, To: StateActive, Alarm: al}); err != nil {
		t.Fatal(err)
	}
	posts, problems := rcv.take()
	if len(problems) > 0 || len(posts) != 2 || len(posts[1]) != 2 {
		t.Fatalf("posts %+v, problems %v", posts, problems)
	}
	fire, old := posts[1][0], posts[1][1]
	if fire.Labels["level"] != LevelAction || !fire.EndsAt.After(now) {
		t.Errorf("new series %+v", fire)
	}
	if old.Labels["level"] != LevelAlert || !old.EndsAt.Equal(now) {
		t.Errorf("old series %+v, want level alert resolved at %s", old, now)
	}
	// Cleared: one resolve, and the alarm is forgotten.
	clr := al
	clr.State = StateCleared
	if err := a.Notify(context.Background(), Transition{Key: "k3", AlarmID: al.ID, Time: now, To: StateCleared, Alarm: clr}); err != nil {
		t.Fatal(err)
	}
	posts, _ = rcv.take()
	if len(posts) != 1 || len(posts[0]) != 1 || !posts[0][0].EndsAt.Equal(now) {
		t.Errorf("clear posted %+v", posts)
	}
	if len(a.sent) != 0 {
		t.Errorf("still tracking %v", a.sent)
	}
}

func TestAlertmanagerPeers(t *testing.T) {
	dead := httptest.NewServer(http.NotFoundHandler())
	deadURL := dead.URL
	dead.Close()
	cases := []struct {
		name     string
		statuses []int // per live peer; -1 for a dead one
		want     error
		degraded int // peers named in Degraded
	}{
		{"all take it", []int{0, 0}, nil, 0},
		{"one down, one takes it", []int{-1, 0}, nil, 1},
		{"one overloaded, one takes it", []int{503, 0}, nil, 1},
		{"all down", []int{-1, 503}, ErrDelivery, 2},
		{"all refuse", []int{400, 422}, ErrRejected, 2},
		{"one refuses, one down", []int{400, -1}, ErrDelivery, 2},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var urls []string
			var rcvs []*amReceiver
			for _, st := range tc.statuses {
				if st < 0 {
					urls = append(urls, deadURL)
					continue
				}
				r := &amReceiver{status: st}
				s := httptest.NewServer(r)
				defer s.Close()
				urls = append(urls, s.URL)
				rcvs = append(rcvs, r)
			}
			a := newTestAlertmanager(t, AlertmanagerConfig{URLs: urls}, ntT0)
			err := a.Notify(context.Background(), Transition{Key: "k", AlarmID: "alm-1", To: StateActive, Alarm: ntAlarm("alm-1", StateActive)})
			if tc.want == nil && err != nil || tc.want != nil && !errors.Is(err, tc.want) {
				t.Fatalf("got %v, want %v", err, tc.want)
			}
			for _, r := range rcvs {
				if posts, _ := r.take(); len(posts) != 1 {
					t.Errorf("a live peer got %d posts, want 1", len(posts))
				}
			}
			deg := a.Degraded()
			if n := strings.Count(deg, "peer 127.0.0.1:"); n != tc.degraded {
				t.Errorf("Degraded %q names %d peers, want %d", deg, n, tc.degraded)
			}
		})
	}
}

func TestAlertmanagerConfigErrors(t *testing.T) {
	ok := AlertmanagerConfig{URLs: []string{"http://127.0.0.1:9093"}}
	cases := []struct {
		name string
		edit func(*AlertmanagerConfig)
		path string
		msg  string
	}{
		{"no urls", func(c *AlertmanagerConfig) { c.URLs = nil }, "alertmanagers[0].urls", "missing"},
		{"bad url", func(c *AlertmanagerConfig) { c.URLs = []string{"127.0.0.1:9093"} }, "alertmanagers[0].urls[0]", "http"},
		{"peer twice", func(c *AlertmanagerConfig) { c.URLs = append(c.URLs, c.URLs[0]) }, "alertmanagers[0].urls[1]", "urls[0]"},
		{"resend too short", func(c *AlertmanagerConfig) { c.Resend = model.Duration(time.Millisecond) }, "alertmanagers[0].resend", "at least 1s"},
		{"negative timeout", func(c *AlertmanagerConfig) { c.Timeout = model.Duration(-time.Second) }, "alertmanagers[0].timeout", "positive"},
		{"external url", func(c *AlertmanagerConfig) { c.ExternalURL = "cleanmon.local" }, "alertmanagers[0].external_url", "http"},
		{"label clash", func(c *AlertmanagerConfig) { c.Labels = map[string]string{"zone": "x"} }, "alertmanagers[0].labels.zone", "set by the notifier"},
		{"label name", func(c *AlertmanagerConfig) { c.Labels = map[string]string{"1site": "x"} }, "alertmanagers[0].labels.1site", "not a label name"},
		{"reserved label", func(c *AlertmanagerConfig) { c.Labels = map[string]string{"__name__": "x"} }, "alertmanagers[0].labels.__name__", "not a label name"},
		{"empty label", func(c *AlertmanagerConfig) { c.Labels = map[string]string{"site": ""} }, "alertmanagers[0].labels.site", "empty"},
		{"bad name", func(c *AlertmanagerConfig) { c.Name = "am/1" }, "alertmanagers[0].name", "letters"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := ok
			c.URLs = slices.Clone(ok.URLs)
			tc.edit(&c)
			errs := ValidateNotify(NotifyConfig{Alertmanagers: []AlertmanagerConfig{c}})
			if len(errs) != 1 || errs[0].Path != "notifications."+tc.path || !strings.Contains(errs[0].Msg, tc.msg) {
				t.Fatalf("got %v, want one problem at %s with %q", errs, tc.path, tc.msg)
			}
			if _, err := NewAlertmanager(c, nil); !errors.Is(err, ErrNotifyConfig) {
				t.Errorf("NewAlertmanager accepted it: %v", err)
			}
		})
	}
}

// The resend loop re-posts what fires, and nothing else, every period.
func TestAlertmanagerResendLoop(t *testing.T) {
	rcv := &amReceiver{}
	srv := httptest.NewServer(rcv)
	defer srv.Close()
	a, err := NewAlertmanager(AlertmanagerConfig{URLs: []string{srv.URL}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	a.resend = 10 * time.Millisecond // below what a configuration may ask, to keep the test short
	open := []Alarm{ntAlarm("alm-1", StateActive), ntAlarm("alm-2", StateDelayed), ntAlarm("alm-3", StateAcknowledged), ntAlarm("alm-4", StateCleared)}
	var mu sync.Mutex
	calls := 0
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	done := make(chan error, 1)
	go func() {
		done <- a.Run(ctx, func() []Alarm {
			mu.Lock()
			defer mu.Unlock()
			calls++
			if calls >= 3 {
				cancel()
			}
			return open
		})
	}()
	select {
	case err := <-done:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Run did not stop")
	}
	posts, problems := rcv.take()
	if len(problems) > 0 {
		t.Errorf("schema: %v", problems)
	}
	if len(posts) < 2 || len(posts) > 3 {
		t.Fatalf("%d posts in 3 periods", len(posts))
	}
	for _, p := range posts {
		var ids []string
		for _, al := range p {
			ids = append(ids, al.Annotations["alarm_id"])
			if !al.EndsAt.After(time.Now()) {
				t.Errorf("a resent firing alert ends at %s, already past", al.EndsAt)
			}
		}
		if !slices.Equal(ids, []string{"alm-1", "alm-3"}) {
			t.Errorf("resent %v, want the active and the acknowledged alarm", ids)
		}
	}
	if err := a.Run(context.Background(), nil); !errors.Is(err, ErrNotifyConfig) {
		t.Errorf("Run without a source: %v", err)
	}
	// Nothing firing: nothing posted.
	if err := a.resendNow(context.Background(), func() []Alarm { return []Alarm{ntAlarm("alm-2", StateDelayed)} }); err != nil {
		t.Fatal(err)
	}
	if posts, _ := rcv.take(); len(posts) != 0 {
		t.Errorf("posted %v with nothing firing", posts)
	}
}

// Against a real Alertmanager, when one is installed: the alarm shows as
// an active alert with its labels, and goes once cleared.
func TestAlertmanagerAgainstRealAlertmanager(t *testing.T) {
	base := startRealAlertmanager(t)
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	type gettable struct {
		Labels   map[string]string `json:"labels"`
		StartsAt time.Time         `json:"startsAt"`
		EndsAt   time.Time         `json:"endsAt"`
		Status   struct {
			State string `json:"state"`
		} `json:"status"`
	}
	list := func() []gettable {
		resp, err := http.Get(base + "/api/v2/alerts")
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		var out []gettable
		if err := json.NewDecoder(resp.Body).Decode(&out); err != nil {
			t.Fatal(err)
		}
		return out
	}

	a, err := NewAlertmanager(AlertmanagerConfig{URLs: []string{base}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	al := ntAlarm("alm-1", StateActive)
	now := time.Now().UTC().Truncate(time.Second)
	active := now.Add(-time.Minute)
	al.ActiveSince = &active
	if err := a.Notify(ctx, Transition{Key: "k1", AlarmID: al.ID, Time: now, To: StateActive, Alarm: al}); err != nil {
		t.Fatalf("post: %v", err)
	}
	got := list()
	t.Logf("alertmanager lists %+v", got)
	if len(got) != 1 || got[0].Labels["alertname"] != "cleanmon_excursion" || got[0].Labels["zone"] != "assembly" ||
		got[0].Labels["size_um"] != "0.5" || got[0].Status.State != "active" || !got[0].StartsAt.Equal(active) {
		t.Fatalf("alertmanager shows %+v", got)
	}
	clr := al
	clr.State = StateCleared
	clearedAt := now.Add(-time.Second)
	clr.ClearedAt = &clearedAt
	if err := a.Notify(ctx, Transition{Key: "k2", AlarmID: al.ID, Time: now, To: StateCleared, Alarm: clr}); err != nil {
		t.Fatalf("resolve: %v", err)
	}
	for _, g := range list() {
		if g.Labels["alertname"] == "cleanmon_excursion" && (g.Status.State == "active" || g.EndsAt.After(time.Now())) {
			t.Errorf("still firing after the clear: %+v", g)
		}
	}
}

// startRealAlertmanager runs the installed Alertmanager on a free
// loopback port for the test and returns its base URL once it is ready;
// it skips (or fails under CLEANMON_REQUIRE_TOOLS) when none is installed.
func startRealAlertmanager(t *testing.T) string {
	t.Helper()
	bin := ""
	for _, name := range []string{"alertmanager", "prometheus-alertmanager"} {
		if p, err := exec.LookPath(name); err == nil {
			bin = p
			break
		}
	}
	if bin == "" {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatal("no alertmanager binary on PATH (Debian: prometheus-alertmanager) and CLEANMON_REQUIRE_TOOLS is set")
		}
		t.Skip("no alertmanager binary on PATH (Debian: prometheus-alertmanager)")
	}
	dir := t.TempDir()
	cfg := filepath.Join(dir, "am.yml")
	if err := os.WriteFile(cfg, []byte("route:\n  receiver: none\nreceivers:\n  - name: none\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	t.Cleanup(cancel)
	cmd := exec.CommandContext(ctx, bin, "--config.file="+cfg, "--storage.path="+dir, "--web.listen-address="+addr, "--cluster.listen-address=")
	var logs strings.Builder
	cmd.Stdout, cmd.Stderr = &logs, &logs
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		cancel()
		_ = cmd.Wait()
		if t.Failed() {
			t.Logf("alertmanager output:\n%s", logs.String())
		}
	})
	base := "http://" + addr
	ntWaitFor(t, 30*time.Second, "alertmanager to be ready", func() bool {
		resp, err := http.Get(base + "/-/ready")
		if err != nil {
			return false
		}
		resp.Body.Close()
		return resp.StatusCode == http.StatusOK
	})
	return base
}
