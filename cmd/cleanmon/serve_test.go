package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptrace"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/daemon"
	"cleanmon/store"
)

func TestServeUsage(t *testing.T) {
	noData := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(noData, []byte(apiSite(false)), 0o600); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name string
		args []string
		code int
		msg  string
	}{
		{"nothing", nil, exitUsage, "--config FILE is required (or --demo)"},
		{"demo and config", []string{"--demo", "--config", noData}, exitUsage, "takes no --config"},
		{"speed without demo", []string{"--config", noData, "--speed", "2"}, exitUsage, "--speed applies to --demo only"},
		{"zero speed", []string{"--demo", "--speed", "0"}, exitUsage, "want a positive factor"},
		{"stray argument", []string{"--demo", "extra"}, exitUsage, `unexpected argument "extra"`},
		{"unknown flag", []string{"--verbose"}, exitUsage, "flag provided but not defined"},
		{"demo off loopback", []string{"--demo", "--listen", "0.0.0.0:0"}, exitUsage, "loopback only"},
		{"demo on all interfaces", []string{"--demo", "--listen", ":0"}, exitUsage, "loopback only"},
		{"bad listen", []string{"--demo", "--listen", "localhost"}, exitUsage, `--listen "localhost"`},
		{"broken config", []string{"--config", "../../testdata/site-broken.yaml"}, exitUsage, "../../testdata/site-broken.yaml:4:9: listen:"},
		{"no data directory", []string{"--config", noData}, exitUsage, "no data directory: give --data DIR or data_dir in " + noData},
		{"help", []string{"-h"}, exitOK, "cleanmon serve --demo [--listen ADDR] [--data DIR] [--speed N]"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var out, errb bytes.Buffer
			code := runServe(c.args, &out, &errb)
			if code != c.code || !strings.Contains(errb.String(), c.msg) {
				t.Fatalf("exit %d, stderr:\n%s\nwant %d with %q", code, errb.String(), c.code, c.msg)
			}
			if out.Len() != 0 {
				t.Errorf("stdout %q", out.String())
			}
		})
	}
}

func TestRestartKeepsOperatingStateAndReadings(t *testing.T) {
	dir := t.TempDir()
	d := startSite(t, apiSite(false), dir)
	at := time.Now().UTC().Add(-time.Minute).Truncate(time.Millisecond)
	d.post(postedReading{Counter: "pc-hood", Time: rfcTime(at), VolumeL: 28.3, Counts: map[string]uint64{"0.3": 80, "0.5": 20, "1": 4, "5": 0}})
	// fill is configured at rest; it goes into operation, then maintenance.
	if code, _, b := d.do("PUT", "/api/v1/zones/fill/state", secretOperator, "application/json", []byte(`{"state":"in-operation","by":"k.osei"}`)); code != 200 {
		t.Fatalf("%d %s", code, b)
	}
	code, _, b := d.do("PUT", "/api/v1/zones/fill/state", secretOperator, "application/json", []byte(`{"state":"maintenance","by":"k.osei","reason":"HEPA change"}`))
	if code != 200 {
		t.Fatalf("%d %s", code, b)
	}
	var before zoneOut
	json.Unmarshal(b, &before)
	if c := d.stop(); c != exitOK {
		t.Fatalf("first daemon exit %d:\n%s", c, d.stderr.String())
	}

	d2 := startSite(t, apiSite(false), dir)
	var fill, hood zoneOut
	d2.getJSON("/api/v1/zones/fill", &fill)
	if fill.OperatingState != "maintenance" || fill.StateChange == nil || fill.StateChange.By != "shift-lead (k.osei)" ||
		fill.StateChange.Reason != "HEPA change" || !fill.StateChange.Since.Equal(before.StateChange.Since) {
		t.Fatalf("operating state after restart: %s %+v (before %+v)", fill.OperatingState, fill.StateChange, before.StateChange)
	}
	// Still judged against the in-operation limits it ran under before
	// maintenance (grade B: 352 000 /m³ at 0.5 µm, EU GMP Annex 1 (2022)).
	if fill.LimitsState != "in-operation" || *fill.LimitsPerM3["0.5"] != 352000 {
		t.Errorf("limits after restart: %s %v", fill.LimitsState, limitsOf(fill.LimitsPerM3))
	}
	d2.getJSON("/api/v1/zones/hood", &hood)
	l := hood.Locations[0]
	if l.Time == nil || !l.Time.Equal(at) || l.Samples != 1 || !l.Fresh || hood.State != "in-class" ||
		l.ConcentrationPerM3["0.5"] != perL(20) {
		t.Fatalf("zone state after restart: %s %+v", hood.State, l)
	}
}

