package main

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"cleanmon/store"
)

// and the latest backup.
func TestServeRefusesDamagedStore(t *testing.T) {
	for name, damage := range map[string]func(path string) error{
		"truncated": func(p string) error { return os.Truncate(p, 6000) },
		"garbage": func(p string) error {
			return os.WriteFile(p, bytes.Repeat([]byte("not a store "), 4096), 0o600)
		},
	} {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			seedStore(t, dir, 200)
			if err := damage(filepath.Join(dir, store.FileName)); err != nil {
				t.Fatal(err)
			}
			cmd := exec.Command(cleanmonBinary(t), "serve", "--config", crashConfig(t, 2), "--data", dir, "--listen", "127.0.0.1:0")
			var stderr bytes.Buffer
			cmd.Stderr = &stderr
			done := make(chan error, 1)
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			go func() { done <- cmd.Wait() }()
			select {
			case err := <-done:
				ee, ok := err.(*exec.ExitError)
				if !ok || ee.ExitCode() != exitFail {
					t.Errorf("exit %v, want %d", err, exitFail)
				}
			case <-time.After(30 * time.Second):
				cmd.Process.Kill()
				t.Fatal("the daemon started on a damaged store")
			}
			msg := stderr.String()
			if !strings.Contains(msg, "cleanmon verify") || !strings.Contains(msg, "backup") {
				t.Errorf("the refusal does not point at verify and the backup:\n%s", msg)
			}
		})
	}
}

// smallFS is a directory on a small file system that a test may fill:
// .ci/run mounts an 8 MiB tmpfs and names it in CLEANMON_TEST_SMALLFS.
func smallFS(t *testing.T) string {
	t.Helper()
	root := os.Getenv("CLEANMON_TEST_SMALLFS")
	if root == "" {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatal("CLEANMON_TEST_SMALLFS is not set and CLEANMON_REQUIRE_TOOLS is")
		}
		t.Skip("CLEANMON_TEST_SMALLFS not set: no small file system to fill (mount -t tmpfs -o size=8m tmpfs DIR)")
	}
	// Other packages' tests fill the same file system (go test runs
	// packages at once): one filler at a time, or each sees the other's
	// full disk at the wrong moment.
	lock, err := os.OpenFile(filepath.Join(root, ".fill-lock"), os.O_CREATE|os.O_RDWR, 0o600)
	if err != nil {
		t.Fatal(err)
	}
	if err := syscall.Flock(int(lock.Fd()), syscall.LOCK_EX); err != nil {
		t.Fatal(err)
	}
	dir, err := os.MkdirTemp(root, "daemon-")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		os.RemoveAll(dir)
		lock.Close() // releases the lock
	})
	return dir
}

// TestDiskFullDuringIngest fills the disk under a running daemon: ingest
// answers 503 with a clear error and acknowledges nothing it did not
// store, reads go on working, and ingest recovers by itself once space is
// freed.
func TestDiskFullDuringIngest(t *testing.T) {
	dir := smallFS(t)
	data := filepath.Join(dir, "data")
	d := startDaemon(t, "--config", crashConfig(t, 2), "--data", data)
	// Leave the store little room: a filler file takes most of the rest.
	filler := filepath.Join(dir, "filler")
	f, err := os.Create(filler)
	if err != nil {
		t.Fatal(err)
	}
	buf := make([]byte, 64<<10)
	for {
		if _, err := f.Write(buf); err != nil {
			break
		}
	}
	f.Close()
	os.Truncate(filler, mustSize(t, filler)-(1<<20)) // give back 1 MiB

	base := time.Now().UTC().Add(-time.Hour).Truncate(time.Second)
	post := func(i int) (int, string) {
		var b strings.Builder
		for j := 0; j < 200; j++ {
			fmt.Fprintf(&b, `{"counter":"pc-%d","time":%q,"volume_l":28.3,"counts":{"0.5":%d,"5":1},"status":"ok"}`+"\n",
				j%2, base.Add(time.Duration(i*200+j)*time.Millisecond).Format(time.RFC3339Nano), 2000+j)
		}
		code, body, err := apiDo(context.Background(), http.MethodPost, d.url+"/api/v1/readings", []byte(b.String()), "application/x-ndjson")
		if err != nil {
			t.Fatal(err)
		}
		return code, string(body)
	}
	acked, full := 0, -1
	for i := 0; i < 2000; i++ {
		code, body := post(i)
		if code == 200 {
			acked += 200
			continue
		}
		if code != http.StatusServiceUnavailable || !strings.Contains(body, "full") {
			t.Fatalf("batch %d: %d %s, want 503 naming a full disk", i, code, body)
		}
		full = i
		break
	}
	if full < 0 {
		t.Fatal("the disk never filled; the test proves nothing")
	}
	countStored := func() int {
		n := 0
		for _, loc := range []string{"loc-0", "loc-1"} {
			code, body, err := apiDo(context.Background(), http.MethodGet, fmt.Sprintf("%s/api/v1/zones/assembly/readings?location=%s&from=%s&to=%s",
				d.url, loc, base.Add(-time.Minute).Format(time.RFC3339), base.Add(time.Hour).Format(time.RFC3339)), nil, "")
			if err != nil || code != 200 {
				t.Fatalf("reads stopped working on a full disk: %d %v %s", code, err, body)
			}
			n += bytes.Count(body, []byte(`"counter":`))
		}
		return n
	}
	if n := countStored(); n != acked {
		t.Errorf("%d readings stored, %d acknowledged: the refused batch must leave nothing", n, acked)
	}
	// Not ready while writes fail, saying why to a token that may read.
	if code, body, err := apiDo(context.Background(), http.MethodGet, d.url+"/readyz", nil, ""); err != nil || code != http.StatusServiceUnavailable || !strings.Contains(string(body), "full") {
		t.Errorf("readyz on a full disk: %d %v %s", code, err, body)
	}
	// Free the space: the next batch is taken without a restart.
	if err := os.Remove(filler); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 10*time.Second, "ingest to recover", func() bool {
		code, _ := post(full)
		return code == 200
	})
	if code, body, err := apiDo(context.Background(), http.MethodGet, d.url+"/readyz", nil, ""); err != nil || code != http.StatusOK {
		t.Errorf("readyz after recovery: %d %v %s", code, err, body)
	}
	if n := countStored(); n != acked+200 {
		t.Errorf("after recovery %d stored, want %d", n, acked+200)
	}
}

func mustSize(t *testing.T, p string) int64 {
	t.Helper()
	fi, err := os.Stat(p)
	if err != nil {
		t.Fatal(err)
	}
	return fi.Size()
}
