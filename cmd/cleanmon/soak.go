package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"os"
	"path/filepath"
	"sync"
	"sync/atomic"
	"time"

	"cleanmon/store"
)

// soakOptions are the knobs of `cleanmon soak`.
type soakOptions struct {
	duration, every time.Duration
	rate, counters  int
	batch           int
}

// RSS is shown split: "heap" is the daemon's own (anonymous) memory, which
// must stay flat; "mapped" is the store file's pages that bbolt maps, which
// grow with the file and which the kernel can drop and read back.

// runSoak runs the real daemon on loopback under ingest and queries at
// once for a bounded time, reports every error (there must be none),
// throughput and the daemon's RSS as it goes, then stops it and verifies
// the store it wrote.
func runSoak(args []string, stdout, stderr io.Writer) int {
	fs := newFlags("soak", "[--duration 10m] [--rate 10000] [--counters 200] [--batch 100] [--every 30s]", stderr)
	var o soakOptions
	fs.DurationVar(&o.duration, "duration", 10*time.Minute, "how long to run (the soak stops by itself)")
	fs.IntVar(&o.rate, "rate", 10000, "readings per second to post")
	fs.IntVar(&o.counters, "counters", 200, "counters configured and fed")
	fs.IntVar(&o.batch, "batch", 100, "readings per NDJSON request")
	fs.DurationVar(&o.every, "every", 30*time.Second, "how often to print a progress line")
	pos, err := parseArgs(fs, args)
	if err != nil {
		return exitUsage
	}
	switch {
	case len(pos) > 0:
		return fail(stderr, "soak", fmt.Errorf("unexpected argument %q", pos[0]))
	case o.duration <= 0 || o.duration > 24*time.Hour:
		return fail(stderr, "soak", errors.New("--duration: more than 0, at most 24h"))
	case o.rate < 1 || o.counters < 2 || o.batch < 1 || o.every <= 0:
		return fail(stderr, "soak", errors.New("--rate, --batch ≥ 1, --counters ≥ 2, --every > 0"))
	}
	failures, err := soak(o, stdout)
	if err != nil {
		fmt.Fprintf(stderr, "cleanmon soak: %s\n", oneLine(err.Error()))
		return exitFail
	}
	if failures > 0 {
		return exitFail
	}
	return exitOK
}

