package collector

import (
	"bufio"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// socatPair links two pseudo-terminals with socat (Debian socat), as a
// null-modem cable would two serial ports, and returns their paths. It
// skips when socat is missing unless CLEANMON_REQUIRE_TOOLS is set.
func socatPair(t *testing.T) (ours, theirs string) {
	t.Helper()
	bin, err := exec.LookPath("socat")
	if err != nil {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatal("socat not found (Debian: socat) and CLEANMON_REQUIRE_TOOLS is set")
		}
		t.Skip("socat not found (apt-get install socat)")
	}
	dir := t.TempDir()
	ours, theirs = filepath.Join(dir, "cleanmon-tty"), filepath.Join(dir, "sensor-tty")
	cmd := exec.Command(bin, "pty,raw,echo=0,link="+ours, "pty,raw,echo=0,link="+theirs)
	var out strings.Builder
	cmd.Stderr = &out
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cmd.Process.Kill(); cmd.Wait() })
	waitFor(t, 10*time.Second, "socat's pseudo-terminals", func() bool {
		_, e1 := os.Stat(ours)
		_, e2 := os.Stat(theirs)
		return e1 == nil && e2 == nil
	})
	return ours, theirs
}

// startRTUSensors serves testdata/modbus-rtu-sensors.py on port.
func startRTUSensors(t *testing.T, py, port string, args ...string) {
	t.Helper()
	cmd := exec.Command(py, append([]string{"testdata/modbus-rtu-sensors.py", "--port", port}, args...)...)
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
	ready := make(chan bool, 1)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			if strings.HasPrefix(sc.Text(), "serving ") {
				ready <- true
			}
		}
		close(ready)
	}()
	select {
	case ok := <-ready:
		if !ok {
			t.Fatalf("pymodbus serial server exited: %s", stderr.String())
		}
	case <-time.After(15 * time.Second):
		t.Fatalf("pymodbus serial server not ready within 15 s: %s", stderr.String())
	}
}

