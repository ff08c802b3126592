package loadtest

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	bolt "go.etcd.io/bbolt"

	"cleanmon/cmd/cleanmon/internal/report"
)

// BenchOptions are the knobs of `cleanmon bench`.
type BenchOptions struct {
	Counters, Batch, Writers, Rate int
	Run                            int // consecutive samples of one counter in a Batch
	Phase                          time.Duration
	History                        bool
	Keep                           bool
}

const benchToken = "bench-admin-token"

// Bench measures the real daemon: it starts `cleanmon serve` (this very
// binary) on loopback with a generated site of o.Counters counters, drives
// ingest and queries over HTTP, and writes the same records straight into a
// bare bbolt file with the same batching as a baseline. It prints
// throughput, acknowledgement latency, query times and the server's peak
// RSS.
func Bench(o BenchOptions, stdout, stderr io.Writer) error {
	dir, err := os.MkdirTemp("", "cleanmon-bench-")
	if err != nil {
		return err
	}
	if !o.Keep {
		defer os.RemoveAll(dir)
	}
	cfg := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(cfg, []byte(benchSite(o.Counters)), 0o600); err != nil {
		return err
	}
	self, err := os.Executable()
	if err != nil {
		return err
	}
	srv, err := StartChild(self, "serve", "--config", cfg, "--data", filepath.Join(dir, "data"), "--listen", "127.0.0.1:0")
	if err != nil {
		return err
	}
	defer srv.Stop()
	c := &benchClient{url: srv.URL, http: &http.Client{Transport: &http.Transport{MaxIdleConnsPerHost: 256}}}

	fmt.Fprintf(stdout, "cleanmon bench: %d counters, %s per phase, on %s\n", o.Counters, o.Phase, machine())
	base := time.Now().UTC().Add(-30 * 24 * time.Hour).Truncate(time.Second)
	var seq atomic.Int64

	// Throughput: writers post NDJSON batches as fast as acknowledgements come.
	tp, lat, err := c.throughput(o, base, &seq)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "  ingest, NDJSON batches of %d, %d writers: %s readings/s durable (request p50 %s, p99 %s)\n",
		o.Batch, o.Writers, report.GroupDigits(math.Round(tp)), ms(lat.p50), ms(lat.p99))

	// Baseline: the same records, the same batches, straight into bbolt.
	bl, err := rawBolt(filepath.Join(dir, "raw.db"), o, base, int(tp*o.Phase.Seconds()))
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "  raw bbolt baseline, same batches: %s readings/s; daemon/baseline = %.2f\n", report.GroupDigits(math.Round(bl)), tp/bl)

	// The rules judge readings after their commit, through a queue that
	// pushes back on ingest only when full: let it drain, so the latency
	// phase measures the steady state and not the throughput phase's tail.
	drained := c.waitRulesIdle(60 * time.Second)
	if !drained {
		fmt.Fprintln(stdout, "  (the alarm rules had not caught up within 60 s; the latency below includes their backlog)")
	}
	peakLive, curLive := srv.RSS()
	live := srv.Status()

	// Latency: one reading per request at a fixed rate.
	l1, errs, err := c.latency(o, base, &seq)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "  single-reading acknowledgement at %d requests/s: p50 %s, p99 %s, max %s (%d errors)\n", o.Rate, ms(l1.p50), ms(l1.p99), ms(l1.max), errs)

	if o.History {
		raw, rawRows, hourly, hourRows, err := c.history(o)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "  one location's year of per-minute readings: raw %s rows in %s; rolled up to hours %s rows in %s\n",
			report.GroupDigits(float64(rawRows)), ms(raw), report.GroupDigits(float64(hourRows)), ms(hourly))
	}
	peak, cur := srv.RSS()
	fmt.Fprintf(stdout, "  server RSS with %d counters live, after the ingest phase: %s MB = %s MB anonymous (heap) + %s MB of mapped store file (peak %s MB)\n",
		o.Counters, mb(curLive), mb(live["RssAnon:"]), mb(live["RssFile:"]), mb(peakLive))
	fmt.Fprintf(stdout, "  server RSS at the end: %s MB, peak %s MB (includes the store's file pages mapped by the year-long queries)\n", mb(cur), mb(peak))
	return nil
}

func benchSite(n int) string {
	sum := sha256.Sum256([]byte(benchToken))
	var b strings.Builder
	fmt.Fprintf(&b, "site: \"Veldmark Photonics, building C (bench)\"\nretention: \"87600h\"\naccess:\n  rate_limit: {requests_per_second: 100000}\n  tokens:\n    - {name: bench, sha256: %q, role: admin}\n", hex.EncodeToString(sum[:]))
	b.WriteString("zones:\n  - id: assembly\n    name: Assembly hall\n    class: 9\n    operating_state: in-operation\n    area_m2: 60\n    sizes: [\"0.5\", \"5\"]\n    locations:\n")
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, "      - {id: loc-%d}\n", i)
	}
	b.WriteString("counters:\n")
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, "  - {id: pc-%d, zone: assembly, location: loc-%d, flow_lpm: 28.3, sizes: [\"0.3\", \"0.5\", \"1\", \"5\"], interval: \"1m\"}\n", i, i)
	}
	return b.String()
}

