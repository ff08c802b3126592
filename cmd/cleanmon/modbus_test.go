package main

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/loadtest"
	"cleanmon/cmd/cleanmon/internal/site"
)

// modbusSite is a one-zone site whose counter pc-mb-1 is polled over
// Modbus TCP at addr with the register map of testdata/modbus-counter.yaml
// (the map the pymodbus test server serves).
func modbusSite(t *testing.T, addr, data string) string {
	t.Helper()
	b, err := os.ReadFile("../../testdata/modbus-counter.yaml")
	if err != nil {
		t.Fatal(err)
	}
	const placeholder = `address: "127.0.0.1:5020"`
	if !strings.Contains(string(b), placeholder) {
		t.Fatal("testdata/modbus-counter.yaml no longer has the address placeholder")
	}
	counters := strings.Replace(string(b), placeholder, fmt.Sprintf("address: %q", addr), 1)
	site := fmt.Sprintf(`site: "Veldmark Photonics, building C (Modbus tests)"
data_dir: %q
access:
  open_reads: true
zones:
  - id: assembly
    name: "Assembly hall"
    class: 7
    operating_state: in-operation
    area_m2: 60
    sizes: ["0.5", "5"]
    stale_after: "3s"
    locations: [{id: asm-mb}]
`, data) + counters
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(site), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// The site loader takes the modbus section through its field-by-field
// decoder, and names the line and column of a bad register.
func TestModbusSiteConfig(t *testing.T) {
	p := modbusSite(t, "127.0.0.1:5020", t.TempDir())
	cfg, err := site.LoadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	m := cfg.Counters[0].Modbus
	if m == nil || m.Address != "127.0.0.1:5020" || len(m.Channels) != 3 || m.Volume.Scale != 0.0001 || m.Status.Values["1"] != "warning" {
		t.Fatalf("modbus section decoded as %+v", m)
	}
	b, _ := os.ReadFile(p)
	cases := []struct {
		name, from, to, want string
	}{
		{"register overlap", `"0.5": {addr: 4, bits: 32}`, `"0.5": {addr: 3, bits: 32}`, "counters[0].modbus.channels.0.5.addr"},
		{"unknown key", `unit: 1`, `unit: 1
      baud: 9600`, "counters[0].modbus.baud: unknown key"},
		{"bits not a number", `sample: {addr: 0, type: input, bits: 32}`, `sample: {addr: 0, type: input, bits: wide}`, "counters[0].modbus.sample.bits: want a whole number"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			bad := strings.Replace(string(b), tc.from, tc.to, 1)
			if bad == string(b) {
				t.Fatalf("%q not in the site", tc.from)
			}
			_, err := site.Load("site.yaml", []byte(bad))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want %q", err, tc.want)
			}
			// The message starts with file:line:col of the offending node.
			if !regexp.MustCompile(`^site\.yaml:\d+:\d+: `).MatchString(err.Error()) {
				t.Errorf("no position in %q", err)
			}
		})
	}
}

// modbusTestPython returns a python3 that can import pymodbus, or skips:
// locally the module may be missing; CI installs the Debian package
// python3-pymodbus into the system python.
func modbusTestPython(t *testing.T) string {
	t.Helper()
	cands := []string{"/usr/bin/python3"}
	if p, err := exec.LookPath("python3"); err == nil {
		cands = append(cands, p)
	}
	for _, py := range cands {
		if exec.Command(py, "-c", "import pymodbus").Run() == nil {
			return py
		}
	}
	if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
		t.Fatal("no python3 with pymodbus (Debian: python3-pymodbus) and CLEANMON_REQUIRE_TOOLS is set")
	}
	t.Skip("no python3 with pymodbus (apt-get install python3-pymodbus)")
	return ""
}

// pymodbusCounter is the independent test counter of
// testdata/modbus-counter.py, run as a process.
type pymodbusCounter struct {
	cmd  *exec.Cmd
	addr string
	done chan struct{}
}

func startPymodbusCounter(t *testing.T, py, port string, epoch int64) *pymodbusCounter {
	t.Helper()
	cmd := exec.Command(py, "../../testdata/modbus-counter.py", "--port", port, "--epoch", strconv.FormatInt(epoch, 10))
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	stderr := &loadtest.LockedWriter{}
	cmd.Stderr = stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &pymodbusCounter{cmd: cmd, done: make(chan struct{})}
	addrc := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if a, ok := strings.CutPrefix(sc.Text(), "listening "); ok {
				addrc <- a
			}
		}
		close(addrc)
	}()
	go func() { cmd.Wait(); close(p.done) }()
	t.Cleanup(p.kill)
	select {
	case a, ok := <-addrc:
		if !ok {
			<-p.done
			t.Fatalf("pymodbus counter exited: %s", stderr.String())
		}
		p.addr = a
	case <-time.After(15 * time.Second):
		t.Fatalf("pymodbus counter did not listen in 15 s: %s", stderr.String())
	}
	return p
}

// kill pulls the plug: SIGKILL, no goodbye on the wire.
func (p *pymodbusCounter) kill() {
	p.cmd.Process.Kill()
	<-p.done
}

// getJSON fetches an API path of the daemon into v.
func getJSON(t *testing.T, d *process, path string, v any) {
	t.Helper()
	code, body, err := apiDo(context.Background(), http.MethodGet, d.url+path, nil, "")
	if err != nil || code != 200 {
		t.Fatalf("GET %s: %d %v %s", path, code, err, body)
	}
	if err := json.Unmarshal(body, v); err != nil {
		t.Fatalf("GET %s: %v: %s", path, err, body)
	}
}