// Two environment sensors sharing one serial line, polled over Modbus RTU
// from an independent implementation (pymodbus) at the other end of a
// socat pseudo-terminal pair, at 8N2 (a Linux pseudo-terminal refuses
// parity settings once open, so parity is covered by the address tests
// only); a third unit on the line that never
// answers is a fault and delays the others by no more than its timeouts.
func TestModbusRTUAgainstPymodbus(t *testing.T) {
	py := pymodbusPython(t)
	ours, theirs := socatPair(t)
	startRTUSensors(t, py, theirs, "--baud", "38400", "--parity", "N", "--stop", "2")

	addr := "rtu://" + ours + "?baud=38400&parity=none"
	poll := model.Duration(200 * time.Millisecond)
	es := []EnvironmentSensorConfig{
		{ID: "th-rtu", Zone: "assembly", Kind: EnvTemperatureHumidity, Interval: model.Duration(time.Second), Modbus: &ModbusSource{
			Address: addr, Unit: ip(7), Poll: poll,
			TemperatureC: &ModbusRegister{Addr: ip(0), Signed: true, Scale: 0.01},
			HumidityPct:  &ModbusRegister{Addr: ip(1), Scale: 0.01},
			Status:       &ModbusStatus{Addr: ip(2), Values: map[string]string{"0": StatusOK}},
		}},
		{ID: "av-rtu", Zone: "coating-hood", Kind: EnvAirVelocity, Interval: model.Duration(time.Second), Modbus: &ModbusSource{
			Address: addr, Unit: ip(8), Poll: poll,
			VelocityMS: &ModbusRegister{Addr: ip(0), Type: RegHolding, Scale: 0.001},
		}},
		{ID: "th-silent", Zone: "assembly", Kind: EnvTemperature, Interval: model.Duration(time.Second), Modbus: &ModbusSource{
			Address: addr, Unit: ip(9), Poll: poll, Timeout: model.Duration(150 * time.Millisecond),
			TemperatureC: &ModbusRegister{Addr: ip(0), Signed: true, Scale: 0.01},
		}},
	}
	base, err := NewRegistry(nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	reg, err := base.WithEnvironment(es, EnvironmentBounds{})
	if err != nil {
		t.Fatal(err)
	}
	esink, events := newMemEnvSink(), &eventLog{}
	env := NewEnvironmentIngest(reg, esink, IngestOptions{})
	p, err := NewPoller(reg, NewIngest(reg, newMemSink(), IngestOptions{}), PollerOptions{Events: events, Environment: env})
	if err != nil {
		t.Fatal(err)
	}
	count := func(id string) (n int, last Environment) {
		esink.mu.Lock()
		defer esink.mu.Unlock()
		for _, e := range esink.rows {
			if e.Sensor == id {
				n++
				last = e
			}
		}
		return n, last
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { defer close(done); p.Run(ctx) }()
	waitFor(t, 20*time.Second, "3 samples of each answering sensor", func() bool {
		a, _ := count("th-rtu")
		b, _ := count("av-rtu")
		return a >= 3 && b >= 3
	})
	waitFor(t, 10*time.Second, "a fault of the silent unit", func() bool { return events.has("fault th-silent " + ReasonTimeout) })
	cancel()
	select {
	case <-done:
	case <-time.After(10 * time.Second):
		t.Fatal("poller did not stop")
	}
	// The script's registers: 2137 × 0.01 °C, 4480 × 0.01 %, 452 × 0.001 m/s.
	_, th := count("th-rtu")
	if !th.HasTemperature || abs(th.TemperatureC-21.37) > 1e-9 || !th.HasHumidity || abs(th.HumidityPct-44.8) > 1e-9 || th.HasVelocity {
		t.Errorf("th-rtu sample %+v, want 21.37 °C and 44.8 %%", th)
	}
	_, av := count("av-rtu")
	if !av.HasVelocity || abs(av.VelocityMS-0.452) > 1e-9 || av.HasTemperature {
		t.Errorf("av-rtu sample %+v, want 0.452 m/s", av)
	}
	if n, _ := count("th-silent"); n != 0 {
		t.Errorf("the silent unit stored %d samples", n)
	}
}

func TestParseModbusAddress(t *testing.T) {
	cases := []struct {
		in   string
		want ModbusAddress
		err  string // part of the error, "" = none
	}{
		{"10.0.4.21:502", ModbusAddress{Host: "10.0.4.21:502"}, ""},
		{"tcp://gw.local:1502", ModbusAddress{Host: "gw.local:1502"}, ""},
		// Modbus over Serial Line V1.02 defaults: even parity, 1 stop bit;
		// 2 stop bits without parity (from memory).
		{"rtu:///dev/ttyUSB0", ModbusAddress{Serial: true, Port: "/dev/ttyUSB0", Baud: 19200, Parity: "even", StopBits: 1}, ""},
		{"rtu:///dev/ttyS1?baud=9600&parity=none", ModbusAddress{Serial: true, Port: "/dev/ttyS1", Baud: 9600, Parity: "none", StopBits: 2}, ""},
		{"rtu:///dev/ttyS1?baud=115200&parity=O&stop=2", ModbusAddress{Serial: true, Port: "/dev/ttyS1", Baud: 115200, Parity: "odd", StopBits: 2}, ""},
		{"", ModbusAddress{}, "missing"},
		{"10.0.4.21", ModbusAddress{}, "not host:port"},
		{"10.0.4.21:0", ModbusAddress{}, "1–65535"},
		{"udp://x:502", ModbusAddress{}, "unknown scheme"},
		{"rtu://dev/ttyUSB0", ModbusAddress{}, "three slashes"},
		{"rtu://", ModbusAddress{}, "path is missing"},
		{"rtu:///dev/ttyUSB0?baud=19201", ModbusAddress{}, "baud"},
		{"rtu:///dev/ttyUSB0?parity=mark", ModbusAddress{}, "parity"},
		{"rtu:///dev/ttyUSB0?stop=3", ModbusAddress{}, "stop bits"},
		{"rtu:///dev/ttyUSB0?speed=9600", ModbusAddress{}, "unknown setting"},
		{"rtu:///dev/ttyUSB0?baud=9600&baud=19200", ModbusAddress{}, "twice"},
	}
	for _, c := range cases {
		got, err := ParseModbusAddress(c.in)
		switch {
		case c.err == "" && err != nil:
			t.Errorf("%q: %v", c.in, err)
		case c.err != "" && (err == nil || !strings.Contains(err.Error(), c.err)):
			t.Errorf("%q: error %v, want one saying %q", c.in, err, c.err)
		case c.err == "" && got != c.want:
			t.Errorf("%q: %+v, want %+v", c.in, got, c.want)
		}
	}
}

// Devices that share a serial line must agree on its settings.
func TestPollerRefusesDisagreeingSerialLine(t *testing.T) {
	es := []EnvironmentSensorConfig{
		{ID: "a", Zone: "z", Kind: EnvAirVelocity, Modbus: &ModbusSource{Address: "rtu:///dev/ttyX?baud=9600", VelocityMS: &ModbusRegister{Addr: ip(0)}}},
		{ID: "b", Zone: "z", Kind: EnvAirVelocity, Modbus: &ModbusSource{Address: "rtu:///dev/ttyX?baud=19200", VelocityMS: &ModbusRegister{Addr: ip(0)}}},
	}
	base, _ := NewRegistry(nil, nil)
	reg, err := base.WithEnvironment(es, EnvironmentBounds{})
	if err != nil {
		t.Fatal(err)
	}
	env := NewEnvironmentIngest(reg, newMemEnvSink(), IngestOptions{})
	if _, err := NewPoller(reg, NewIngest(reg, newMemSink(), IngestOptions{}), PollerOptions{Environment: env}); err == nil || !strings.Contains(err.Error(), "serial line /dev/ttyX") {
		t.Errorf("error %v, want one naming the serial line", err)
	}
	if _, err := NewPoller(reg, NewIngest(reg, newMemSink(), IngestOptions{}), PollerOptions{}); err == nil || !strings.Contains(err.Error(), "PollerOptions.Environment") {
		t.Errorf("error %v, want one asking for an environment submitter", err)
	}
}