func soak(o soakOptions, out io.Writer) (int64, error) {
	dir, err := os.MkdirTemp("", "cleanmon-soak-")
	if err != nil {
		return 0, err
	}
	defer os.RemoveAll(dir)
	cfg := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(cfg, []byte(benchSite(o.counters)), 0o600); err != nil {
		return 0, err
	}
	self, err := os.Executable()
	if err != nil {
		return 0, err
	}
	data := filepath.Join(dir, "data")
	srv, err := startChild(self, "serve", "--config", cfg, "--data", data, "--listen", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	c := &benchClient{url: srv.url, http: &http.Client{Timeout: 30 * time.Second, Transport: &http.Transport{MaxIdleConnsPerHost: 64}}}
	fmt.Fprintf(out, "cleanmon soak: %s at %d readings/s (%d counters, batches of %d) with queries, on %s\n", o.duration, o.rate, o.counters, o.batch, machine())
	fmt.Fprintf(out, "%8s %12s %12s %8s %8s %10s %10s %8s\n", "elapsed", "readings/s", "queries/s", "errors", "RSS MB", "heap MB", "mapped MB", "peak MB")

	ctx, cancel := context.WithTimeout(context.Background(), o.duration)
	defer cancel()
	var posted, queries, ingestErr, queryErr atomic.Int64
	var seq atomic.Int64
	base := time.Now().UTC().Add(-48 * time.Hour).Truncate(time.Second)
	var wg sync.WaitGroup

	// Ingest, paced: one batch every batch/rate seconds, spread over a few
	// writers so that a slow commit does not stall the pace.
	batchesPerSec := float64(o.rate) / float64(o.batch)
	writers := int(math.Max(2, math.Min(32, math.Ceil(batchesPerSec/10))))
	interval := time.Duration(float64(time.Second) * float64(writers) / batchesPerSec)
	var lastErr atomic.Value
	for w := 0; w < writers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			t := time.NewTicker(interval)
			defer t.Stop()
			var b bytes.Buffer
			for {
				select {
				case <-ctx.Done():
					return
				case <-t.C:
				}
				b.Reset()
				for i := 0; i < o.batch; i++ {
					k := seq.Add(1)
					benchReading(&b, 1+int(k%int64(o.counters-1)), base.Add(time.Duration(k)*time.Millisecond), k) // one sample per counter per turn, as live counters report
				}
				if err := c.post(context.Background(), b.Bytes()); err != nil {
					ingestErr.Add(1)
					lastErr.Store(err.Error())
					continue
				}
				posted.Add(int64(o.batch))
			}
		}()
	}
	// Queries: the zone list, one location's recent raw readings, a day
	// of minute rollups, the alarms — what pages and dashboards ask.
	for q := 0; q < 2; q++ {
		wg.Add(1)
		go func(seed uint64) {
			defer wg.Done()
			r := rand.New(rand.NewPCG(seed, 1))
			for ctx.Err() == nil {
				loc := 1 + r.IntN(o.counters-1)
				now := base.Add(time.Duration(seq.Load()) * time.Millisecond)
				paths := []string{
					"/api/v1/zones",
					fmt.Sprintf("/api/v1/zones/assembly/readings?location=loc-%d&from=%s&to=%s", loc, now.Add(-10*time.Minute).Format(time.RFC3339), now.Format(time.RFC3339)),
					fmt.Sprintf("/api/v1/zones/assembly/readings?location=loc-%d&step=1m&from=%s&to=%s", loc, now.Add(-24*time.Hour).Format(time.RFC3339), now.Format(time.RFC3339)),
					"/api/v1/alarms",
				}
				for _, p := range paths {
					if _, _, err := c.timeQuery(c.url + p); err != nil {
						queryErr.Add(1)
						lastErr.Store(err.Error())
					} else {
						queries.Add(1)
					}
				}
				select {
				case <-ctx.Done():
				case <-time.After(100 * time.Millisecond):
				}
			}
		}(uint64(q))
	}
	start := time.Now()
	tick := time.NewTicker(o.every)
	var prevPosted, prevQueries int64
	prev := start
	for done := false; !done; {
		select {
		case <-ctx.Done():
			done = true
		case now := <-tick.C:
			p, q := posted.Load(), queries.Load()
			secs := now.Sub(prev).Seconds()
			st := srv.status()
			fmt.Fprintf(out, "%8s %12.0f %12.1f %8d %8s %10s %10s %8s\n", now.Sub(start).Round(time.Second), float64(p-prevPosted)/secs,
				float64(q-prevQueries)/secs, ingestErr.Load()+queryErr.Load(), mb(st["VmRSS:"]), mb(st["RssAnon:"]), mb(st["RssFile:"]), mb(st["VmHWM:"]))
			prevPosted, prevQueries, prev = p, q, now
		}
	}
	tick.Stop()
	wg.Wait()
	elapsed := time.Since(start)
	peak, cur := srv.rss()
	srv.stop()
	failures := ingestErr.Load() + queryErr.Load()
	fmt.Fprintf(out, "done: %d readings in %s (%.0f/s), %d queries, %d ingest errors, %d query errors, RSS %s MB at the end, peak %s MB\n",
		posted.Load(), elapsed.Round(time.Second), float64(posted.Load())/elapsed.Seconds(), queries.Load(), ingestErr.Load(), queryErr.Load(), mb(cur), mb(peak))
	if e, ok := lastErr.Load().(string); ok {
		fmt.Fprintf(out, "last error: %s\n", e)
	}
	problems, err := store.Verify(data)
	if err != nil {
		return failures, fmt.Errorf("verifying the store after the soak: %w", err)
	}
	fmt.Fprintf(out, "store verified: %d faults\n", len(problems))
	for _, p := range problems {
		fmt.Fprintf(out, "fault: %s\n", p)
	}
	return failures + int64(len(problems)), nil
}
