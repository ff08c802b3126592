package peers

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// TestReadingsAreWhatPeersGet: a caller that feeds cleanmon from Readings
// with Run's Options sends exactly the readings the peers were sent.
func TestReadingsAreWhatPeersGet(t *testing.T) {
	o := Options{Counters: 5, Minutes: 40, Batch: 7, Year: true, YearMinutes: 130, Seed: 3, End: time.Date(2026, 1, 2, 3, 4, 59, 0, time.UTC)}.withDefaults()
	w := buildWorkload(o)
	var got []byte
	add := func(r Reading) { got = appendLine(got, reading{counter: r.Counter, t: r.Time.Unix(), n: r.Counts}) }
	if err := Readings(o, add, add); err != nil {
		t.Fatal(err)
	}
	want := append(bytes.Join(w.live, nil), bytes.Join(w.year, nil)...)
	if !bytes.Equal(got, want) {
		t.Fatalf("Readings and the posted batches differ (%d and %d bytes)", len(got), len(want))
	}
	if !strings.HasSuffix(string(w.year[len(w.year)-1]), " "+itoa64(o.End.Add(-time.Minute).Unix())+"\n") {
		t.Errorf("the year does not end a minute before End (%s): %q", o.End, w.year[len(w.year)-1])
	}
	var again []byte
	add2 := func(r Reading) { again = appendLine(again, reading{counter: r.Counter, t: r.Time.Unix(), n: r.Counts}) }
	_ = Readings(o, add2, add2)
	if !bytes.Equal(got, again) {
		t.Error("the same Options gave different readings")
	}
}

func TestRatio(t *testing.T) {
	r := Results{Peers: []Figures{
		{Peer: nameInflux, ReadingsPerSecond: 100000, BytesPerReading: 40, YearRaw: 2 * time.Second, YearHourly: 50 * time.Millisecond},
		{Peer: nameVictoria, ReadingsPerSecond: 200000, BytesPerReading: 8}, // no year measured
	}}
	for _, c := range []struct {
		peer string
		f    Figure
		ours float64
		want float64
		err  error
	}{
		{nameInflux, ReadingsPerSecond, 150000, 1.5, nil},
		{nameInflux, BytesPerReading, 10, 0.25, nil},
		{nameInflux, YearRawSeconds, 1, 0.5, nil},
		{nameInflux, YearHourlySeconds, 0.015, 0.3, nil},
		{nameVictoria, BytesPerReading, 16, 2, nil},
		{nameVictoria, YearRawSeconds, 1, 0, ErrNoFigure},
		{"prometheus", ReadingsPerSecond, 1, 0, ErrNoFigure},
		{nameInflux, Figure(99), 1, 0, ErrNoFigure},
	} {
		got, err := r.Ratio(c.peer, c.f, c.ours)
		if !errors.Is(err, c.err) || math.Abs(got-c.want) > 1e-12 {
			t.Errorf("Ratio(%s, %d, %v) = %v, %v; want %v, %v", c.peer, c.f, c.ours, got, err, c.want, c.err)
		}
	}
	var b bytes.Buffer
	if err := r.WriteTable(&b, map[Figure]float64{ReadingsPerSecond: 150000}); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, want := range []string{"1.50×", "0.75×", "—", "victoria-metrics acknowledges before"} {
		if !strings.Contains(out, want) {
			t.Errorf("table lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, " 0.000 ") {
		t.Errorf("an unmeasured figure shows as zero:\n%s", out)
	}
}

// TestPeerThatFails: a binary that exits at once, or one that never
// answers, ends Run with an error naming it; nothing is left behind.
func TestPeerThatFails(t *testing.T) {
	silent := filepath.Join(t.TempDir(), "silent")
	if err := os.WriteFile(silent, []byte("#!/bin/sh\nexec sleep 60\n"), 0o755); err != nil {
		t.Fatal(err)
	}
	falseBin, err := exec.LookPath("false")
	if err != nil {
		t.Skip("no false(1) on this machine")
	}
	for _, c := range []struct {
		name string
		o    Options
		want error
	}{
		{"exits", Options{Influxd: falseBin, Only: []string{nameInflux}}, ErrExited},
		{"never ready", Options{VictoriaMetrics: silent, Only: []string{nameVictoria}}, ErrNotReady},
		{"absent", Options{Influxd: filepath.Join(t.TempDir(), "no-such-influxd"), Only: []string{nameInflux}}, ErrMissing},
	} {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			c.o.Dir, c.o.Counters, c.o.Minutes, c.o.StartTimeout = dir, 2, 2, 700*time.Millisecond
			t0 := time.Now()
			_, err := Run(context.Background(), c.o, &bytes.Buffer{})
			if !errors.Is(err, c.want) {
				t.Fatalf("Run: %v, want %v", err, c.want)
			}
			if d := time.Since(t0); d > 15*time.Second {
				t.Errorf("Run took %s to give up", d)
			}
			if left, _ := filepath.Glob(filepath.Join(dir, "*")); len(left) > 0 {
				t.Errorf("left behind: %v", left)
			}
			if out, _ := exec.Command("pgrep", "-f", dir).Output(); len(bytes.TrimSpace(out)) > 0 {
				t.Errorf("processes still running on %s: %s", dir, out)
			}
		})
	}
}

// TestStopAfterCrash: a peer that ended on its own before the clean stop
// is an error, so its files are not measured as if it had stopped cleanly.
func TestStopAfterCrash(t *testing.T) {
	sh, err := exec.LookPath("sh")
	if err != nil {
		t.Skip("no sh")
	}
	p, err := startProcess(context.Background(), sh, []string{"-c", "exit 3"}, filepath.Join(t.TempDir(), "log"))
	if err != nil {
		t.Fatal(err)
	}
	select {
	case <-p.done:
	case <-time.After(10 * time.Second):
		t.Fatal("sh -c 'exit 3' did not end")
	}
	if err := p.stop(time.Second); !errors.Is(err, ErrExited) {
		t.Fatalf("stop after the process ended: %v, want ErrExited", err)
	}
	q, err := startProcess(context.Background(), sh, []string{"-c", "trap '' TERM; i=0; while [ $i -lt 600 ]; do sleep 0.05; i=$((i+1)); done"}, filepath.Join(t.TempDir(), "log"))
	if err != nil {
		t.Fatal(err)
	}
	time.Sleep(100 * time.Millisecond)
	if err := q.stop(300 * time.Millisecond); !errors.Is(err, ErrStop) {
		t.Fatalf("stop of a process ignoring SIGTERM: %v, want ErrStop", err)
	}
	if !q.exited() {
		t.Fatal("the process ignoring SIGTERM was not killed")
	}
}
