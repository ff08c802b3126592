package collector

import (
	"bufio"
	"context"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"go.yaml.in/yaml/v3"
)

// pymodbusPython returns a python3 that can import pymodbus, or skips the
// test: locally the module may be missing; CI installs the Debian package
// python3-pymodbus, which lands in the system python.
func pymodbusPython(t *testing.T) string {
	t.Helper()
	cands := []string{"/usr/bin/python3"}
	if p, err := exec.LookPath("python3"); err == nil {
		cands = append(cands, p)
	}
	for _, py := range cands {
		if exec.Command(py, "-c", "import pymodbus").Run() == nil {
			return py
		}
	}
	if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
		t.Fatal("no python3 with pymodbus (Debian: python3-pymodbus) and CLEANMON_REQUIRE_TOOLS is set")
	}
	t.Skip("no python3 with pymodbus (apt-get install python3-pymodbus)")
	return ""
}

// startPymodbus runs testdata/modbus-counter.py and returns the address
// it listens on; the server is killed at the end of the test.
func startPymodbus(t *testing.T, py string, args ...string) string {
	t.Helper()
	cmd := exec.Command(py, append([]string{"../testdata/modbus-counter.py", "--port", "0"}, args...)...)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	var stderr strings.Builder
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cmd.Process.Kill(); cmd.Wait() })
	addr := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if a, ok := strings.CutPrefix(sc.Text(), "listening "); ok {
				addr <- a
			}
		}
		close(addr)
	}()
	select {
	case a, ok := <-addr:
		if !ok {
			t.Fatalf("pymodbus server exited: %s", stderr.String())
		}
		return a
	case <-time.After(15 * time.Second):
		t.Fatalf("pymodbus server did not listen within 15 s: %s", stderr.String())
	}
	return ""
}

// loadModbusExample reads the counters of testdata/modbus-counter.yaml.
func loadModbusExample(t *testing.T) []Counter {
	t.Helper()
	b, err := os.ReadFile("../testdata/modbus-counter.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Counters []Counter `yaml:"counters"`
	}
	if err := yaml.Unmarshal(b, &doc); err != nil {
		t.Fatal(err)
	}
	return doc.Counters
}

// The poller against an independent Modbus implementation: 32-bit values
// in both word orders, input and holding registers, and an exception for
// an address the server does not have. The server's values are functions
// of the sample number n (see the script), so each stored reading proves
// its registers were decoded right.
func TestModbusPollerAgainstPymodbus(t *testing.T) {
	py := pymodbusPython(t)
	for _, order := range []string{WordHighFirst, WordLowFirst} {
		t.Run(order, func(t *testing.T) {
			addr := startPymodbus(t, py, "--word-order", order)
			cs := loadModbusExample(t)
			good := cs[0]
			good.Modbus.Address, good.Modbus.WordOrder = addr, order
			// A second counter on the same server whose sample number sits
			// at an address the server lacks.
			bad := good
			bad.ID, bad.Location = "pc-mb-bad", "asm-mb-bad"
			m := *good.Modbus
			m.Sample = r32(40)
			bad.Modbus = &m
			reg, err := NewRegistry([]Counter{good, bad}, nil)
			if err != nil {
				t.Fatal(err)
			}
			sink, events, prom := newMemSink(), &eventLog{}, prometheus.NewRegistry()
			in := NewIngest(reg, sink, IngestOptions{})
			p, err := NewPoller(reg, in, PollerOptions{Events: events, Metrics: prom})
			if err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan struct{})
			go func() { defer close(done); p.Run(ctx) }()
			r := &rig{t: t, sink: sink, poller: p}
			// The server finishes a sample a second.
			waitFor(t, 15*time.Second, "4 samples from pymodbus", func() bool { return len(r.readings(good.ID)) >= 4 })
			waitFor(t, 5*time.Second, "exception from pymodbus", func() bool { return events.has("fault pc-mb-bad " + ReasonException) })
			cancel()
			select {
			case <-done:
			case <-time.After(10 * time.Second):
				t.Fatal("poller did not stop")
			}

			got := r.readings(good.ID)
			prev := int64(-1)
			for i, rd := range got {
				// Counts as the script makes them for sample n:
				// ≥0.3 µm 100000 + 13n, ≥0.5 µm 70000 + 5n, ≥5 µm n mod 50.
				n := (int64(rd.Counts[0]) - 100000) / 13
				if n < 0 || uint64(100000+13*n) != rd.Counts[0] || uint64(70000+5*n) != rd.Counts[1] || uint64(n%50) != rd.Counts[2] {
					t.Errorf("reading %d: counts %v are not those of any sample", i, rd.Counts)
					continue
				}
				if n <= prev {
					t.Errorf("reading %d is sample %d, after sample %d", i, n, prev)
				}
				prev = n
				wantStatus := StatusOK
				if n%10 == 0 {
					wantStatus = StatusWarning
				}
				if rd.Status != wantStatus || abs(rd.FlowLPM-28.3) > 1e-9 || rd.SampleSeconds != 1 || abs(rd.VolumeL-0.4717) > 1e-9 {
					t.Errorf("sample %d: status %s (want %s), flow %g, sample_s %g, volume %g", n, rd.Status, wantStatus, rd.FlowLPM, rd.SampleSeconds, rd.VolumeL)
				}
			}
			if a := testutil.ToFloat64(p.metrics.sampled.WithLabelValues(good.ID, sampleAccepted)); int(a) != len(got) {
				t.Errorf("samples metric %g, stored %d", a, len(got))
			}
			var badSt DeviceStatus
			for _, st := range p.Devices() {
				if st.ID == bad.ID {
					badSt = st
				}
			}
			if badSt.State != DeviceFault || !strings.Contains(badSt.LastError, "illegal data address") {
				t.Errorf("bad counter: %+v, want a fault naming the illegal data address (Modbus exception 2)", badSt)
			}
			if len(r.readings(bad.ID)) != 0 {
				t.Errorf("the bad counter stored readings")
			}
		})
	}
}
