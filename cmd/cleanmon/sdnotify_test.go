package main

import (
	"encoding/json"
	"net"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/loadtest"
)

// TestServeNotifiesServiceManager runs the real daemon under a fake
// service manager: a unix datagram socket named by $NOTIFY_SOCKET, with
// a watchdog period in $WATCHDOG_USEC, as systemd sets them for
// Type=notify and WatchdogSec=. The daemon says READY=1 once it serves,
// feeds the watchdog at half its period, and says STOPPING=1 when told
// to stop. Its log lines are JSON under --log-format json.
func TestServeNotifiesServiceManager(t *testing.T) {
	sock := filepath.Join(t.TempDir(), "notify.sock")
	conn, err := net.ListenUnixgram("unixgram", &net.UnixAddr{Name: sock, Net: "unixgram"})
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	t.Setenv("NOTIFY_SOCKET", sock)
	t.Setenv("WATCHDOG_USEC", "400000") // 0.4 s: fed every 0.2 s
	d := startDaemon(t, "--config", crashConfig(t, 1), "--data", t.TempDir(), "--log-format", "json")

	var got []string
	read := func(want string, limit time.Duration) {
		t.Helper()
		deadline := time.Now().Add(limit)
		buf := make([]byte, 4096)
		for {
			conn.SetReadDeadline(deadline)
			n, err := conn.Read(buf)
			if err != nil {
				t.Fatalf("no %q within %s; got %q (%v)", want, limit, got, err)
			}
			msg := string(buf[:n])
			got = append(got, msg)
			if strings.Contains("\n"+msg+"\n", "\n"+want+"\n") {
				return
			}
		}
	}
	read("READY=1", 10*time.Second)
	start := time.Now()
	read("WATCHDOG=1", 2*time.Second)
	read("WATCHDOG=1", 2*time.Second)
	if el := time.Since(start); el > 1500*time.Millisecond {
		t.Errorf("two watchdog pings took %s, want about 0.4 s at a 0.4 s watchdog", el)
	}
	d.stop()
	read("STOPPING=1", 5*time.Second)

	lines := strings.Split(strings.TrimSpace(d.logs.String()), "\n")
	if len(lines) < 2 {
		t.Fatalf("log: %q", lines)
	}
	for _, l := range lines {
		var rec map[string]any
		if err := json.Unmarshal([]byte(l), &rec); err != nil || rec["msg"] == nil || rec["level"] == nil {
			t.Fatalf("log line is not a JSON record with msg and level: %q (%v)", l, err)
		}
	}
}

// TestVersionCommand: `cleanmon version` prints the version and revision
// stamped with -ldflags -X, and /metrics carries them in
// cleanmon_build_info.
func TestVersionCommand(t *testing.T) {
	bin := filepath.Join(t.TempDir(), "cleanmon")
	pkg := "cleanmon/cmd/cleanmon/internal/daemon"
	out, err := exec.Command("go", "build", "-ldflags", "-X "+pkg+".version=9.8.7 -X "+pkg+".revision=0123abc", "-o", bin, ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	out, err = exec.Command(bin, "version").Output()
	if err != nil || !strings.HasPrefix(string(out), "cleanmon 9.8.7 (revision 0123abc, go") {
		t.Fatalf("cleanmon version = %q, %v", out, err)
	}
	c, err := loadtest.StartChild(bin, "serve", "--listen", "127.0.0.1:0", "--config", crashConfig(t, 1), "--data", t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.Kill)
	text := metricsText(t, &process{Child: c, url: c.URL, logs: c.Logs})
	if want := `cleanmon_build_info{goversion="` + runtime.Version() + `",revision="0123abc",version="9.8.7"} 1`; !strings.Contains(text, want) {
		t.Fatalf("/metrics has no %s", want)
	}
}
