package daemon

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

// BenchmarkIngestLiveShape posts the live shape through the real daemon
// over loopback HTTP: 200 counters, a reading a minute each, NDJSON
// batches of 1 000 in time order across counters, 4 writers, each batch
// acknowledged after its fsync. It is the benchmark to profile the ingest
// path with:
//
//	go test ./cmd/cleanmon/internal/daemon -run '^$' -bench IngestLiveShape -benchtime 1x -cpuprofile cpu.out
func BenchmarkIngestLiveShape(b *testing.B) {
	const counters, minutes, batch, writers = 200, 500, 1000, 4
	token := "bench-ingest-token"
	sum := sha256.Sum256([]byte(token))
	var site strings.Builder
	fmt.Fprintf(&site, "site: \"Veldmark Photonics, building C (bench)\"\nretention: \"87600h\"\naccess:\n  rate_limit: {requests_per_second: 100000}\n  tokens:\n    - {name: bench, sha256: %q, role: admin}\n", hex.EncodeToString(sum[:]))
	site.WriteString("zones:\n  - id: assembly\n    class: 7\n    operating_state: in-operation\n    area_m2: 60\n    sizes: [\"0.5\", \"5\"]\n    locations:\n")
	for i := range counters {
		fmt.Fprintf(&site, "      - {id: loc-%d}\n", i)
	}
	site.WriteString("counters:\n")
	for i := range counters {
		fmt.Fprintf(&site, "  - {id: pc-%d, zone: assembly, location: loc-%d, flow_lpm: 28.3, sizes: [\"0.3\", \"0.5\", \"1\", \"5\"], interval: \"1m\"}\n", i, i)
	}
	end := time.Now().UTC().Add(-time.Hour).Truncate(time.Minute)
	var bodies [][]byte
	var cur bytes.Buffer
	for m := range minutes {
		at := end.Add(time.Duration(m-minutes) * time.Minute).Format(time.RFC3339)
		for c := range counters {
			k := m*counters + c
			fmt.Fprintf(&cur, `{"counter":"pc-%d","time":"%s","volume_l":28.3,"flow_lpm":28.3,"status":"ok","counts":{"0.3":%d,"0.5":%d,"1":%d,"5":%d}}`+"\n",
				c, at, 9000+k%701, 3000+k%301, 600+k%61, k%9)
			if cur.Len() > 0 && (k+1)%batch == 0 {
				bodies = append(bodies, bytes.Clone(cur.Bytes()))
				cur.Reset()
			}
		}
	}
	for b.Loop() {
		dir := b.TempDir()
		cfg := filepath.Join(dir, "site.yaml")
		if err := os.WriteFile(cfg, []byte(site.String()), 0o600); err != nil {
			b.Fatal(err)
		}
		d, err := New(Options{ConfigPath: cfg, DataDir: filepath.Join(dir, "data"), Listen: "127.0.0.1:0", Log: quietLog()})
		if err != nil {
			b.Fatal(err)
		}
		ctx, cancel := context.WithCancel(context.Background())
		ran := make(chan error, 1)
		go func() { ran <- d.Run(ctx) }()
		waitReady(b, d.Addr())
		rate := postBodies(b, d.Addr(), token, bodies, writers, counters*minutes)
		cancel()
		<-ran
		if err := d.Close(); err != nil {
			b.Fatal(err)
		}
		b.ReportMetric(rate, "durable-readings/s")
	}
}

func waitReady(b *testing.B, addr string) {
	for deadline := time.Now().Add(30 * time.Second); time.Now().Before(deadline); time.Sleep(20 * time.Millisecond) {
		if resp, err := http.Get(addr + "/readyz"); err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return
			}
		}
	}
	b.Fatal("the daemon did not answer ready within 30 s")
}

func postBodies(b *testing.B, addr, token string, bodies [][]byte, writers, readings int) float64 {
	next := make(chan []byte)
	var wg sync.WaitGroup
	client := &http.Client{Transport: &http.Transport{MaxIdleConnsPerHost: writers}}
	begin := time.Now()
	for range writers {
		wg.Go(func() {
			for body := range next {
				req, _ := http.NewRequest(http.MethodPost, addr+"/api/v1/readings", bytes.NewReader(body))
				req.Header.Set("Authorization", "Bearer "+token)
				req.Header.Set("Content-Type", "application/x-ndjson")
				resp, err := client.Do(req)
				if err != nil {
					b.Error(err)
					continue
				}
				resp.Body.Close()
				if resp.StatusCode != http.StatusOK {
					b.Errorf("ingest: %s", resp.Status)
				}
			}
		})
	}
	for _, body := range bodies {
		next <- body
	}
	close(next)
	wg.Wait()
	return float64(readings) / time.Since(begin).Seconds()
}
