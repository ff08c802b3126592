package main

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"cleanmon/alerts"
)

// amReceiver stands in for the pager gateways behind Alertmanager: it
// keeps every webhook notification per receiver path.
type amReceiver struct {
	mu  sync.Mutex
	got map[string][]amNotification
}

type amNotification struct {
	Status string `json:"status"`
	Alerts []struct {
		Status string            `json:"status"`
		Labels map[string]string `json:"labels"`
	} `json:"alerts"`
}

func (r *amReceiver) ServeHTTP(w http.ResponseWriter, req *http.Request) {
	body, _ := io.ReadAll(req.Body)
	var n amNotification
	json.Unmarshal(body, &n)
	r.mu.Lock()
	r.got[req.URL.Path] = append(r.got[req.URL.Path], n)
	r.mu.Unlock()
	w.WriteHeader(http.StatusOK)
}

// seen tells whether path got a notification alert of alertname in
// status (firing, resolved), with label severity if given. A resolved
// one counts only in a notification whose whole group is resolved: a
// heartbeat whose severity changed ends its old label set while the new
// one fires, and that is not the daemon's silence.
func (r *amReceiver) seen(path, alertname, status, severity string) bool {
	r.mu.Lock()
	defer r.mu.Unlock()
	for _, n := range r.got[path] {
		if status == "resolved" && n.Status != "resolved" {
			continue
		}
		for _, a := range n.Alerts {
			if a.Labels["alertname"] == alertname && a.Status == status && (severity == "" || a.Labels["severity"] == severity) {
				return true
			}
		}
	}
	return false
}

// shippedAlertmanager is deploy/alertmanager/alertmanager.yml with its
// receivers pointed at base and every wait shortened to seconds, so that
// a false "resolved" would show within the test.
func shippedAlertmanager(t *testing.T, base string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "..", "deploy", "alertmanager", "alertmanager.yml"))
	if err != nil {
		t.Fatal(err)
	}
	s := regexp.MustCompile(`https://[a-z.]+\.example/hooks/([a-z-]+)[^\s]*`).ReplaceAllString(string(b), base+"/$1")
	s = regexp.MustCompile(`group_wait: \S+`).ReplaceAllString(s, "group_wait: 1s")
	s = regexp.MustCompile(`group_interval: \S+`).ReplaceAllString(s, "group_interval: 2s")
	if strings.Contains(s, ".example/") {
		t.Fatalf("a receiver URL was not replaced:\n%s", s)
	}
	return s
}

type amAPIAlert struct {
	Labels map[string]string `json:"labels"`
	EndsAt time.Time         `json:"endsAt"`
	Status struct {
		State string `json:"state"`
	} `json:"status"`
}

func amActive(t *testing.T, amAddr, alertname string) []amAPIAlert {
	t.Helper()
	_, b := call(t, "GET", "http://"+amAddr+"/api/v2/alerts?active=true&silenced=false&inhibited=false&filter="+url.QueryEscape(`alertname="`+alertname+`"`), "", "")
	var out []amAPIAlert
	if err := json.Unmarshal(b, &out); err != nil {
		t.Fatalf("Alertmanager alerts: %v: %s", err, b)
	}
	return out
}

