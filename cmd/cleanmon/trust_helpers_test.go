package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"cleanmon/store"
)

// trustSite is a small site for the tests of the signed record: one ISO 7
// zone with two pushed counters and a DP sensor to the corridor, the
// crash tests' admin token, and the audit section given in audit (YAML
// lines indented by two, or ""), then extra top-level YAML.
func trustSite(t *testing.T, audit, extra string) string {
	t.Helper()
	var b strings.Builder
	fmt.Fprintf(&b, "site: \"Veldmark Photonics, building C\"\nretention: \"87600h\"\naccess:\n  rate_limit: {disabled: true}\n  tokens:\n    - {name: crash-admin, sha256: %q, role: admin}\n", tokenHash(crashToken))
	b.WriteString("zones:\n  - id: assembly\n    name: Assembly hall\n    class: 7\n    operating_state: in-operation\n    area_m2: 60\n    sizes: [\"0.5\", \"5\"]\n    locations: [{id: loc-0}, {id: loc-1}]\n")
	b.WriteString("counters:\n")
	for i := 0; i < 2; i++ {
		fmt.Fprintf(&b, "  - {id: pc-%d, zone: assembly, location: loc-%d, flow_lpm: 28.3, sizes: [\"0.5\", \"5\"], interval: \"1m\"}\n", i, i)
	}
	b.WriteString("pressure_sensors:\n  - {id: dp-asm, high: assembly, low: corridor, min_pa: 8}\n")
	if audit != "" {
		b.WriteString("audit:\n" + audit)
	}
	b.WriteString(extra)
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(b.String()), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// auditKeys writes a key pair with `cleanmon keygen` and returns the
// private and public key files.
func auditKeys(t *testing.T) (priv, pub string) {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "keys")
	if code, out, errs := runCLI(t, "keygen", "--out", dir); code != exitOK {
		t.Fatalf("keygen: %d %s%s", code, out, errs)
	}
	return filepath.Join(dir, keygenPrivate), filepath.Join(dir, keygenPublic)
}

// auditHead is the daemon's audit head as the API gives it.
func auditHead(t *testing.T, url string) string {
	t.Helper()
	code, b, err := apiDo(context.Background(), http.MethodGet, url+"/api/v1/audit/head", nil, "")
	if err != nil || code != 200 {
		t.Fatalf("audit head: %d %v %s", code, err, b)
	}
	return string(b)
}

// auditEntries are the daemon's audit entries as the API lists them.
func auditEntries(t *testing.T, url string) []map[string]any {
	t.Helper()
	code, b, err := apiDo(context.Background(), http.MethodGet, url+"/api/v1/audit", nil, "")
	if err != nil || code != 200 {
		t.Fatalf("audit: %d %v %s", code, err, b)
	}
	var out []map[string]any
	if err := json.Unmarshal(b, &out); err != nil {
		// One entry a line (NDJSON) is read too.
		for _, line := range strings.Split(strings.TrimSpace(string(b)), "\n") {
			var e map[string]any
			if json.Unmarshal([]byte(line), &e) == nil {
				out = append(out, e)
			}
		}
	}
	return out
}

// readings posts n readings of pc-0 one minute apart from base, ending a
// few minutes ago, through the API.
func postReadings(t *testing.T, url string, n int) {
	t.Helper()
	var b strings.Builder
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, `{"counter":"pc-%d","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":1}}`+"\n", i%2, readingTime(i), 1000+i)
	}
	code, body, err := apiDo(context.Background(), http.MethodPost, url+"/api/v1/readings", []byte(b.String()), "application/x-ndjson")
	if err != nil || code != 200 {
		t.Fatalf("posting readings: %d %v %s", code, err, body)
	}
}

// copyDataDir copies a stopped daemon's database file into a new data
// directory.
func copyDataDir(t *testing.T, data string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(data, store.FileName))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, store.FileName), b, 0o600); err != nil {
		t.Fatal(err)
	}
	return dir
}

// trustBase is the time of the first reading postReadings sends: three
// hours ago, inside every default range of the API.
var trustBase = time.Now().UTC().Add(-10 * time.Hour).Truncate(time.Minute)

func readingTime(i int) string {
	return trustBase.Add(time.Duration(i) * time.Minute).Format(time.RFC3339)
}

// waitStartSweep waits, bounded, for the retention sweep the daemon runs
// just after it starts to be on the audit chain: a test that compares the
// chain's head before and after refused requests must begin after it.
func waitStartSweep(t *testing.T, get func(path string) (int, []byte)) {
	t.Helper()
	for end := time.Now().Add(20 * time.Second); ; {
		code, b := get("/api/v1/audit?action=sweep")
		if code != http.StatusOK {
			t.Fatalf("audit trail: %d %s", code, b)
		}
		if strings.Contains(string(b), `"action":"sweep"`) {
			return
		}
		if time.Now().After(end) {
			t.Fatal("the start's retention sweep is not on the audit chain after 20 s")
		}
		time.Sleep(20 * time.Millisecond)
	}
}
