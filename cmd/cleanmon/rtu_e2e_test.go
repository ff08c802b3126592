package main

import (
	"bufio"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// serialPair links two pseudo-terminals with socat, as a null-modem
// cable links two serial ports, and returns their paths.
func serialPair(t *testing.T) (daemonEnd, deviceEnd string) {
	t.Helper()
	bin := outsideTool(t, "socat", "socat")
	dir := t.TempDir()
	daemonEnd, deviceEnd = filepath.Join(dir, "cleanmon-tty"), filepath.Join(dir, "device-tty")
	cmd := exec.Command(bin, "pty,raw,echo=0,link="+daemonEnd, "pty,raw,echo=0,link="+deviceEnd)
	var out strings.Builder
	cmd.Stderr = &out
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cmd.Process.Kill(); cmd.Wait() })
	waitUntil(t, "socat's pseudo-terminals", 10*time.Second, func() bool {
		_, e1 := os.Stat(daemonEnd)
		_, e2 := os.Stat(deviceEnd)
		return e1 == nil && e2 == nil
	})
	return daemonEnd, deviceEnd
}

// TestServePollsSerialModbus runs the real daemon against two
// environment sensors that pymodbus, an independent implementation,
// serves as Modbus RTU units 7 and 8 on the far end of a socat
// pseudo-terminal pair (collector/testdata/modbus-rtu-sensors.py): the
// daemon polls them over the serial line and shows their values.
func TestServePollsSerialModbus(t *testing.T) {
	py := modbusTestPython(t)
	ours, theirs := serialPair(t)
	cmd := exec.Command(py, "../../collector/testdata/modbus-rtu-sensors.py", "--port", theirs, "--baud", "38400", "--parity", "N", "--stop", "2")
	stdout, err := cmd.StdoutPipe()
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
		sc := bufio.NewScanner(stdout)
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
			t.Fatalf("pymodbus serial device exited: %s", stderr.String())
		}
	case <-time.After(15 * time.Second):
		t.Fatalf("pymodbus serial device not ready in 15 s: %s", stderr.String())
	}

	cfg := crashConfig(t, 1)
	b, err := os.ReadFile(cfg)
	if err != nil {
		t.Fatal(err)
	}
	addr := "rtu://" + ours + "?baud=38400&parity=none"
	extra := fmt.Sprintf(`environment:
  - id: th-asm
    zone: assembly
    kind: temperature-humidity
    interval: "1s"
    temperature_c: {action: {low: 20, high: 22}}
    humidity_pct: {action: {low: 40, high: 50}}
    modbus:
      address: %[1]q
      unit: 7
      poll: "500ms"
      temperature_c: {addr: 0, signed: true, scale: 0.01}
      humidity_pct: {addr: 1, scale: 0.01}
  - id: av-hood
    zone: assembly
    kind: air-velocity
    interval: "1s"
    velocity_m_s: {action: {low: 0.36, high: 0.54}}
    modbus:
      address: %[1]q
      unit: 8
      poll: "500ms"
      velocity_m_s: {addr: 0, type: holding, scale: 0.001}
`, addr)
	if err := os.WriteFile(cfg, append(b, extra...), 0o600); err != nil {
		t.Fatal(err)
	}
	d := startDaemon(t, "--config", cfg, "--data", t.TempDir())
	type channel struct {
		Value *float64 `json:"value"`
		State string   `json:"state"`
	}
	var env []struct {
		ID       string             `json:"id"`
		Channels map[string]channel `json:"channels"`
	}
	got := func(id, ch string) (float64, bool) {
		for _, e := range env {
			if c, ok := e.Channels[ch]; e.ID == id && ok && c.Value != nil {
				return *c.Value, c.State == "ok"
			}
		}
		return 0, false
	}
	waitUntil(t, "both serial sensors polled", 30*time.Second, func() bool {
		getJSON(t, d, "/api/v1/environment", &env)
		_, a := got("th-asm", "humidity_pct")
		_, b := got("av-hood", "velocity_m_s")
		return a && b
	})
	// The registers the device serves (see the script): 2137 × 0.01 °C,
	// 4480 × 0.01 %, 452 × 0.001 m/s.
	for _, w := range []struct {
		id, ch string
		want   float64
	}{{"th-asm", "temperature_c", 21.37}, {"th-asm", "humidity_pct", 44.8}, {"av-hood", "velocity_m_s", 0.452}} {
		if v, _ := got(w.id, w.ch); v < w.want-1e-9 || v > w.want+1e-9 {
			t.Errorf("%s %s = %g, want %g", w.id, w.ch, v, w.want)
		}
	}
}