func TestSecondDaemonOnSameDataDir(t *testing.T) {
	dir := t.TempDir()
	startSite(t, apiSite(false), dir)
	p := filepath.Join(t.TempDir(), "site.yaml")
	os.WriteFile(p, []byte(apiSite(false)), 0o600)
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	var out, errb bytes.Buffer
	code := serve(ctx, daemon.Options{ConfigPath: p, DataDir: dir, Listen: "127.0.0.1:0", Speed: 1}, &out, &errb)
	if code != exitFail || !strings.Contains(errb.String(), "is in use by another cleanmon process") || out.Len() != 0 {
		t.Fatalf("exit %d, stdout %q, stderr:\n%s", code, out.String(), errb.String())
	}
}

// TestGracefulShutdownFinishesInFlightIngest starts a POST, makes sure its
// handler is running (the server asked for the body with 100 Continue),
// then shuts the daemon down before the body is sent: the request must
// still be answered 200 and its readings be in the store afterwards.
func TestGracefulShutdownFinishesInFlightIngest(t *testing.T) {
	dir := t.TempDir()
	d := startSite(t, apiSite(false), dir)
	const n = 500
	start := time.Now().UTC().Add(-time.Hour).Truncate(time.Second)
	var body bytes.Buffer
	for i := 0; i < n; i++ {
		fmt.Fprintf(&body, `{"counter":"pc-asm-1","time":%q,"volume_l":28.3,"counts":{"0.3":20,"0.5":10,"1":1,"5":0}}`+"\n", rfcTime(start.Add(time.Duration(i)*time.Second)))
	}
	pr, pw := io.Pipe()
	req, _ := http.NewRequest("POST", d.url+"/api/v1/readings", pr)
	req.Header.Set("Authorization", "Bearer "+secretIngest)
	req.Header.Set("Content-Type", "application/x-ndjson")
	req.Header.Set("Expect", "100-continue")
	req.ContentLength = int64(body.Len())
	handlerRunning := make(chan struct{})
	req = req.WithContext(httptrace.WithClientTrace(context.Background(), &httptrace.ClientTrace{
		Got100Continue: func() { close(handlerRunning) },
	}))
	client := &http.Client{Timeout: 30 * time.Second, Transport: &http.Transport{ExpectContinueTimeout: 20 * time.Second}}
	type result struct {
		code int
		body string
		err  error
	}
	res := make(chan result, 1)
	go func() {
		resp, err := client.Do(req)
		if err != nil {
			res <- result{err: err}
			return
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		res <- result{code: resp.StatusCode, body: string(b)}
	}()
	go func() {
		<-handlerRunning
		// Give the shutdown a moment to begin while the body is held back.
		time.Sleep(200 * time.Millisecond)
		pw.Write(body.Bytes())
		pw.Close()
	}()
	select {
	case <-handlerRunning:
	case <-time.After(20 * time.Second):
		t.Fatal("the server never asked for the body")
	}
	stopped := make(chan int, 1)
	go func() { stopped <- d.stop() }()

	r := <-res
	if r.err != nil || r.code != 200 || !strings.Contains(r.body, fmt.Sprintf(`"accepted":%d`, n)) {
		t.Fatalf("in-flight request: %v %d %s\n%s", r.err, r.code, r.body, d.stderr.String())
	}
	if c := <-stopped; c != exitOK {
		t.Fatalf("exit %d:\n%s", c, d.stderr.String())
	}
	if !strings.Contains(d.stderr.String(), "shutting down") {
		t.Errorf("no shutdown log:\n%s", d.stderr.String())
	}
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	got := 0
	st.ScanReadings("pc-asm-1", time.Time{}, time.Time{}, func(store.Reading) error { got++; return nil })
	if got != n {
		t.Fatalf("%d readings in the store after shutdown, want %d", got, n)
	}
}

func TestBackupEndpoint(t *testing.T) {
	d := startSite(t, apiSite(false), "")
	at := time.Now().UTC().Add(-2 * time.Minute)
	d.post(asm("pc-asm-1", at, 100), asm("pc-asm-1", at.Add(time.Minute), 120))
	code, h, b := d.do("GET", "/api/v1/backup", secretAdmin, "", nil)
	if code != 200 || h.Get("Content-Type") != "application/octet-stream" || !strings.Contains(h.Get("Content-Disposition"), `filename="cleanmon-`) {
		t.Fatalf("%d %v", code, h)
	}
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "cleanmon.db"), b, 0o600); err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatalf("backup does not open: %v", err)
	}
	defer st.Close()
	n := 0
	st.ScanReadings("pc-asm-1", time.Time{}, time.Time{}, func(store.Reading) error { n++; return nil })
	if n != 2 {
		t.Fatalf("%d readings in the backup, want 2", n)
	}
}