// benchReading appends one NDJSON reading line. Counter 0 is kept for the
// history phase; the others take the load.
func benchReading(b *bytes.Buffer, counter int, t time.Time, k int64) {
	fmt.Fprintf(b, `{"counter":"pc-%d","time":"%s","volume_l":28.3,"counts":{"0.3":%d,"0.5":%d,"1":%d,"5":%d},"flow_lpm":28.3,"status":"ok"}`+"\n",
		counter, t.Format(time.RFC3339Nano), 9000+k%700, 3000+k%300, 600+k%60, k%9)
}

// benchCounter is the counter of the k-th load reading: runs of o.Run
// consecutive samples per counter, over counters 1..N-1 (0 is kept for the
// history phase).
func benchCounter(k int64, o BenchOptions) int {
	return 1 + int((k/int64(o.Run))%int64(o.Counters-1))
}

type benchClient struct {
	url  string
	http *http.Client
}

func (c *benchClient) post(ctx context.Context, body []byte) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, c.url+"/api/v1/readings", bytes.NewReader(body))
	if err != nil {
		return err
	}
	req.Header.Set("Authorization", "Bearer "+benchToken)
	req.Header.Set("Content-Type", "application/x-ndjson")
	resp, err := c.http.Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	msg, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != http.StatusOK {
		return fmt.Errorf("ingest: %s %s", resp.Status, strings.TrimSpace(string(msg)))
	}
	return nil
}

type quantiles struct{ p50, p99, max time.Duration }

func summarize(d []time.Duration) quantiles {
	if len(d) == 0 {
		return quantiles{}
	}
	sort.Slice(d, func(i, j int) bool { return d[i] < d[j] })
	at := func(q float64) time.Duration {
		return d[int(math.Min(float64(len(d)-1), math.Ceil(q*float64(len(d)))-1))]
	}
	return quantiles{at(0.50), at(0.99), d[len(d)-1]}
}

func (c *benchClient) throughput(o BenchOptions, base time.Time, seq *atomic.Int64) (float64, quantiles, error) {
	ctx, cancel := context.WithTimeout(context.Background(), o.Phase)
	defer cancel()
	var accepted atomic.Int64
	var mu sync.Mutex
	var lats []time.Duration
	var firstErr error
	var wg sync.WaitGroup
	start := time.Now()
	for w := 0; w < o.Writers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var b bytes.Buffer
			for ctx.Err() == nil {
				b.Reset()
				for i := 0; i < o.Batch; i++ {
					k := seq.Add(1)
					benchReading(&b, benchCounter(k, o), base.Add(time.Duration(k)*time.Microsecond), k)
				}
				t0 := time.Now()
				err := c.post(context.Background(), b.Bytes()) // a batch in flight finishes; the phase ends between batches
				if err != nil {
					mu.Lock()
					if firstErr == nil {
						firstErr = err
					}
					mu.Unlock()
					return
				}
				mu.Lock()
				lats = append(lats, time.Since(t0))
				mu.Unlock()
				accepted.Add(int64(o.Batch))
			}
		}()
	}
	wg.Wait()
	if firstErr != nil {
		return 0, quantiles{}, firstErr
	}
	return float64(accepted.Load()) / time.Since(start).Seconds(), summarize(lats), nil
}

func (c *benchClient) latency(o BenchOptions, base time.Time, seq *atomic.Int64) (quantiles, int, error) {
	total := int(o.Phase.Seconds() * float64(o.Rate))
	tick := time.NewTicker(time.Second / time.Duration(o.Rate))
	defer tick.Stop()
	var mu sync.Mutex
	var lats []time.Duration
	errs := 0
	var wg sync.WaitGroup
	sem := make(chan struct{}, 256)
	for i := 0; i < total; i++ {
		<-tick.C
		sem <- struct{}{}
		wg.Add(1)
		go func() {
			defer func() { <-sem; wg.Done() }()
			var b bytes.Buffer
			k := seq.Add(1)
			benchReading(&b, 1+int(k%int64(o.Counters-1)), base.Add(time.Duration(k)*time.Microsecond), k)
			t0 := time.Now()
			ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
			err := c.post(ctx, b.Bytes())
			cancel()
			mu.Lock()
			defer mu.Unlock()
			if err != nil {
				errs++
				return
			}
			lats = append(lats, time.Since(t0))
		}()
	}
	wg.Wait()
	if len(lats) == 0 {
		return quantiles{}, errs, errors.New("latency phase: every request failed")
	}
	return summarize(lats), errs, nil
}

