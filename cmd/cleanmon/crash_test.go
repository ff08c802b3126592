package main

import (
	"bytes"
	"cleanmon/cmd/cleanmon/internal/loadtest"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

// buildBinary compiles the real cleanmon binary once per test run.
var (
	binOnce sync.Once
	binPath string
	binErr  error
)

func cleanmonBinary(t *testing.T) string {
	t.Helper()
	binOnce.Do(func() {
		dir, err := os.MkdirTemp("", "cleanmon-bin-")
		if err != nil {
			binErr = err
			return
		}
		binPath = filepath.Join(dir, "cleanmon")
		out, err := exec.Command("go", "build", "-o", binPath, ".").CombinedOutput()
		if err != nil {
			binErr = fmt.Errorf("go build: %v\n%s", err, out)
		}
	})
	if binErr != nil {
		t.Fatal(binErr)
	}
	return binPath
}

// process is one running cleanmon daemon process on loopback (the
// bench's child runner), with its URL and its stderr at hand.
type process struct {
	*loadtest.Child
	url  string
	logs *loadtest.LockedWriter
}

func (p *process) kill() { p.Kill() }
func (p *process) stop() { p.Stop() }

// startDaemon runs `cleanmon serve` until the test ends.
func startDaemon(t *testing.T, args ...string) *process {
	t.Helper()
	c, err := loadtest.StartChild(cleanmonBinary(t), append([]string{"serve", "--listen", "127.0.0.1:0"}, args...)...)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.Kill)
	return &process{Child: c, url: c.URL, logs: c.Logs}
}

const crashToken = "crash-test-admin-token"

