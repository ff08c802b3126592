package daemon

import (
	"bytes"
	"context"
	"errors"
	"io"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"testing"
	"time"

	"cleanmon/store"
)

const minimalSite = "../../../../testdata/site-minimal.yaml"

func quietLog() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

// A start that fails half-way (the port is taken) rolls back what had
// started, in reverse: the store is closed again, so another process can
// open it at once, and the error is a fault of the machine, not of usage.
func TestNewRollsBackHalfWay(t *testing.T) {
	taken, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer taken.Close()
	dir := t.TempDir()
	d, err := New(Options{ConfigPath: minimalSite, DataDir: dir, Listen: taken.Addr().String(), Log: quietLog()})
	if err == nil || d != nil {
		t.Fatalf("New on a taken port: %v, %v", d, err)
	}
	if errors.Is(err, ErrUsage) || !strings.Contains(err.Error(), "listening on") {
		t.Errorf("error %v", err)
	}
	st, err := store.Open(dir, store.Options{LockTimeout: 100 * time.Millisecond})
	if err != nil {
		t.Fatalf("the store was left open: %v", err)
	}
	st.Close()
}

// A configuration fault is the caller's to fix: ErrUsage, and nothing of
// the store is created.
func TestNewRefusesBadUsage(t *testing.T) {
	for name, o := range map[string]Options{
		"no config file":    {ConfigPath: "no-such.yaml", DataDir: t.TempDir()},
		"demo off loopback": {Demo: true, Listen: "0.0.0.0:0"},
		"no data dir":       {ConfigPath: minimalSite},
	} {
		o.Log = quietLog()
		if _, err := New(o); !errors.Is(err, ErrUsage) {
			t.Errorf("%s: %v, want a usage error", name, err)
		}
	}
}

// New, Run, Close: the daemon serves at Addr once Run has begun, says so
// on Stdout, answers ready, and Close after Run's end stops it cleanly.
func TestRunServesUntilCancelled(t *testing.T) {
	var out bytes.Buffer
	d, err := New(Options{ConfigPath: minimalSite, DataDir: t.TempDir(), Listen: "127.0.0.1:0", Stdout: &out, Log: quietLog()})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	ran := make(chan error, 1)
	go func() { ran <- d.Run(ctx) }()
	var status int
	for deadline := time.Now().Add(10 * time.Second); time.Now().Before(deadline); time.Sleep(20 * time.Millisecond) {
		resp, err := http.Get(d.Addr() + "/readyz")
		if err == nil {
			status = resp.StatusCode
			resp.Body.Close()
			if status == http.StatusOK {
				break
			}
		}
	}
	if status != http.StatusOK {
		t.Fatalf("readyz %d", status)
	}
	cancel()
	if err := <-ran; err != nil {
		t.Errorf("Run: %v", err)
	}
	if err := d.Close(); err != nil {
		t.Errorf("Close: %v", err)
	}
	if !strings.Contains(out.String(), "cleanmon: serving on "+d.Addr()) {
		t.Errorf("stdout %q", out.String())
	}
	if _, err := http.Get(d.Addr() + "/healthz"); err == nil {
		t.Error("still serving after Close")
	}
}