// waitRulesIdle polls the daemon's metrics until the alarm rules' queue
// is empty, bounded by limit.
func (c *benchClient) waitRulesIdle(limit time.Duration) bool {
	deadline := time.Now().Add(limit)
	for time.Now().Before(deadline) {
		req, _ := http.NewRequest(http.MethodGet, c.url+"/metrics", nil)
		req.Header.Set("Authorization", "Bearer "+benchToken)
		resp, err := c.http.Do(req)
		if err == nil {
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			if bytes.Contains(b, []byte("\ncleanmon_rules_queue 0\n")) {
				return true
			}
		}
		time.Sleep(200 * time.Millisecond)
	}
	return false
}

// history loads a year of per-minute readings for counter pc-0 (525 600)
// and times the raw and the hourly query of the whole year.
func (c *benchClient) history(o BenchOptions) (raw time.Duration, rawRows int, hourly time.Duration, hourRows int, err error) {
	end := time.Now().UTC().Truncate(time.Minute).Add(-time.Hour)
	start := end.Add(-525600 * time.Minute)
	var b bytes.Buffer
	for i := 0; i < 525600; {
		b.Reset()
		for j := 0; j < 1000 && i < 525600; j, i = j+1, i+1 {
			benchReading(&b, 0, start.Add(time.Duration(i)*time.Minute), int64(i))
		}
		if err = c.post(context.Background(), b.Bytes()); err != nil {
			return
		}
	}
	q := fmt.Sprintf("%s/api/v1/zones/assembly/readings?location=loc-0&from=%s&to=%s", c.url, start.Format(time.RFC3339), end.Format(time.RFC3339))
	if raw, rawRows, err = c.timeQuery(q); err != nil {
		return
	}
	hourly, hourRows, err = c.timeQuery(q + "&step=1h")
	return
}

// timeQuery fetches a JSON array and counts its rows. The daemon writes
// one row per line, so rows are counted by line rather than by decoding:
// the figure is the daemon's, not the client's JSON parser's.
func (c *benchClient) timeQuery(url string) (time.Duration, int, error) {
	req, err := http.NewRequest(http.MethodGet, url, nil)
	if err != nil {
		return 0, 0, err
	}
	req.Header.Set("Authorization", "Bearer "+benchToken)
	t0 := time.Now()
	resp, err := c.http.Do(req)
	if err != nil {
		return 0, 0, err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		msg, _ := io.ReadAll(io.LimitReader(resp.Body, 512))
		return 0, 0, fmt.Errorf("query: %s %s", resp.Status, msg)
	}
	var lc lineCounter
	if _, err := io.Copy(&lc, resp.Body); err != nil {
		return 0, 0, err
	}
	if !lc.closed {
		return 0, 0, errors.New("query: the answer is not a complete JSON array")
	}
	return time.Since(t0), lc.lines - 1, nil // the last line is the closing bracket
}

type lineCounter struct {
	lines  int
	closed bool // the answer ended with "]\n"
	last   byte
}

func (l *lineCounter) Write(p []byte) (int, error) {
	l.lines += bytes.Count(p, []byte{'\n'})
	if len(p) >= 2 {
		l.closed = p[len(p)-2] == ']' && p[len(p)-1] == '\n'
	} else if len(p) == 1 {
		l.closed = l.last == ']' && p[0] == '\n'
	}
	if len(p) > 0 {
		l.last = p[len(p)-1]
	}
	return len(p), nil
}

// rawBolt writes n records in the daemon's batch size into a bare bbolt
// file (bucket per counter, 8-byte big-endian time keys, a value of about
// the daemon's size), one fsynced transaction per batch: what the store
// could at best do with the same durability.
func rawBolt(path string, o BenchOptions, base time.Time, n int) (float64, error) {
	if n < o.Batch*10 {
		n = o.Batch * 10
	}
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		return 0, err
	}
	defer db.Close()
	val := make([]byte, 48)
	start := time.Now()
	for k := 0; k < n; {
		err := db.Update(func(tx *bolt.Tx) error {
			for j := 0; j < o.Batch; j, k = j+1, k+1 {
				b, err := tx.CreateBucketIfNotExists([]byte("pc-" + strconv.Itoa(benchCounter(int64(k), o))))
				if err != nil {
					return err
				}
				key := binary.BigEndian.AppendUint64(nil, uint64(base.Add(time.Duration(k)*time.Microsecond).UnixNano()))
				binary.BigEndian.PutUint64(val, uint64(k))
				if err := b.Put(key, val); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			return 0, err
		}
	}
	return float64(n) / time.Since(start).Seconds(), nil
}

func machine() string {
	model := "unknown CPU"
	if b, err := os.ReadFile("/proc/cpuinfo"); err == nil {
		for _, line := range strings.Split(string(b), "\n") {
			if k, v, ok := strings.Cut(line, ":"); ok && strings.TrimSpace(k) == "model name" {
				model = strings.TrimSpace(v)
				break
			}
		}
	}
	return fmt.Sprintf("%d cores (%s), %s %s/%s", runtime.NumCPU(), model, runtime.Version(), runtime.GOOS, runtime.GOARCH)
}

func ms(d time.Duration) string { return fmt.Sprintf("%.1f ms", float64(d.Microseconds())/1000) }
func mb(kb int64) string        { return fmt.Sprintf("%.0f", float64(kb)/1024) }