// TestKilledDaemonNotResolved kills the daemon (SIGKILL) while an action
// alarm is open, with a real Alertmanager running the shipped routes: the
// heartbeat runs out and the dead-man's switch fires at the action urgency,
// and the alarm stays firing in Alertmanager, never resolved to the pager.
func TestKilledDaemonNotResolved(t *testing.T) {
	amBin := outsideTool(t, "prometheus-alertmanager", "prometheus-alertmanager")
	recv := &amReceiver{got: map[string][]amNotification{}}
	rs := httptest.NewServer(recv)
	defer rs.Close()

	amDir := t.TempDir()
	amAddr := freeAddr(t)
	if err := os.WriteFile(filepath.Join(amDir, "am.yml"), []byte(shippedAlertmanager(t, rs.URL)), 0o600); err != nil {
		t.Fatal(err)
	}
	startTool(t, "http://"+amAddr+"/-/ready", amBin, "--config.file="+filepath.Join(amDir, "am.yml"),
		"--storage.path="+amDir, "--web.listen-address="+amAddr, "--cluster.listen-address=")

	j := startJudged(t, fmt.Sprintf(`notifications:
  heartbeat: "1s"
  labels: {site: veldmark-photonics, suite: building-c}
  alertmanagers:
    - {name: site-am, urls: [%q], resend: "1s"}
  retry: {base: "200ms", max: "1s"}
`, "http://"+amAddr), t.TempDir())
	now := time.Now().UTC().Truncate(time.Second)
	j.post("/api/v1/readings", jsonArray(asmReading(now.Add(-2*time.Minute), 2000), asmReading(now.Add(-time.Minute), 9000)))

	waitFor(t, 30*time.Second, "the excursion and an action heartbeat in Alertmanager", func() bool {
		exc := amActive(t, amAddr, "cleanmon_excursion")
		hb := amActive(t, amAddr, alerts.HeartbeatAlertName)
		return len(exc) == 1 && len(hb) > 0 && hb[len(hb)-1].Labels["severity"] == "action"
	})
	exc := amActive(t, amAddr, "cleanmon_excursion")[0]
	for k, want := range map[string]string{"severity": "action", "level": "action", "site": "veldmark-photonics", "suite": "building-c", "zone": "assembly"} {
		if exc.Labels[k] != want {
			t.Errorf("excursion label %s=%q, want %q (labels %v)", k, exc.Labels[k], want, exc.Labels)
		}
	}
	waitFor(t, 30*time.Second, "the pager and the dead-man's switch to be told", func() bool {
		return recv.seen("/cleanmon", "cleanmon_excursion", "firing", "action") && recv.seen("/cleanmon-heartbeat", alerts.HeartbeatAlertName, "firing", "action")
	})

	// While the daemon beats, the switch stays quiet, also once the
	// heartbeat of the old severity has run out.
	time.Sleep(5 * time.Second)
	if recv.seen("/cleanmon-heartbeat", alerts.HeartbeatAlertName, "resolved", "") {
		t.Error("the dead-man's switch was told monitoring is lost while the daemon runs")
	}

	j.d.kill()
	killed := time.Now()

	// The heartbeat ends three periods after its last beat; Alertmanager
	// then tells the dead-man's switch, at the urgency of the worst open
	// alarm.
	waitFor(t, 90*time.Second, "the dead-man's switch to fire", func() bool {
		return recv.seen("/cleanmon-heartbeat", alerts.HeartbeatAlertName, "resolved", "action")
	})
	// Several group intervals more: a false resolve would have left by now.
	time.Sleep(time.Until(killed.Add(15 * time.Second)))
	still := amActive(t, amAddr, "cleanmon_excursion")
	if len(still) != 1 || still[0].Status.State != "active" || time.Until(still[0].EndsAt) < 10*time.Minute {
		t.Errorf("after the kill Alertmanager holds %+v, want the excursion active and ending beyond 10 minutes", still)
	}
	if recv.seen("/cleanmon", "cleanmon_excursion", "resolved", "") {
		t.Error("the pager was told the excursion resolved after the daemon died")
	}
}