func metricsText(t *testing.T, d *process) string {
	t.Helper()
	code, body, err := apiDo(context.Background(), http.MethodGet, d.url+"/metrics", nil, "")
	if err != nil || code != 200 {
		t.Fatalf("GET /metrics: %d %v", code, err)
	}
	return string(body)
}

// metricValue finds one sample of the exposition text, -1 when absent.
func metricValue(text, series string) float64 {
	for _, line := range strings.Split(text, "\n") {
		if v, ok := strings.CutPrefix(line, series+" "); ok {
			f, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
			if err == nil {
				return f
			}
		}
	}
	return -1
}

type apiAlarm struct {
	ID            string `json:"id"`
	Kind          string `json:"kind"`
	State         string `json:"state"`
	Counter       string `json:"counter"`
	Location      string `json:"location"`
	ConditionGone bool   `json:"condition_gone"`
}

func staleAlarm(t *testing.T, d *process, state string) (apiAlarm, bool) {
	var as []apiAlarm
	getJSON(t, d, "/api/v1/alarms?state="+state, &as)
	for _, a := range as {
		if a.Kind == "stale" && (a.Counter == "pc-mb-1" || a.Location == "asm-mb") {
			return a, true
		}
	}
	return apiAlarm{}, false
}

// The done-when of the Modbus work: a counter emulated by an independent
// Modbus server (pymodbus) is polled by `cleanmon serve`; its samples
// appear once each in the store and in the metrics; a pulled plug raises
// stale, and the counter's return clears it.
func TestServePollsIndependentModbusCounter(t *testing.T) {
	py := modbusTestPython(t)
	epoch := time.Now().Unix()
	dev := startPymodbusCounter(t, py, "0", epoch)
	d := startDaemon(t, "--config", modbusSite(t, dev.addr, t.TempDir()))

	deadline := time.Now().Add(10 * time.Second)
	for metricValue(metricsText(t, d), `cleanmon_modbus_polls_total{device="pc-mb-1",result="ok"}`) < 1 {
		if time.Now().After(deadline) {
			t.Fatal("serve does not poll the Modbus counter: wire startModbus (cmd/cleanmon/modbus.go) into serve")
		}
		time.Sleep(200 * time.Millisecond)
	}
	q := url.Values{"from": {time.Unix(epoch-60, 0).UTC().Format(time.RFC3339)}, "to": {time.Now().Add(time.Hour).UTC().Format(time.RFC3339)}, "location": {"asm-mb"}}
	readings := func() []struct {
		Time   time.Time         `json:"time"`
		Counts map[string]uint64 `json:"counts"`
	} {
		var rs []struct {
			Time   time.Time         `json:"time"`
			Counts map[string]uint64 `json:"counts"`
		}
		getJSON(t, d, "/api/v1/zones/assembly/readings?"+q.Encode(), &rs)
		return rs
	}
	deadline = time.Now().Add(15 * time.Second)
	for len(readings()) < 3 {
		if time.Now().After(deadline) {
			t.Fatalf("fewer than 3 readings in 15 s (the server finishes one a second)\n%s", d.logs.String())
		}
		time.Sleep(200 * time.Millisecond)
	}

	// Pull the plug; with the counter silent the record stops growing.
	dev.kill()
	deadline = time.Now().Add(20 * time.Second)
	for {
		if _, ok := staleAlarm(t, d, "active"); ok {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("no active stale alarm 20 s after the plug was pulled (zone stale_after 3s)\n%s", d.logs.String())
		}
		time.Sleep(200 * time.Millisecond)
	}
	rs := readings()
	prev := int64(-1)
	for i, r := range rs {
		// The server's ≥0.3 µm count of sample n is 100000 + 13n.
		n := (int64(r.Counts["0.3"]) - 100000) / 13
		if uint64(100000+13*n) != r.Counts["0.3"] || uint64(70000+5*n) != r.Counts["0.5"] || uint64(n%50) != r.Counts["5"] {
			t.Errorf("reading %d: counts %v are not those of any sample", i, r.Counts)
		}
		if n <= prev {
			t.Errorf("reading %d is sample %d, after sample %d: stored twice or out of order", i, n, prev)
		}
		prev = n
	}
	text := metricsText(t, d)
	for _, series := range []string{
		`cleanmon_modbus_samples_total{device="pc-mb-1",result="accepted"}`,
		`cleanmon_readings_total{counter="pc-mb-1",result="accepted"}`,
	} {
		if v := metricValue(text, series); int(v) != len(rs) {
			t.Errorf("%s = %g, but %d readings are stored", series, v, len(rs))
		}
	}

	// Plug back in, on the same port, the sample numbers carrying on.
	_, port, _ := strings.Cut(dev.addr, ":")
	startPymodbusCounter(t, py, port, epoch)
	deadline = time.Now().Add(30 * time.Second)
	for {
		a, open := staleAlarm(t, d, "active")
		if len(readings()) > len(rs) && (!open || a.ConditionGone) {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("30 s after the counter came back: %d readings (were %d), stale alarm %+v open %v\n%s", len(readings()), len(rs), a, open, d.logs.String())
		}
		time.Sleep(200 * time.Millisecond)
	}
}
