package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"cleanmon/store"
)

func seedStore(t *testing.T, dir string, n int) {
	t.Helper()
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	var rs []store.Reading
	for i := 0; i < n; i++ {
		rs = append(rs, store.Reading{Counter: "pc-asm-1", Time: t0.Add(time.Duration(i) * time.Minute), VolumeL: 28.3,
			Status: "ok", Sizes: []float64{0.5, 5}, Counts: []uint64{uint64(2000 + i), uint64(i % 7)}})
	}
	if _, _, err := st.AppendReadings(context.Background(), rs); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
}

func TestBackupAndVerify(t *testing.T) {
	dir := t.TempDir()
	data := filepath.Join(dir, "data")
	seedStore(t, data, 500)
	out := filepath.Join(dir, "copy.db")
	if code, o, e := runCLI(t, "backup", "--data", data, "--out", out); code != 0 || !strings.Contains(o, "verified") {
		t.Fatalf("backup: exit %d %s %s", code, o, e)
	}
	if code, o, e := runCLI(t, "verify", "--file", out); code != 0 || !strings.Contains(o, "no faults") {
		t.Fatalf("verify copy: exit %d %s %s", code, o, e)
	}
	if code, _, e := runCLI(t, "verify", "--data", data); code != 0 {
		t.Fatalf("verify data: exit %d %s", code, e)
	}
	// Damage the copy: flip one byte in every page's tail area until the
	// checker sees it; a damaged store must exit 1 and say what.
	b, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	for i := len(b) / 2; i < len(b); i += 4096 {
		b[i] ^= 0xff
	}
	// Readings at rest sit in a few dense chunk pages, and the pages freed
	// behind them hold nothing: hit the header (its type flags) of every
	// page after the meta pages as well, so a page in use is damaged.
	for i := 2*4096 + 8; i < len(b); i += 4096 {
		b[i] ^= 0xff
	}
	if err := os.WriteFile(out, b, 0o600); err != nil {
		t.Fatal(err)
	}
	code, o, e := runCLI(t, "verify", "--file", out)
	if code != 1 || (!strings.Contains(o, "fault") && e == "") {
		t.Fatalf("damaged copy: exit %d stdout %q stderr %q", code, o, e)
	}
	// Usage errors exit 2.
	if code, _, _ := runCLI(t, "verify"); code != 2 {
		t.Error("verify without a target must exit 2")
	}
	if code, _, _ := runCLI(t, "backup", "--data", data); code != 2 {
		t.Error("backup without --out must exit 2")
	}
}

func TestBackupRefusesHeldStore(t *testing.T) {
	dir := t.TempDir()
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	code, _, e := runCLI(t, "backup", "--data", dir, "--out", filepath.Join(t.TempDir(), "x.db"))
	if code != 1 || !strings.Contains(e, "--url") {
		t.Errorf("exit %d stderr %q", code, e)
	}
}
