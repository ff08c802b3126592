package loadtest

import (
	"bytes"
	"context"
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

// SoakOptions are the knobs of `cleanmon soak`.
type SoakOptions struct {
	Duration, Every time.Duration
	Rate, Counters  int
	Batch           int
}

// RSS is shown split: "heap" is the daemon's own (anonymous) memory, which
// must stay flat; "mapped" is the store file's pages that bbolt maps, which
// grow with the file and which the kernel can drop and read back.

// Soak runs the real daemon on loopback under ingest and queries at once
// for o.Duration, printing throughput and the daemon's RSS every o.Every,
// then stops it and verifies the store it wrote. It returns the number of
// failures (errors and store faults), which must be none.
func Soak(o SoakOptions, out io.Writer) (int64, error) {
	dir, err := os.MkdirTemp("", "cleanmon-soak-")
	if err != nil {
		return 0, err
	}
	defer os.RemoveAll(dir)
	cfg := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(cfg, []byte(benchSite(o.Counters)), 0o600); err != nil {
		return 0, err
	}
	self, err := os.Executable()
	if err != nil {
		return 0, err
	}
	data := filepath.Join(dir, "data")
	srv, err := StartChild(self, "serve", "--config", cfg, "--data", data, "--listen", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	c := &benchClient{url: srv.URL, http: &http.Client{Timeout: 30 * time.Second, Transport: &http.Transport{MaxIdleConnsPerHost: 64}}}
	fmt.Fprintf(out, "cleanmon soak: %s at %d readings/s (%d counters, batches of %d) with queries, on %s\n", o.Duration, o.Rate, o.Counters, o.Batch, machine())
	fmt.Fprintf(out, "%8s %12s %12s %8s %8s %10s %10s %8s %10s\n", "elapsed", "readings/s", "queries/s", "errors", "RSS MB", "heap MB", "mapped MB", "peak MB", "store B/r")

	ctx, cancel := context.WithTimeout(context.Background(), o.Duration)
	defer cancel()
	r := &soakRun{o: o, c: c, ctx: ctx, base: time.Now().UTC().Add(-48 * time.Hour).Truncate(time.Second)}
	r.startWriters()
	r.startQueries()
	posted, queries, ingestErr, queryErr := &r.posted, &r.queries, &r.ingestErr, &r.queryErr
	lastErr, wg := &r.lastErr, &r.wg
	start := time.Now()
	tick := time.NewTicker(o.Every)
	var prevPosted, prevQueries int64
	prev := start
	for done := false; !done; {
		select {
		case <-ctx.Done():
			done = true
		case now := <-tick.C:
			p, q := posted.Load(), queries.Load()
			secs := now.Sub(prev).Seconds()
			st := srv.Status()
			fmt.Fprintf(out, "%8s %12.0f %12.1f %8d %8s %10s %10s %8s %10s\n", now.Sub(start).Round(time.Second), float64(p-prevPosted)/secs,
				float64(q-prevQueries)/secs, ingestErr.Load()+queryErr.Load(), mb(st["VmRSS:"]), mb(st["RssAnon:"]), mb(st["RssFile:"]), mb(st["VmHWM:"]), perReading(data, p))
			prevPosted, prevQueries, prev = p, q, now
		}
	}
	tick.Stop()
	wg.Wait()
	elapsed := time.Since(start)
	peak, cur := srv.RSS()
	failures := ingestErr.Load() + queryErr.Load()
	// A clean stop compacts the head and may rewrite the file without its
	// free pages: it is waited for, and timed, as an operator's would be.
	stopBegin := time.Now()
	stopped := srv.StopWithin(stopLimit)
	stopTook := time.Since(stopBegin).Round(100 * time.Millisecond)
	fmt.Fprintf(out, "done: %d readings in %s (%.0f/s), %d queries, %d ingest errors, %d query errors, RSS %s MB at the end, peak %s MB\n",
		posted.Load(), elapsed.Round(time.Second), float64(posted.Load())/elapsed.Seconds(), queries.Load(), ingestErr.Load(), queryErr.Load(), mb(cur), mb(peak))
	if e, ok := lastErr.Load().(string); ok {
		fmt.Fprintf(out, "last error: %s\n", e)
	}
	if !stopped {
		failures++
		fmt.Fprintf(out, "the daemon did not stop within %s and was killed: the store below is as a crash left it\n", stopLimit)
	} else {
		fmt.Fprintf(out, "store after a clean stop (%s): %s bytes/reading on disk (allocated blocks of the store file)\n", stopTook, perReading(data, posted.Load()))
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

// soakRun is one soak's load: the paced writers, the queriers and what
// they count.
type soakRun struct {
	o    SoakOptions
	c    *benchClient
	ctx  context.Context
	base time.Time

	posted, queries, ingestErr, queryErr, seq atomic.Int64
	lastErr                                   atomic.Value
	wg                                        sync.WaitGroup
}

// startWriters starts the ingest: paced, one batch every batch/rate
// seconds, spread over a few writers so that a slow commit does not stall
// the pace.
func (r *soakRun) startWriters() {
	batchesPerSec := float64(r.o.Rate) / float64(r.o.Batch)
	writers := int(math.Max(2, math.Min(32, math.Ceil(batchesPerSec/10))))
	interval := time.Duration(float64(time.Second) * float64(writers) / batchesPerSec)
	for w := 0; w < writers; w++ {
		r.wg.Add(1)
		go func() {
			defer r.wg.Done()
			t := time.NewTicker(interval)
			defer t.Stop()
			var b bytes.Buffer
			for {
				select {
				case <-r.ctx.Done():
					return
				case <-t.C:
				}
				b.Reset()
				for i := 0; i < r.o.Batch; i++ {
					k := r.seq.Add(1)
					benchReading(&b, 1+int(k%int64(r.o.Counters-1)), r.base.Add(time.Duration(k)*time.Millisecond), k) // one sample per counter per turn, as live counters report
				}
				if err := r.c.post(context.Background(), b.Bytes()); err != nil {
					r.ingestErr.Add(1)
					r.lastErr.Store(err.Error())
					continue
				}
				r.posted.Add(int64(r.o.Batch))
			}
		}()
	}
}

// startQueries starts the queriers: the zone list, one location's recent
// raw readings, a day of minute rollups, the alarms — what pages and
// dashboards ask.
func (r *soakRun) startQueries() {
	for q := 0; q < 2; q++ {
		r.wg.Add(1)
		go func(seed uint64) {
			defer r.wg.Done()
			rng := rand.New(rand.NewPCG(seed, 1))
			for r.ctx.Err() == nil {
				loc := 1 + rng.IntN(r.o.Counters-1)
				now := r.base.Add(time.Duration(r.seq.Load()) * time.Millisecond)
				paths := []string{
					"/api/v1/zones",
					fmt.Sprintf("/api/v1/zones/assembly/readings?location=loc-%d&from=%s&to=%s", loc, now.Add(-10*time.Minute).Format(time.RFC3339), now.Format(time.RFC3339)),
					fmt.Sprintf("/api/v1/zones/assembly/readings?location=loc-%d&step=1m&from=%s&to=%s", loc, now.Add(-24*time.Hour).Format(time.RFC3339), now.Format(time.RFC3339)),
					"/api/v1/alarms",
				}
				for _, p := range paths {
					if _, _, err := r.c.timeQuery(r.c.url + p); err != nil {
						r.queryErr.Add(1)
						r.lastErr.Store(err.Error())
					} else {
						r.queries.Add(1)
					}
				}
				select {
				case <-r.ctx.Done():
				case <-time.After(100 * time.Millisecond):
				}
			}
		}(uint64(q))
	}
}

// perReading is the store's growth per reading so far: the blocks its file
// has allocated over the readings posted ("—" before the first).
func perReading(data string, readings int64) string {
	n, err := store.AllocatedBytes(data)
	if err != nil || readings == 0 {
		return "—"
	}
	return fmt.Sprintf("%.1f", float64(n)/float64(readings))
}
