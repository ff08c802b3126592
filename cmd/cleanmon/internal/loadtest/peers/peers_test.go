package peers

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// peerTools skips the test when a peer binary is missing, naming the
// Debian package, unless CLEANMON_REQUIRE_TOOLS is set (CI installs them).
func peerTools(t *testing.T) {
	t.Helper()
	if missing := Available(); len(missing) > 0 {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatalf("missing %s and CLEANMON_REQUIRE_TOOLS is set", strings.Join(missing, ", "))
		}
		t.Skipf("missing %s: the peer measurement did not run", strings.Join(missing, ", "))
	}
}

// TestRunSmall drives both real peers at a small size. Run itself fails
// unless each peer's stored count equals the readings sent; the test
// checks the figures and that nothing is left behind.
func TestRunSmall(t *testing.T) {
	peerTools(t)
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	dir := t.TempDir()
	var log bytes.Buffer
	o := Options{Counters: 20, Minutes: 100, Batch: 150, Writers: 4, Year: true, YearMinutes: 3 * 24 * 60, Dir: dir}
	res, err := Run(ctx, o, &log)
	if err != nil {
		t.Fatalf("Run: %v\nlog:\n%s", err, log.String())
	}
	if len(res.Peers) != 2 {
		t.Fatalf("%d peers measured, want 2", len(res.Peers))
	}
	for _, p := range res.Peers {
		if p.Readings != 2000 || p.YearReadings != 3*24*60 || p.YearRawRows != 3*24*60 {
			t.Errorf("%s: readings %d, year %d, raw rows %d; want 2000, 4320, 4320", p.Peer, p.Readings, p.YearReadings, p.YearRawRows)
		}
		if p.YearHourlyRows < 72 || p.YearHourlyRows > 73 {
			t.Errorf("%s: %d hourly rows for 72 hours", p.Peer, p.YearHourlyRows)
		}
		for _, f := range []Figure{ReadingsPerSecond, BytesPerReading, YearRawSeconds, YearHourlySeconds} {
			if v, err := res.Get(p.Peer, f); err != nil || v <= 0 {
				t.Errorf("%s figure %d: %v, %v", p.Peer, f, v, err)
			}
		}
		// Not "more with the year than without": VictoriaMetrics merges
		// its parts after a restart and may then use less.
		if p.BytesOnDiskAll <= 0 || p.ApparentBytes <= 0 {
			t.Errorf("%s: %d bytes with the year, %d apparent without", p.Peer, p.BytesOnDiskAll, p.ApparentBytes)
		}
	}
	if inf, _ := res.Get(nameInflux, ReadingsPerSecond); !res.Peers[0].Durable || res.Peers[1].Durable || inf <= 0 {
		t.Errorf("durability flags %v %v", res.Peers[0].Durable, res.Peers[1].Durable)
	}
	left, _ := filepath.Glob(filepath.Join(dir, "*"))
	if len(left) > 0 {
		t.Errorf("temporary directories left behind: %v", left)
	}
	var table bytes.Buffer
	if err := res.WriteTable(&table, map[Figure]float64{ReadingsPerSecond: 1}); err != nil {
		t.Fatal(err)
	}
	t.Logf("%s\n%s", log.String(), table.String())
}

// TestRunCancelled cancels while the first peer is being written to:
// Run returns the context's error and no peer process or directory stays.
func TestRunCancelled(t *testing.T) {
	peerTools(t)
	dir := t.TempDir()
	ctx, cancel := context.WithCancel(context.Background())
	pr, pw, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	defer pr.Close()
	go func() { // cancel once the peer has started
		buf := make([]byte, 4096)
		var seen []byte
		for {
			n, err := pr.Read(buf)
			seen = append(seen, buf[:n]...)
			if bytes.Contains(seen, []byte("started")) || err != nil {
				cancel()
				return
			}
		}
	}()
	done := make(chan error, 1)
	go func() {
		_, err := Run(ctx, Options{Counters: 200, Minutes: 2000, Only: []string{nameInflux}, Dir: dir}, pw)
		done <- err
	}()
	select {
	case err = <-done:
	case <-time.After(2 * time.Minute):
		t.Fatal("Run did not return within 2 minutes of the cancel")
	}
	pw.Close()
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("Run after cancel: %v, want context.Canceled", err)
	}
	left, _ := filepath.Glob(filepath.Join(dir, "*"))
	if len(left) > 0 {
		t.Errorf("temporary directories left behind: %v", left)
	}
	if out, _ := exec.Command("pgrep", "-f", dir).Output(); len(bytes.TrimSpace(out)) > 0 {
		t.Errorf("peer processes still running on %s: %s", dir, out)
	}
}

func TestOptionsChecked(t *testing.T) {
	for _, o := range []Options{
		{Counters: -1},
		{Batch: -5},
		{Year: true, YearMinutes: 60},
		{Only: []string{"prometheus"}},
	} {
		_, err := Run(context.Background(), o, &bytes.Buffer{})
		if !errors.Is(err, ErrOptions) {
			t.Errorf("%+v: %v, want ErrOptions", o, err)
		}
	}
}

// TestWorkloadShape checks the bytes every peer receives: batch sizes,
// time order across counters, and cumulative channels never rising with
// particle size.
func TestWorkloadShape(t *testing.T) {
	end := time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)
	w := buildWorkload(Options{Counters: 7, Minutes: 300, Batch: 1000, Year: true, YearMinutes: 2500, Seed: 1, End: end}.withDefaults())
	if w.liveCount != 2100 || len(w.live) != 3 || lineCount(w.live[0]) != 1000 || lineCount(w.live[2]) != 100 {
		t.Fatalf("live: %d readings in %d batches", w.liveCount, len(w.live))
	}
	if w.yearCount != 2500 || len(w.year) != 3 || lineCount(w.year[2]) != 500 || w.yearTo != end.Unix() {
		t.Fatalf("year: %d readings in %d batches, to %d", w.yearCount, len(w.year), w.yearTo)
	}
	last := int64(0)
	for _, b := range w.live {
		for _, l := range strings.Split(strings.TrimSpace(string(b)), "\n") {
			var c, ts int64
			var n [4]int64
			if _, err := fmtSscan(l, &c, &n, &ts); err != nil {
				t.Fatalf("line %q: %v", l, err)
			}
			if ts < last {
				t.Fatalf("line %q goes back in time", l)
			}
			last = ts
			if !(n[0] >= n[1] && n[1] >= n[2] && n[2] >= n[3] && n[3] >= 0 && n[0] > 0) {
				t.Fatalf("line %q: counts rise with size", l)
			}
		}
	}
	if last != w.liveTo || w.liveTo != end.Unix()-60 {
		t.Errorf("last live reading at %d, want %d", last, end.Unix()-60)
	}
}

// fmtSscan reads one line-protocol line as appendLine writes it.
func fmtSscan(l string, c *int64, n *[4]int64, ts *int64) (int, error) {
	return fmt.Sscanf(l, "particles,counter=pc-%d um0_3=%di,um0_5=%di,um1=%di,um5=%di %d", c, &n[0], &n[1], &n[2], &n[3], ts)
}
