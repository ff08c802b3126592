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
	out, err := exec.Command(cleanmonBinary(t), "bench", "--counters", "10", "--phase", "1s", "--rate", "50", "--history=false").CombinedOutput()
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
	if !strings.Contains(s, " 0 ingest errors, 0 query errors") || !strings.Contains(s, "store verified: 0 faults") {
		t.Errorf("soak report:\n%s", s)
	}
}