// TestRestartRedeliversNothing delivers an alarm to a webhook, kills the
// daemon once the delivery is on record, starts it again on the same
// store: no delivery is repeated, and what happens after the restart is
// delivered once.
func TestRestartRedeliversNothing(t *testing.T) {
	hook := &webhookReceiver{secret: "restart-hmac-key", byKey: map[string]int{}}
	hs := httptest.NewServer(hook)
	defer hs.Close()
	notify := fmt.Sprintf(`notifications:
  heartbeat: "1s"
  labels: {site: veldmark-photonics, suite: building-c}
  webhooks:
    - {name: pager-hook, url: %q, secret: %q}
  retry: {base: "200ms", max: "1s"}
`, hs.URL, hook.secret)
	data := t.TempDir()
	j := startJudged(t, notify, data)
	now := time.Now().UTC().Truncate(time.Second)
	j.post("/api/v1/readings", jsonArray(asmReading(now.Add(-2*time.Minute), 2000), asmReading(now.Add(-time.Minute), 9000)))
	var id string
	waitFor(t, 30*time.Second, "the excursion at the webhook", func() bool {
		for _, a := range j.alarms("active") {
			if a.Kind == "excursion" && hook.transitionsTo(a.ID, alerts.StateActive) == 1 {
				id = a.ID
				return true
			}
		}
		return false
	})
	// The message says how urgent, where, and the value with its unit.
	hook.mu.Lock()
	for _, b := range hook.bodies {
		if b["alarm_id"] != id || b["to"] != alerts.StateActive {
			continue
		}
		labels, _ := b["labels"].(map[string]any)
		if b["severity"] != "action" || labels["site"] != "veldmark-photonics" || labels["suite"] != "building-c" || !strings.Contains(fmt.Sprint(b["value_text"]), "particles/m³") {
			t.Errorf("webhook message %v: want severity action, the site's labels and a value in particles/m³", b)
		}
	}
	hook.mu.Unlock()
	transitions := func() map[string]int {
		hook.mu.Lock()
		defer hook.mu.Unlock()
		out := map[string]int{}
		for k, n := range hook.byKey {
			// Heartbeats and audit checkpoints are not transitions.
			if !strings.HasPrefix(k, "heartbeat/") && !strings.HasPrefix(k, "checkpoint/") {
				out[k] = n
			}
		}
		return out
	}
	// Killed once every delivery the receiver took is recorded as done
	// in the store (counted delivered only after that). A kill between
	// the receiver's answer and that record would send the message again
	// under the same delivery key, for the receiver to drop: that is not
	// what this test is about.
	waitFor(t, 30*time.Second, "the deliveries to be recorded", func() bool {
		m := metricsText(t, j.d)
		return metricValue(m, `cleanmon_notifications_total{notifier="pager-hook",result="delivered"}`) == float64(len(transitions())) &&
			metricValue(m, `cleanmon_notification_queue{notifier="pager-hook"}`) == 0
	})
	before := transitions()
	j.d.kill()

	j = judged{t, startDaemon(t, "--config", judgeSite(t, notify), "--data", data)}
	beats := func() int {
		hook.mu.Lock()
		defer hook.mu.Unlock()
		n := 0
		for k := range hook.byKey {
			if strings.HasPrefix(k, "heartbeat/") {
				n++
			}
		}
		return n
	}
	seen := beats()
	waitFor(t, 30*time.Second, "the restarted daemon's heartbeats", func() bool { return beats() >= seen+3 })
	after := transitions()
	if len(after) != len(before) {
		t.Errorf("deliveries after the restart: %v, before: %v", after, before)
	}
	for k, n := range after {
		if n != 1 {
			t.Errorf("delivery %s received %d times", k, n)
		}
	}
	// What happens after the restart leaves once.
	code, b, _ := apiDo(t.Context(), http.MethodPost, j.d.url+"/api/v1/alarms/"+id+"/ack", []byte(`{"by":"r. ilves","comment":"door held for a delivery"}`), "application/json")
	if code != http.StatusOK {
		t.Fatalf("ack after the restart: %d %s", code, b)
	}
	waitFor(t, 30*time.Second, "the acknowledgement at the webhook", func() bool {
		return hook.transitionsTo(id, alerts.StateAcknowledged)+hook.transitionsTo(id, alerts.StateCleared) >= 1
	})
	time.Sleep(2 * time.Second)
	for k, n := range transitions() {
		if n != 1 {
			t.Errorf("delivery %s received %d times", k, n)
		}
	}
	if hook.bad != 0 {
		t.Errorf("%d deliveries with a bad signature", hook.bad)
	}
}
