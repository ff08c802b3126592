package daemon

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"testing"
	"time"
)

// BenchmarkYearQueries posts one location's year (525 600 readings, a
// gateway catching up in batches of 1 000), then times the raw and the
// hourly query of the whole year through the real daemon over loopback,
// each run of the loop one of each. It is the benchmark to profile the
// query path with:
//
//	go test ./cmd/cleanmon/internal/daemon -run '^$' -bench YearQueries -cpuprofile cpu.out
func BenchmarkYearQueries(b *testing.B) {
	const minutes = 525600
	token := "bench-query-token"
	sum := sha256.Sum256([]byte(token))
	site := fmt.Sprintf("site: \"Veldmark Photonics, building C (bench)\"\nretention: \"87600h\"\naccess:\n  rate_limit: {requests_per_second: 100000}\n  tokens:\n    - {name: bench, sha256: %q, role: admin}\n", hex.EncodeToString(sum[:])) +
		"zones:\n  - id: assembly\n    class: 7\n    operating_state: in-operation\n    area_m2: 60\n    sizes: [\"0.5\", \"5\"]\n    locations: [{id: loc-0}]\n" +
		"counters:\n  - {id: pc-0, zone: assembly, location: loc-0, flow_lpm: 28.3, sizes: [\"0.3\", \"0.5\", \"1\", \"5\"], interval: \"1m\"}\n"
	end := time.Now().UTC().Add(-time.Hour).Truncate(time.Minute)
	start := end.Add(-minutes * time.Minute)
	var bodies [][]byte
	var cur bytes.Buffer
	for m := range minutes {
		fmt.Fprintf(&cur, `{"counter":"pc-0","time":"%s","volume_l":28.3,"flow_lpm":28.3,"status":"ok","counts":{"0.3":%d,"0.5":%d,"1":%d,"5":%d}}`+"\n",
			start.Add(time.Duration(m)*time.Minute).Format(time.RFC3339), 9000+m%701, 3000+m%301, 600+m%61, m%9)
		if (m+1)%1000 == 0 || m == minutes-1 {
			bodies = append(bodies, bytes.Clone(cur.Bytes()))
			cur.Reset()
		}
	}
	dir := b.TempDir()
	cfg := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(cfg, []byte(site), 0o600); err != nil {
		b.Fatal(err)
	}
	d, err := New(Options{ConfigPath: cfg, DataDir: filepath.Join(dir, "data"), Listen: "127.0.0.1:0", Log: quietLog()})
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	ran := make(chan error, 1)
	go func() { ran <- d.Run(ctx) }()
	defer func() {
		cancel()
		<-ran
		_ = d.Close()
	}()
	waitReady(b, d.Addr())
	postBodies(b, d.Addr(), token, bodies, 1, minutes)
	q := fmt.Sprintf("%s/api/v1/zones/assembly/readings?location=loc-0&from=%s&to=%s", d.Addr(), start.Format(time.RFC3339), end.Format(time.RFC3339))
	get := func(url string) time.Duration {
		req, _ := http.NewRequest(http.MethodGet, url, nil)
		req.Header.Set("Authorization", "Bearer "+token)
		t0 := time.Now()
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			b.Fatal(err)
		}
		n, _ := io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusOK || n == 0 {
			b.Fatalf("query: %s, %d bytes", resp.Status, n)
		}
		return time.Since(t0)
	}
	var raw, hourly time.Duration
	for b.Loop() {
		raw += get(q)
		hourly += get(q + "&step=1h")
	}
	b.ReportMetric(raw.Seconds()/float64(b.N), "raw-s/op")
	b.ReportMetric(hourly.Seconds()*1000/float64(b.N), "hourly-ms/op")
}
