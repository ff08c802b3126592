package main

import (
	"bufio"
	"bytes"
	"cleanmon/cmd/cleanmon/internal/daemon"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

// Secrets of the test site's tokens; the configuration holds their hashes.
const (
	secretIngest   = "test-ingest-secret"
	secretViewer   = "test-viewer-secret"
	secretOperator = "test-operator-secret"
	secretAdmin    = "test-admin-secret"
)

func tokenHash(s string) string {
	h := sha256.Sum256([]byte(s))
	return hex.EncodeToString(h[:])
}

// apiSite is the site of the API tests (zones of the invented demo site,
// cut down): an ISO 5 hood of 2 m² with one location, an
// ISO 7 hall with two, a GMP grade B room and an unclassified corridor.
func apiSite(openReads bool) string {
	return fmt.Sprintf(`site: "Veldmark Photonics, building C (API tests)"
retention: "720h"
access:
  open_reads: %v
  tokens:
    - {name: scada, sha256: %q, role: ingest}
    - {name: display, sha256: %q, role: viewer}
    - {name: shift-lead, sha256: %q, role: operator}
    - {name: admin, sha256: %q, role: admin}
zones:
  - id: hood
    name: "Coating hood"
    class: 5
    area_m2: 2
    sizes: ["0.5", "1"]
    levels: {"0.5": {alert: 1000, action: 2000}}
    locations: [{id: hood-1}]
  - id: assembly
    name: "Assembly hall"
    class: 7
    area_m2: 60
    sizes: ["0.5", "5"]
    locations: [{id: asm-1}, {id: asm-2}]
  - id: fill
    name: "Filling room"
    grade: B
    operating_state: at-rest
    area_m2: 10
    sizes: ["0.5", "5"]
    locations: [{id: f-1}]
  - id: corridor
    name: "Corridor"
counters:
  - {id: pc-hood, zone: hood, location: hood-1, sizes: ["0.3", "0.5", "1", "5"]}
  - {id: pc-asm-1, zone: assembly, location: asm-1, sizes: ["0.3", "0.5", "1", "5"]}
  - {id: pc-asm-2, zone: assembly, location: asm-2, sizes: ["0.3", "0.5", "1", "5"], mode: differential}
  - {id: pc-fill, zone: fill, location: f-1, flow_lpm: 2.83, sizes: ["0.5", "5"]}
pressure_sensors:
  - {id: dp-hood, high: hood, low: corridor, min_pa: 5}
`, openReads, tokenHash(secretIngest), tokenHash(secretViewer), tokenHash(secretOperator), tokenHash(secretAdmin))
}

// syncBuffer is a bytes.Buffer safe for the testDaemon and the test at once.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// testDaemon is a cleanmon serve running inside the test process on a real
// loopback port and a real store.
type testDaemon struct {
	t       *testing.T
	url     string
	dataDir string
	stderr  *syncBuffer
	cancel  context.CancelFunc
	done    chan int
	code    int
	stopped bool
	client  *http.Client
}

// startTestDaemon runs serve with o (listen defaults to 127.0.0.1:0) and waits
// for the URL it prints.
func startTestDaemon(t *testing.T, o daemon.Options) *testDaemon {
	t.Helper()
	if o.Listen == "" {
		o.Listen = "127.0.0.1:0"
	}
	if o.Speed == 0 {
		o.Speed = 1
	}
	ctx, cancel := context.WithCancel(context.Background())
	pr, pw := io.Pipe()
	d := &testDaemon{t: t, dataDir: o.DataDir, stderr: &syncBuffer{}, cancel: cancel, done: make(chan int, 1),
		client: &http.Client{Timeout: 20 * time.Second}}
	go func() {
		code := serve(ctx, o, pw, d.stderr)
		pw.Close()
		d.done <- code
	}()
	urls := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(pr)
		for sc.Scan() {
			if u, ok := strings.CutPrefix(sc.Text(), "cleanmon: serving on "); ok {
				select {
				case urls <- u:
				default:
				}
			}
		}
		close(urls)
	}()
	select {
	case u, ok := <-urls:
		if !ok {
			cancel()
			t.Fatalf("testDaemon exited before serving (code %d):\n%s", <-d.done, d.stderr.String())
		}
		d.url = u
	case <-time.After(15 * time.Second):
		cancel()
		t.Fatalf("testDaemon did not print its URL:\n%s", d.stderr.String())
	}
	t.Cleanup(func() { d.stop() })
	return d
}

