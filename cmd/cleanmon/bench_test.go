package main

import (
	"os/exec"
	"strings"
	"testing"
)

// The bench and soak commands drive the real binary; these runs are short
// and check that they work and report, not how fast anything is (the
// figures are recorded in the README from full runs).
func TestBenchCommandRuns(t *testing.T) {
	out, err := exec.Command(cleanmonBinary(t), "bench", "--counters", "5", "--minutes", "60", "--year-minutes", "180", "--batch", "50").CombinedOutput()
	if err != nil {
		t.Fatalf("bench: %v\n%s", err, out)
	}
	for _, want := range []string{"readings/s durable", "bytes/reading (allocated blocks", "after cleanmon compact", "verify: ", "catch-up shape", "raw 180 rows", "hourly "} {
		if !strings.Contains(string(out), want) {
			t.Errorf("bench output lacks %q:\n%s", want, out)
		}
	}
}

// bench --peers runs InfluxDB and VictoriaMetrics on the same readings in
// the same run and prints cleanmon's figures beside theirs with ratios.
func TestBenchPeersRuns(t *testing.T) {
	outsideTool(t, "influxd", "influxdb")
	outsideTool(t, "victoria-metrics", "victoria-metrics")
	out, err := exec.Command(cleanmonBinary(t), "bench", "--peers", "--counters", "4", "--minutes", "30", "--year-minutes", "120", "--batch", "40").CombinedOutput()
	if err != nil {
		t.Fatalf("bench --peers: %v\n%s", err, out)
	}
	for _, want := range []string{"cleanmon", "influxdb", "victoria-metrics", "ratio", "bytes/reading on disk, clean stop", "year hourly, s", "×"} {
		if !strings.Contains(string(out), want) {
			t.Errorf("bench --peers output lacks %q:\n%s", want, out)
		}
	}
}

// The phase-timed measurement is kept behind --latency.
func TestBenchLatencyRuns(t *testing.T) {
	out, err := exec.Command(cleanmonBinary(t), "bench", "--latency", "--counters", "10", "--phase", "1s", "--rate", "50", "--history=false").CombinedOutput()
	if err != nil {
		t.Fatalf("bench: %v\n%s", err, out)
	}
	for _, want := range []string{"readings/s durable", "raw bbolt baseline", "daemon/baseline", "p99", "peak"} {
		if !strings.Contains(string(out), want) {
			t.Errorf("bench output lacks %q:\n%s", want, out)
		}
	}
}

func TestSoakCommandRuns(t *testing.T) {
	out, err := exec.Command(cleanmonBinary(t), "soak", "--duration", "3s", "--every", "1s", "--rate", "500", "--counters", "20").CombinedOutput()
	if err != nil {
		t.Fatalf("soak: %v\n%s", err, out)
	}
	s := string(out)
	if !strings.Contains(s, " 0 ingest errors, 0 query errors") || !strings.Contains(s, "store verified: 0 faults") || !strings.Contains(s, "store B/r") || !strings.Contains(s, "bytes/reading on disk") {
		t.Errorf("soak report:\n%s", s)
	}
}
