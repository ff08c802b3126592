package main

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/loadtest"
)

// webhookReceiver is a loopback receiver that checks every delivery's
// HMAC signature and counts deliveries per dedupe key.
type webhookReceiver struct {
	secret string
	mu     sync.Mutex
	byKey  map[string]int
	bodies []map[string]any
	bad    int
}

func (h *webhookReceiver) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	body, _ := io.ReadAll(r.Body)
	mac := hmac.New(sha256.New, []byte(h.secret))
	mac.Write(body)
	want := "sha256=" + hex.EncodeToString(mac.Sum(nil))
	h.mu.Lock()
	defer h.mu.Unlock()
	if !hmac.Equal([]byte(r.Header.Get(alerts.SignatureHeader)), []byte(want)) {
		h.bad++
		http.Error(w, "bad signature", http.StatusUnauthorized)
		return
	}
	key := r.Header.Get(alerts.DeliveryHeader)
	h.byKey[key]++
	var m map[string]any
	json.Unmarshal(body, &m)
	h.bodies = append(h.bodies, m)
	w.WriteHeader(http.StatusNoContent)
}

// transitionsTo lists the delivered transitions of one alarm into a state.
func (h *webhookReceiver) transitionsTo(alarmID, to string) int {
	h.mu.Lock()
	defer h.mu.Unlock()
	n := 0
	for _, b := range h.bodies {
		if b["alarm_id"] == alarmID && b["to"] == to {
			n++
		}
	}
	return n
}

func freeAddr(t *testing.T) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().String()
}

// startTool runs an outside server (Prometheus, Alertmanager) until the
// test ends and waits, bounded, for its readiness URL.
func startTool(t *testing.T, ready string, bin string, args ...string) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	cmd := exec.CommandContext(ctx, bin, args...)
	logs := &loadtest.LockedWriter{}
	cmd.Stdout, cmd.Stderr = logs, logs
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		cancel()
		cmd.Wait()
		if t.Failed() {
			t.Logf("%s output:\n%s", filepath.Base(bin), logs.String())
		}
	})
	waitFor(t, 60*time.Second, filepath.Base(bin)+" ready", func() bool {
		resp, err := http.Get(ready)
		if err != nil {
			return false
		}
		resp.Body.Close()
		return resp.StatusCode == http.StatusOK
	})
}

