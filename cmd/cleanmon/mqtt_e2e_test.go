package main

import (
	"context"
	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	mqtt "github.com/eclipse/paho.mqtt.golang"
)

// mosquittoBroker is a real mosquitto on a loopback port, killed at the
// end of the test.
func mosquittoBroker(t *testing.T) string {
	t.Helper()
	bin, err := exec.LookPath("mosquitto")
	if err != nil {
		bin = "/usr/sbin/mosquitto"
		if _, err := os.Stat(bin); err != nil {
			outsideTool(t, "mosquitto", "mosquitto")
		}
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	conf := filepath.Join(t.TempDir(), "mosquitto.conf")
	body := fmt.Sprintf("listener %d 127.0.0.1\npersistence false\nallow_anonymous true\n", l.Addr().(*net.TCPAddr).Port)
	if os.Geteuid() == 0 {
		body += "user root\n" // else it drops to a user that cannot read the test's directory
	}
	if err := os.WriteFile(conf, []byte(body), 0o600); err != nil {
		t.Fatal(err)
	}
	out := &strings.Builder{}
	cmd := exec.Command(bin, "-c", conf)
	cmd.Stdout, cmd.Stderr = out, out
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cmd.Process.Kill(); cmd.Wait() })
	for deadline := time.Now().Add(10 * time.Second); ; time.Sleep(50 * time.Millisecond) {
		if c, err := net.DialTimeout("tcp", addr, 200*time.Millisecond); err == nil {
			c.Close()
			return "tcp://" + addr
		}
		if time.Now().After(deadline) {
			t.Fatalf("mosquitto did not listen within 10 s: %s", out)
		}
	}
}

// mqttSite is a one-zone site whose counter and T/RH sensor publish to
// the broker.
func mqttSite(t *testing.T, broker string) string {
	t.Helper()
	cfg := crashConfig(t, 1)
	b, err := os.ReadFile(cfg)
	if err != nil {
		t.Fatal(err)
	}
	extra := fmt.Sprintf(`environment:
  - id: th-asm
    zone: assembly
    kind: temperature-humidity
    source: mqtt
    temperature_c: {action: {low: 20, high: 22}}
    humidity_pct: {action: {low: 40, high: 50}}
mqtt:
  broker: %q
  client_id: cleanmon-e2e
  max_backoff: "2s"
  topics:
    - {topic: building-c/readings, kind: readings}
    - {topic: building-c/th-asm, sensor: th-asm, fields: {temperature_c: t, humidity_pct: rh, time: ts}}
`, broker)
	if err := os.WriteFile(cfg, append(b, extra...), 0o600); err != nil {
		t.Fatal(err)
	}
	return cfg
}

func mqttPublisher(t *testing.T, broker string) func(topic, payload string) {
	t.Helper()
	c := mqtt.NewClient(mqtt.NewClientOptions().AddBroker(broker).SetClientID("e2e-publisher").SetCleanSession(true))
	if tok := c.Connect(); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		t.Fatalf("publisher: %v", tok.Error())
	}
	t.Cleanup(func() { c.Disconnect(100) })
	return func(topic, payload string) {
		t.Helper()
		if tok := c.Publish(topic, 1, false, payload); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
			t.Fatalf("publish %s: %v", topic, tok.Error())
		}
	}
}

// storedTimes returns the time of every reading of pc-0 the daemon
// serves for the last two hours, with how often each appears.
func storedTimes(t *testing.T, d *process) map[string]int {
	t.Helper()
	var rows []struct {
		Counter string `json:"counter"`
		Time    string `json:"time"`
	}
	from := time.Now().Add(-2 * time.Hour).UTC().Format(time.RFC3339)
	getJSON(t, d, "/api/v1/zones/assembly/readings?from="+from, &rows)
	out := map[string]int{}
	for _, r := range rows {
		out[r.Time]++
	}
	return out
}

func waitUntil(t *testing.T, what string, limit time.Duration, ok func() bool) {
	t.Helper()
	for deadline := time.Now().Add(limit); !ok(); time.Sleep(100 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not within %s", what, limit)
		}
	}
}

// TestServeMQTTSurvivesKill publishes readings to a real mosquitto while
// the real daemon takes them, kills the daemon with SIGKILL once some are
// stored (others taken from the broker but not yet committed), publishes
// more while it is dead, and starts it again: every reading is stored
// exactly once. A flat T/RH payload on its own topic is stored as well.
func TestServeMQTTSurvivesKill(t *testing.T) {
	broker := mosquittoBroker(t)
	cfg := mqttSite(t, broker)
	data := t.TempDir()
	d := startDaemon(t, "--config", cfg, "--data", data)
	waitUntil(t, "the daemon subscribes", 20*time.Second, func() bool {
		return metricValue(metricsText(t, d), "cleanmon_mqtt_connected") == 1
	})
	publish := mqttPublisher(t, broker)
	base := time.Now().Add(-90 * time.Minute).UTC().Truncate(time.Minute)
	want := map[string]bool{}
	send := func(i int) {
		at := base.Add(time.Duration(i) * time.Minute).Format(time.RFC3339)
		want[at] = true
		publish("building-c/readings", fmt.Sprintf(`{"counter":"pc-0","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":%d}}`, at, 300+i, i%3))
	}
	const live, dead = 60, 15
	for i := range live {
		send(i)
	}
	waitUntil(t, "a first reading stored", 20*time.Second, func() bool { return len(storedTimes(t, d)) > 0 })
	d.kill()
	for i := live; i < live+dead; i++ {
		send(i)
	}
	publish("building-c/th-asm", fmt.Sprintf(`{"t":21.4,"rh":44.5,"ts":%d}`, base.Unix()))

	d = startDaemon(t, "--config", cfg, "--data", data)
	waitUntil(t, "every published reading stored", 30*time.Second, func() bool { return len(storedTimes(t, d)) == live+dead })
	for at, n := range storedTimes(t, d) {
		if n != 1 || !want[at] {
			t.Errorf("reading at %s stored %d times (published: %v)", at, n, want[at])
		}
	}
	var env []struct {
		ID       string `json:"id"`
		Channels map[string]struct {
			Value *float64 `json:"value"`
		} `json:"channels"`
	}
	waitUntil(t, "the T/RH sample stored", 10*time.Second, func() bool {
		getJSON(t, d, "/api/v1/environment", &env)
		return len(env) == 1 && env[0].Channels["temperature_c"].Value != nil
	})
	if v := *env[0].Channels["temperature_c"].Value; v != 21.4 {
		t.Errorf("th-asm temperature %g, want 21.4 as published", v)
	}
	code, _, err := apiDo(context.Background(), http.MethodGet, d.url+"/api/v1/sensors/th-asm/environment?from="+base.Add(-time.Minute).Format(time.RFC3339), nil, "")
	if err != nil || code != 200 {
		t.Fatalf("environment history: %d %v", code, err)
	}
}