// startSite writes a configuration and starts a testDaemon on it with a data
// directory of the test.
func startSite(t *testing.T, yaml, dataDir string) *testDaemon {
	t.Helper()
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(yaml), 0o600); err != nil {
		t.Fatal(err)
	}
	if dataDir == "" {
		dataDir = t.TempDir()
	}
	return startTestDaemon(t, daemon.Options{ConfigPath: p, DataDir: dataDir})
}

// stop shuts the testDaemon down as a signal would and returns its exit status.
func (d *testDaemon) stop() int {
	if d.stopped {
		return d.code
	}
	d.stopped = true
	d.cancel()
	select {
	case d.code = <-d.done:
	case <-time.After(40 * time.Second):
		d.t.Errorf("testDaemon did not stop:\n%s", d.stderr.String())
		d.code = -1
	}
	return d.code
}

// do sends one request; token "" sends none.
func (d *testDaemon) do(method, path, token, contentType string, body []byte) (int, http.Header, []byte) {
	d.t.Helper()
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequest(method, d.url+path, rd)
	if err != nil {
		d.t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if contentType != "" {
		req.Header.Set("Content-Type", contentType)
	}
	resp, err := d.client.Do(req)
	if err != nil {
		d.t.Fatalf("%s %s: %v", method, path, err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		d.t.Fatalf("%s %s: postedReading body: %v", method, path, err)
	}
	return resp.StatusCode, resp.Header, b
}

// getJSON GETs path with the viewer token and decodes a 200 answer.
func (d *testDaemon) getJSON(path string, v any) {
	d.t.Helper()
	code, _, b := d.do("GET", path, secretViewer, "", nil)
	if code != http.StatusOK {
		d.t.Fatalf("GET %s: %d %s", path, code, b)
	}
	if err := json.Unmarshal(b, v); err != nil {
		d.t.Fatalf("GET %s: %v in %s", path, err, b)
	}
}

// postedReading is one reading as posted.
type postedReading struct {
	Counter string            `json:"counter"`
	Time    string            `json:"time"`
	VolumeL float64           `json:"volume_l"`
	Counts  map[string]uint64 `json:"counts"`
	Status  string            `json:"status,omitempty"`
}

// post sends readings with the ingest token and requires a 200.
func (d *testDaemon) post(rs ...postedReading) {
	d.t.Helper()
	b, _ := json.Marshal(rs)
	code, _, body := d.do("POST", "/api/v1/readings", secretIngest, "application/json", b)
	if code != http.StatusOK {
		d.t.Fatalf("POST readings: %d %s", code, body)
	}
}

func rfcTime(t time.Time) string { return t.UTC().Format(time.RFC3339Nano) }

// apiErrorBody is the error shape every error answer has.
type apiErrorBody struct {
	Error string `json:"error"`
	Field string `json:"field"`
}

func decodeAPIError(t *testing.T, b []byte) apiErrorBody {
	t.Helper()
	var e apiErrorBody
	if err := json.Unmarshal(b, &e); err != nil || e.Error == "" {
		t.Fatalf("not an error object: %s (%v)", b, err)
	}
	return e
}

func TestHealthReadyMetricsAndUnknownRoutes(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	cases := []struct {
		method, path, token string
		code                int
		contains            string
	}{
		{"GET", "/healthz", "", 200, `"status":"ok"`},
		{"GET", "/readyz", "", 200, `"status":"ready"`},
		{"GET", "/metrics", secretViewer, 200, "process_start_time_seconds"},
		{"GET", "/metrics", "", 401, `"error"`},
		{"GET", "/api/v1/nothing", secretViewer, 404, `"error":"no such endpoint: /api/v1/nothing"`},
		{"DELETE", "/api/v1/zones", secretAdmin, 405, `"error":"DELETE is not allowed`},
		{"GET", "/api/v1/alarms", secretViewer, 200, "[]"},
		{"GET", "/api/v1/alarms?state=all", secretViewer, 200, "[]"},
		{"GET", "/api/v1/alarms?state=open", secretViewer, 400, `"field":"state"`},
	}
	for _, c := range cases {
		t.Run(c.method+" "+c.path+" "+c.token, func(t *testing.T) {
			code, h, b := d.do(c.method, c.path, c.token, "", nil)
			if code != c.code || !strings.Contains(string(b), c.contains) {
				t.Fatalf("%d %s, want %d containing %q", code, b, c.code, c.contains)
			}
			if c.path != "/metrics" && !strings.HasPrefix(h.Get("Content-Type"), "application/json") {
				t.Errorf("content type %q", h.Get("Content-Type"))
			}
		})
	}
	if !strings.Contains(d.stderr.String(), `msg="http request" method=GET path=/healthz status=200`) {
		t.Errorf("request log missing:\n%s", d.stderr.String())
	}
}