func TestDemoServesFiveZonesAtOnce(t *testing.T) {
	began := time.Now()
	d := startTestDaemon(t, daemon.Options{Demo: true})
	var zs []zoneOut
	code, _, b := d.do("GET", "/api/v1/zones", "", "", nil) // open: no token
	elapsed := time.Since(began)
	if code != 200 {
		t.Fatalf("%d %s", code, b)
	}
	if err := json.Unmarshal(b, &zs); err != nil {
		t.Fatal(err)
	}
	var ids []string
	for _, z := range zs {
		ids = append(ids, z.ID)
	}
	// the demo site: the five zones of the demo site.
	if strings.Join(ids, ",") != "coating-hood,assembly,metrology,gowning,corridor" {
		t.Fatalf("zones %v", ids)
	}
	// Serving does not wait for the simulator's backfill, so the zones are
	// there as soon as the address is printed. The figure is logged, not
	// asserted: speed is shown by benchmarks, not by timed tests.
	t.Logf("five zones served %s after start", elapsed)
	if !strings.Contains(d.stderr.String(), "demo: the API is open") {
		t.Errorf("open API not logged:\n%s", d.stderr.String())
	}
	// The backfill goes through the ingest path into the store and the
	// zone state: wait (bounded) until every counted location has data.
	deadline := time.Now().Add(20 * time.Second)
	for {
		d.getJSON("/api/v1/zones", &zs)
		missing := 0
		for _, z := range zs {
			for _, l := range z.Locations {
				if l.Time == nil || !l.Fresh {
					missing++
				}
			}
		}
		if missing == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d locations still without fresh data:\n%s", missing, d.stderr.String())
		}
		time.Sleep(100 * time.Millisecond)
	}
	var rows []json.RawMessage
	d.getJSON("/api/v1/zones/assembly/readings?step=1h", &rows)
	// Three counters over the last 24 h at one reading a minute.
	if len(rows) < 3*23 {
		t.Errorf("%d hourly rows for assembly after the backfill", len(rows))
	}
	// Open demo: state changes need no token either.
	if code, _, b := d.do("PUT", "/api/v1/zones/gowning/state", "", "application/json", []byte(`{"state":"in-operation","by":"demo"}`)); code != 200 {
		t.Errorf("PUT state on the demo: %d %s", code, b)
	}
	// Without --data the store lives in a temporary directory that goes
	// with the daemon.
	m := regexp.MustCompile(`data=(\S+)`).FindStringSubmatch(d.stderr.String())
	if m == nil {
		t.Fatalf("no data directory logged")
	}
	if _, err := os.Stat(m[1]); err != nil {
		t.Fatalf("data directory %s: %v", m[1], err)
	}
	if c := d.stop(); c != exitOK {
		t.Fatalf("exit %d", c)
	}
	if _, err := os.Stat(m[1]); !os.IsNotExist(err) {
		t.Errorf("temporary data directory %s left behind (%v)", m[1], err)
	}
}

func TestDemoSpeed(t *testing.T) {
	dir := t.TempDir()
	d := startTestDaemon(t, daemon.Options{Demo: true, DataDir: dir, Speed: 120})
	first := time.Time{}
	deadline := time.Now().Add(20 * time.Second)
	for {
		var z zoneOut
		d.getJSON("/api/v1/zones/coating-hood", &z)
		if lt := z.Locations[0].Time; lt != nil {
			if first.IsZero() {
				first = *lt
			} else if lt.Sub(first) >= 2*time.Minute {
				break // two simulated minutes went by in a few wall seconds
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("simulated time did not advance at speed 120 (latest %s):\n%s", first, d.stderr.String())
		}
		time.Sleep(100 * time.Millisecond)
	}
	d.stop()
	if _, err := os.Stat(filepath.Join(dir, "cleanmon.db")); err != nil {
		t.Errorf("--data directory not used: %v", err)
	}
}
