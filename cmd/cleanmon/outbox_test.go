package main

import (
	"fmt"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"cleanmon/alerts"
)

// TestOutboxSurvivesKill raises an alarm while the webhook receiver is
// down, kills the daemon with SIGKILL before anything could be delivered,
// brings the receiver up and restarts the daemon: every transition then
// arrives, once each, as a deduplicating receiver counts.
func TestOutboxSurvivesKill(t *testing.T) {
	// Reserve the receiver's address now; nothing listens on it yet.
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	hook := &webhookReceiver{secret: "outbox-key", byKey: map[string]int{}}
	h := func(s string) string { return tokenHash(s) }
	cfg := fmt.Sprintf(`site: "Veldmark Photonics, building C"
access:
  tokens:
    - {name: gateway, sha256: %q, role: ingest}
    - {name: shift-lead, sha256: %q, role: operator}
zones:
  - id: assembly
    name: Assembly hall
    class: 7
    area_m2: 60
    sizes: ["0.5", "5"]
    locations: [{id: asm-1}]
counters:
  - {id: pc-asm-1, zone: assembly, location: asm-1, sizes: ["0.5", "5"]}
notifications:
  webhooks: [{name: pager, url: "http://%s/hook", secret: %q}]
  retry: {base: "100ms", max: "300ms"}
`, h(e2eIngest), h(e2eOperator), addr, hook.secret)
	cfgFile := filepath.Join(t.TempDir(), "site.yaml")
	os.WriteFile(cfgFile, []byte(cfg), 0o600)
	data := t.TempDir()

	d := startDaemon(t, "--config", cfgFile, "--data", data)
	at := time.Now().UTC().Add(-time.Minute).Truncate(time.Second).Format(time.RFC3339)
	// 20 000 particles ≥0.5 µm in 28.3 L: 706 714 /m³, above ISO 7's 352 000.
	if code, b := call(t, "POST", d.url+"/api/v1/readings", e2eIngest,
		`{"counter":"pc-asm-1","time":"`+at+`","volume_l":28.3,"counts":{"0.5":20000,"5":10}}`); code != 200 {
		t.Fatalf("%d %s", code, b)
	}
	var id string
	waitFor(t, 10*time.Second, "the alarm", func() bool {
		_, b := call(t, "GET", d.url+"/api/v1/alarms", e2eOperator, "")
		if i := strings.Index(string(b), `"id":"assembly:asm-1:0.5:excursion:`); i >= 0 {
			id = strings.SplitN(string(b[i+6:]), `"`, 2)[0]
			return true
		}
		return false
	})
	// The receiver is down: /readyz says so (the daemon stays ready: it
	// keeps taking readings, and the deliveries wait in the outbox).
	waitFor(t, 10*time.Second, "the failing notifier in /readyz", func() bool {
		code, b := call(t, "GET", d.url+"/readyz", e2eOperator, "")
		return code == 200 && strings.Contains(string(b), `ready, notifier failing`) && strings.Contains(string(b), `"up":false`)
	})
	_, m := call(t, "GET", d.url+"/metrics", e2eOperator, "")
	if !strings.Contains(string(m), `cleanmon_notifier_up{notifier="pager"} 0`) {
		t.Error("the failing notifier does not show in the metrics")
	}
	d.kill() // SIGKILL, the receiver still down: nothing was delivered

	srv := &http.Server{Handler: hook}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		t.Fatalf("the receiver's address was taken meanwhile: %v", err)
	}
	go srv.Serve(ln)
	defer srv.Close()
	d2 := startDaemon(t, "--config", cfgFile, "--data", data)
	waitFor(t, 15*time.Second, "the delivery after the restart", func() bool { return hook.transitionsTo(id, alerts.StateActive) == 1 })
	// Acknowledge: that transition is delivered too, and nothing twice.
	if code, b := call(t, "POST", d2.url+"/api/v1/alarms/"+id+"/ack", e2eOperator, `{"comment":"filter checked"}`); code != 200 {
		t.Fatalf("ack: %d %s", code, b)
	}
	waitFor(t, 10*time.Second, "the acknowledgement at the receiver", func() bool {
		return hook.transitionsTo(id, alerts.StateAcknowledged)+hook.transitionsTo(id, alerts.StateCleared) >= 1
	})
	time.Sleep(500 * time.Millisecond) // a repeat, if the outbox resent, would have come by now
	hook.mu.Lock()
	defer hook.mu.Unlock()
	for key, n := range hook.byKey {
		if n != 1 {
			t.Errorf("transition %s delivered %d times", key, n)
		}
	}
	if hook.bad > 0 {
		t.Errorf("%d deliveries with a bad signature", hook.bad)
	}
}