// waitFor polls cond every 100 ms until it holds or the bound passes.
func waitFor(t *testing.T, bound time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(bound)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("gave up after %s waiting for %s", bound, what)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

const (
	e2eOperator = "e2e-operator-secret"
	e2eIngest   = "e2e-ingest-secret"
	e2eViewer   = "e2e-viewer-secret"
)

func e2eSite(t *testing.T, hookURL, hookSecret, amURL string) string {
	t.Helper()
	h := func(s string) string { sum := sha256.Sum256([]byte(s)); return hex.EncodeToString(sum[:]) }
	cfg := fmt.Sprintf(`site: "Veldmark Photonics, building C"
retention: "87600h"
access:
  tokens:
    - {name: shift-lead, sha256: %q, role: operator}
    - {name: gateway, sha256: %q, role: ingest}
    - {name: prometheus, sha256: %q, role: viewer}
zones:
  - id: assembly
    name: Assembly hall
    class: 7
    operating_state: in-operation
    area_m2: 60
    sizes: ["0.5", "5"]
    levels:
      "0.5": {alert: 180000, action: 280000}
    locations: [{id: asm-1}]
  - id: corridor
    name: Corridor
counters:
  - {id: pc-asm-1, zone: assembly, location: asm-1, flow_lpm: 28.3, sizes: ["0.5", "5"], interval: "1m"}
pressure_sensors:
  - {id: dp-asm, high: assembly, low: corridor, min_pa: 8, delay: "30s", interval: "10s"}
notifications:
  webhooks:
    - {name: pager-hook, url: %q, secret: %q}
  alertmanagers:
    - {name: site-am, urls: [%q], resend: "2s"}
  retry: {base: "200ms", max: "2s"}
`, h(e2eOperator), h(e2eIngest), h(e2eViewer), hookURL, hookSecret, amURL)
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(cfg), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

func call(t *testing.T, method, url, token string, body string) (int, []byte) {
	t.Helper()
	req, err := http.NewRequest(method, url, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if body != "" {
		req.Header.Set("Content-Type", "application/json")
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, b
}

// TestAlarmEndToEnd runs the real daemon with a webhook receiver, a real
// Alertmanager and a real Prometheus on loopback: an excursion posted
// through the API raises one alarm that shows in the API, in the metrics
// Prometheus scrapes, at the webhook (signed, once per transition) and in
// Alertmanager; it is acknowledged with a comment and clears everywhere;
// a DP dip shorter than its delay raises nothing.
func TestAlarmEndToEnd(t *testing.T) {
	amBin := outsideTool(t, "prometheus-alertmanager", "prometheus-alertmanager")
	promBin := outsideTool(t, "prometheus", "prometheus")

	hook := &webhookReceiver{secret: "e2e-hmac-key", byKey: map[string]int{}}
	hs := httptest.NewServer(hook)
	defer hs.Close()

	amDir := t.TempDir()
	amAddr := freeAddr(t)
	os.WriteFile(filepath.Join(amDir, "am.yml"), []byte("route:\n  receiver: none\nreceivers:\n  - name: none\n"), 0o600)
	startTool(t, "http://"+amAddr+"/-/ready", amBin, "--config.file="+filepath.Join(amDir, "am.yml"),
		"--storage.path="+amDir, "--web.listen-address="+amAddr, "--cluster.listen-address=")

	d := startDaemon(t, "--config", e2eSite(t, hs.URL, hook.secret, "http://"+amAddr), "--data", t.TempDir())

	promDir := t.TempDir()
	promAddr := freeAddr(t)
	os.WriteFile(filepath.Join(promDir, "token"), []byte(e2eViewer), 0o600)
	promCfg := fmt.Sprintf("global: {scrape_interval: 1s}\nscrape_configs:\n  - job_name: cleanmon\n    authorization: {credentials_file: %s}\n    static_configs: [{targets: [%q]}]\n",
		filepath.Join(promDir, "token"), strings.TrimPrefix(d.url, "http://"))
	os.WriteFile(filepath.Join(promDir, "prometheus.yml"), []byte(promCfg), 0o600)
	startTool(t, "http://"+promAddr+"/-/ready", promBin, "--config.file="+filepath.Join(promDir, "prometheus.yml"),
		"--storage.tsdb.path="+filepath.Join(promDir, "data"), "--web.listen-address="+promAddr)

	now := time.Now().UTC().Add(-2 * time.Minute).Truncate(time.Second)
	reading := func(at time.Time, c05, c5 int) string {
		return fmt.Sprintf(`{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":%d},"flow_lpm":28.3,"status":"ok"}`, at.Format(time.RFC3339), c05, c5)
	}
	post := func(path, body string) {
		t.Helper()
		if code, b := call(t, "POST", d.url+path, e2eIngest, body); code != 200 {
			t.Fatalf("POST %s: %d %s", path, code, b)
		}
	}
	// A DP dip of 20 s, shorter than the 30 s delay: the door opening.
	post("/api/v1/pressure", fmt.Sprintf(`[{"sensor":"dp-asm","time":%q,"pa":12.1},{"sensor":"dp-asm","time":%q,"pa":3.2},{"sensor":"dp-asm","time":%q,"pa":2.9},{"sensor":"dp-asm","time":%q,"pa":12.4}]`,
		now.Format(time.RFC3339), now.Add(10*time.Second).Format(time.RFC3339), now.Add(20*time.Second).Format(time.RFC3339), now.Add(30*time.Second).Format(time.RFC3339)))
	// A clean sample, then an excursion: 10 000 particles ≥0.5 µm in 28.3 L
	// is 353 357 /m³, above the 280 000 action level (and the ISO 7 limit).
	post("/api/v1/readings", reading(now, 2000, 10))
	post("/api/v1/readings", reading(now.Add(time.Minute), 10000, 10))

	type alarmOut struct {
		ID, Zone, Kind, Level, State string
		AcknowledgedBy               string `json:"acknowledged_by"`
		Comment                      string
	}
	var excursion alarmOut
	waitFor(t, 10*time.Second, "the excursion alarm in the API", func() bool {
		_, b := call(t, "GET", d.url+"/api/v1/alarms", e2eViewer, "")
		var as []alarmOut
		json.Unmarshal(b, &as)
		for _, a := range as {
			if a.Kind == alerts.KindExcursion && a.Zone == "assembly" && a.State == alerts.StateActive {
				excursion = a
				return true
			}
		}
		return false
	})
	if excursion.Level != alerts.LevelAction {
		t.Errorf("excursion level %s, want action", excursion.Level)
	}
	// In the metrics, as Prometheus scraped them.
	waitFor(t, 20*time.Second, "Prometheus to see the alarm", func() bool {
		_, b := call(t, "GET", "http://"+promAddr+`/api/v1/query?query=cleanmon_alarm_active%7Bzone%3D%22assembly%22%2Ckind%3D%22excursion%22%2Clevel%3D%22action%22%7D`, "", "")
		return bytes.Contains(b, []byte(`"value":[`)) && bytes.Contains(b, []byte(`,"1"]`))
	})
	// The daemon's whole exposition passes promtool's checks: exit 0 and
	// nothing to say.
	_, metrics := call(t, "GET", d.url+"/metrics", e2eViewer, "")
	check := exec.Command(outsideTool(t, "promtool", "prometheus"), "check", "metrics")
	check.Stdin = bytes.NewReader(metrics)
	if out, err := check.CombinedOutput(); err != nil || strings.TrimSpace(string(out)) != "" {
		t.Errorf("promtool check metrics: %v\n%s", err, out)
	}
	for _, name := range []string{"cleanmon_zone_attention", "cleanmon_door_openings_total", "cleanmon_particle_concentration_per_cubic_meter", "cleanmon_class_limit_per_cubic_meter", "cleanmon_zone_in_class",
		"cleanmon_zone_state", "cleanmon_differential_pressure_pascals", "cleanmon_alarm_active", "cleanmon_readings_total",
		"cleanmon_instrument_last_reading_timestamp_seconds", "cleanmon_instrument_flow_liters_per_minute"} {
		if !bytes.Contains(metrics, []byte("\n"+name+"{")) {
			t.Errorf("/metrics lacks %s", name)
		}
	}
	// At the webhook, signed, once.
	waitFor(t, 10*time.Second, "the webhook delivery", func() bool { return hook.transitionsTo(excursion.ID, alerts.StateActive) == 1 })
	// In Alertmanager.
	amHas := func() bool {
		_, b := call(t, "GET", "http://"+amAddr+"/api/v2/alerts?active=true", "", "")
		return bytes.Contains(b, []byte(`"kind":"excursion"`)) && bytes.Contains(b, []byte(`"zone":"assembly"`))
	}
	waitFor(t, 10*time.Second, "the alert in Alertmanager", amHas)

	// Back to clean: the action alarm is latched and waits for an
	// acknowledgement, which is attributed to the token and clears it.
	post("/api/v1/readings", reading(now.Add(2*time.Minute), 2100, 9))
	code, b := call(t, "POST", d.url+"/api/v1/alarms/"+excursion.ID+"/ack", e2eIngest, `{"by":"r. ilves","comment":"door held for a delivery"}`)
	if code != http.StatusForbidden {
		t.Errorf("ack with the ingest token: %d %s, want 403", code, b)
	}
	code, b = call(t, "POST", d.url+"/api/v1/alarms/"+excursion.ID+"/ack", e2eOperator, `{"by":"r. ilves","comment":"door held for a delivery"}`)
	if code != 200 {
		t.Fatalf("ack: %d %s", code, b)
	}
	var acked alarmOut
	json.Unmarshal(b, &acked)
	if acked.State != alerts.StateCleared || acked.AcknowledgedBy != "shift-lead (r. ilves)" || acked.Comment != "door held for a delivery" {
		t.Errorf("after ack: %+v", acked)
	}
	waitFor(t, 10*time.Second, "the clear at the webhook", func() bool { return hook.transitionsTo(excursion.ID, alerts.StateCleared) == 1 })
	waitFor(t, 15*time.Second, "the alert to resolve in Alertmanager", func() bool { return !amHas() })
	_, b = call(t, "GET", d.url+"/api/v1/alarms?state=all", e2eViewer, "")
	if !bytes.Contains(b, []byte(excursion.ID)) || !bytes.Contains(b, []byte(`"acknowledged_by":"shift-lead (r. ilves)"`)) {
		t.Errorf("history lacks the acknowledged alarm: %s", b)
	}

	// The door dip is in the record (pending, then cleared before its
	// delay ran out) but was never raised, and never sent.
	var history []struct {
		Kind, State string
		ActiveSince *time.Time `json:"active_since"`
	}
	json.Unmarshal(b, &history)
	for _, a := range history {
		if a.Kind == alerts.KindPressureLow && (a.ActiveSince != nil || a.State != alerts.StateCleared) {
			t.Errorf("a DP dip shorter than its delay raised an alarm: %+v", a)
		}
	}
	hook.mu.Lock()
	defer hook.mu.Unlock()
	for _, body := range hook.bodies {
		if a, _ := body["alarm"].(map[string]any); a != nil && a["kind"] == alerts.KindPressureLow {
			t.Errorf("the DP dip reached the webhook: %v", body)
		}
	}
	for key, n := range hook.byKey {
		if n != 1 {
			t.Errorf("delivery %s received %d times", key, n)
		}
	}
	if hook.bad > 0 {
		t.Errorf("%d deliveries with a bad signature", hook.bad)
	}
}