// crashConfig is a small site: one ISO 7 zone with eight pushed counters.
func crashConfig(t *testing.T, counters int) string {
	t.Helper()
	sum := sha256.Sum256([]byte(crashToken))
	var b strings.Builder
	fmt.Fprintf(&b, "site: \"Veldmark Photonics, building C\"\nretention: \"87600h\"\naccess:\n  rate_limit: {disabled: true}\n  tokens:\n    - {name: crash-admin, sha256: %q, role: admin}\n", hex.EncodeToString(sum[:]))
	b.WriteString("zones:\n  - id: assembly\n    name: Assembly hall\n    class: 7\n    operating_state: in-operation\n    area_m2: 60\n    sizes: [\"0.5\", \"5\"]\n    locations:\n")
	for i := 0; i < counters; i++ {
		fmt.Fprintf(&b, "      - {id: loc-%d}\n", i)
	}
	b.WriteString("counters:\n")
	for i := 0; i < counters; i++ {
		fmt.Fprintf(&b, "  - {id: pc-%d, zone: assembly, location: loc-%d, flow_lpm: 28.3, sizes: [\"0.5\", \"5\"], interval: \"1m\"}\n", i, i)
	}
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(b.String()), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

type readingKey struct {
	counter string
	nanos   int64
}

func apiDo(ctx context.Context, method, url string, body []byte, ctype string) (int, []byte, error) {
	req, err := http.NewRequestWithContext(ctx, method, url, bytes.NewReader(body))
	if err != nil {
		return 0, nil, err
	}
	req.Header.Set("Authorization", "Bearer "+crashToken)
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0, nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	return resp.StatusCode, b, err
}

// TestCrashKeepsAcknowledgedReadings kills the real daemon with SIGKILL at
// random moments while writers post readings, several rounds on one data
// directory, then checks that every reading acknowledged with 200 is
// stored exactly once, that nothing was stored that was never sent, and
// that the zone's operating state survived.
func TestCrashKeepsAcknowledgedReadings(t *testing.T) {
	const counters, writers, rounds = 8, 6, 5
	cfg := crashConfig(t, counters)
	data := t.TempDir()
	rng := rand.New(rand.NewPCG(7, 11))
	base := time.Now().UTC().Add(-2 * time.Hour).Truncate(time.Second)

	var mu sync.Mutex
	acked := map[readingKey]bool{}
	sent := map[readingKey]bool{} // acknowledged or in flight at a kill
	next := 0                     // sequence of reading times, shared by writers

	for round := 0; round < rounds; round++ {
		d := startDaemon(t, "--config", cfg, "--data", data)
		if round == 1 {
			body := []byte(`{"state":"maintenance","by":"crash test","reason":"filter change"}`)
			if code, b, err := apiDo(context.Background(), http.MethodPut, d.url+"/api/v1/zones/assembly/state", body, "application/json"); err != nil || code != 200 {
				t.Fatalf("state change: %d %s %v", code, b, err)
			}
		}
		ctx, cancel := context.WithCancel(context.Background())
		var wg sync.WaitGroup
		for w := 0; w < writers; w++ {
			wg.Add(1)
			go func(seed uint64) {
				defer wg.Done()
				r := rand.New(rand.NewPCG(seed, uint64(round)))
				for i := 0; i < 10000 && ctx.Err() == nil; i++ {
					n := 1 + r.IntN(40)
					var body bytes.Buffer
					var keys []readingKey
					mu.Lock()
					for j := 0; j < n; j++ {
						c := fmt.Sprintf("pc-%d", r.IntN(counters))
						tm := base.Add(time.Duration(next) * time.Millisecond)
						next++
						k := readingKey{c, tm.UnixNano()}
						keys = append(keys, k)
						sent[k] = true
						fmt.Fprintf(&body, `{"counter":%q,"time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":%d},"flow_lpm":28.3,"status":"ok"}`+"\n",
							c, tm.Format(time.RFC3339Nano), 2000+r.IntN(500), r.IntN(20))
					}
					mu.Unlock()
					code, resp, err := apiDo(ctx, http.MethodPost, d.url+"/api/v1/readings", body.Bytes(), "application/x-ndjson")
					if err != nil {
						return // the daemon was killed under us
					}
					if code != 200 {
						t.Errorf("ingest status %d: %s", code, resp)
						return
					}
					var res struct{ Accepted, Duplicates int }
					if err := json.Unmarshal(resp, &res); err != nil || res.Accepted != n || res.Duplicates != 0 {
						t.Errorf("ingest answer %s (sent %d)", resp, n)
						return
					}
					mu.Lock()
					for _, k := range keys {
						acked[k] = true
					}
					mu.Unlock()
				}
			}(uint64(w))
		}
		time.Sleep(time.Duration(300+rng.IntN(1200)) * time.Millisecond)
		d.kill()
		cancel()
		wg.Wait()
	}
	if len(acked) < 200 {
		t.Fatalf("only %d readings acknowledged across %d rounds: the test did not load the daemon", len(acked), rounds)
	}

	d := startDaemon(t, "--config", cfg, "--data", data)
	stored := map[readingKey]int{}
	from := base.Add(-time.Minute).Format(time.RFC3339)
	to := base.Add(time.Duration(next)*time.Millisecond + time.Minute).Format(time.RFC3339)
	for i := 0; i < counters; i++ {
		url := fmt.Sprintf("%s/api/v1/zones/assembly/readings?from=%s&to=%s&location=loc-%d", d.url, from, to, i)
		code, body, err := apiDo(context.Background(), http.MethodGet, url, nil, "")
		if err != nil || code != 200 {
			t.Fatalf("query: %d %v %s", code, err, body)
		}
		var rows []struct {
			Time    time.Time `json:"time"`
			Counter string    `json:"counter"`
		}
		if err := json.Unmarshal(body, &rows); err != nil {
			t.Fatal(err)
		}
		for _, r := range rows {
			stored[readingKey{r.Counter, r.Time.UnixNano()}]++
		}
	}
	missing, dup, foreign := 0, 0, 0
	for k := range acked {
		if stored[k] == 0 {
			missing++
		}
	}
	for k, n := range stored {
		if n > 1 {
			dup++
		}
		if !sent[k] {
			foreign++
		}
	}
	if missing > 0 || dup > 0 || foreign > 0 {
		t.Errorf("after %d kills: %d acknowledged readings missing, %d duplicated, %d never sent (of %d acknowledged, %d stored)",
			rounds, missing, dup, foreign, len(acked), len(stored))
	}
	// Re-sending acknowledged readings is answered as duplicates.
	var body bytes.Buffer
	n := 0
	for k := range acked {
		fmt.Fprintf(&body, `{"counter":%q,"time":%q,"volume_l":28.3,"counts":{"0.5":1,"5":0},"status":"ok"}`+"\n", k.counter, time.Unix(0, k.nanos).UTC().Format(time.RFC3339Nano))
		if n++; n == 50 {
			break
		}
	}
	code, resp, err := apiDo(context.Background(), http.MethodPost, d.url+"/api/v1/readings", body.Bytes(), "application/x-ndjson")
	if err != nil || code != 200 || !strings.Contains(string(resp), `"duplicates":50`) {
		t.Errorf("resend: %d %s %v", code, resp, err)
	}
	code, resp, err = apiDo(context.Background(), http.MethodGet, d.url+"/api/v1/zones/assembly", nil, "")
	if err != nil || code != 200 || !strings.Contains(string(resp), `"operating_state":"maintenance"`) {
		t.Errorf("operating state lost across restarts: %d %s", code, resp)
	}
	t.Logf("%d rounds, %d readings acknowledged, %d stored", rounds, len(acked), len(stored))
}
