package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"

	"cleanmon/store"
)

// checkpointRE finds a published checkpoint in the daemon's log.
var checkpointRE = regexp.MustCompile(`checkpoint="(cleanmon-audit-checkpoint/1 seq=(\d+) [^"]*)"`)

// signedRun runs the real daemon with a signing key on a new data
// directory: readings, a backup (an entry that covers no record), a
// checkpoint published after it, kept in a file as a site would, and a
// clean stop. It returns the data directory, the public key and the file
// of kept checkpoints.
func signedRun(t *testing.T) (data, pub, heads string) {
	t.Helper()
	priv, pub := auditKeys(t)
	var mu sync.Mutex
	var hooks []string
	hook := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		b, _ := io.ReadAll(r.Body)
		mu.Lock()
		hooks = append(hooks, string(b))
		mu.Unlock()
	}))
	defer hook.Close()
	data = t.TempDir()
	cfg := trustSite(t, "  signing_key_file: "+priv+"\n  checkpoint_every: 1s\n", "notifications:\n  webhooks: [{name: archive, url: \""+hook.URL+"/hook\", secret: \"test-hook-secret\"}]\n")
	d := startDaemon(t, "--config", cfg, "--data", data)
	if !strings.Contains(d.logs.String(), "audit: entries are signed") {
		t.Errorf("the start does not say the record is signed:\n%s", d.logs.String())
	}
	postReadings(t, d.url, 130)
	if code, _, err := apiDo(context.Background(), http.MethodGet, d.url+"/api/v1/backup", nil, ""); err != nil || code != 200 {
		t.Fatalf("backup: %d %v", code, err)
	}
	var head struct{ Seq uint64 }
	if err := json.Unmarshal([]byte(auditHead(t, d.url)), &head); err != nil {
		t.Fatal(err)
	}
	var line string
	waitFor(t, 20*time.Second, "a checkpoint at or after the backup in the log", func() bool {
		for _, m := range checkpointRE.FindAllStringSubmatch(d.logs.String(), -1) {
			if n := parseUint(m[2]); n >= head.Seq {
				line = m[1]
				return true
			}
		}
		return false
	})
	waitFor(t, 20*time.Second, "the checkpoint at the webhook", func() bool {
		mu.Lock()
		defer mu.Unlock()
		for _, h := range hooks {
			if strings.Contains(h, `"checkpoint":{`) && strings.Contains(h, "cleanmon-audit-checkpoint/1") {
				return true
			}
		}
		return false
	})
	d.stop()
	heads = filepath.Join(t.TempDir(), "checkpoints.txt")
	if err := os.WriteFile(heads, []byte("# kept off the machine\n"+line+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	return data, pub, heads
}

func parseUint(s string) uint64 {
	var n uint64
	for _, c := range s {
		n = n*10 + uint64(c-'0')
	}
	return n
}

// TestKeygenNeverOverwrites: a second keygen into the same directory
// refuses and leaves both files as they were.
func TestKeygenNeverOverwrites(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "keys")
	code, out, _ := runCLI(t, "keygen", "--out", dir)
	if code != exitOK || !strings.Contains(out, "private key") || !strings.Contains(out, "off this machine") {
		t.Fatalf("keygen: %d %s", code, out)
	}
	before, _ := os.ReadFile(filepath.Join(dir, keygenPrivate))
	if code, _, errs := runCLI(t, "keygen", "--out", dir); code != exitFail || errs == "" {
		t.Errorf("a second keygen: exit %d %q, want a refusal", code, errs)
	}
	after, _ := os.ReadFile(filepath.Join(dir, keygenPrivate))
	if !bytes.Equal(before, after) || len(before) == 0 {
		t.Error("the private key changed")
	}
	if fi, err := os.Stat(filepath.Join(dir, keygenPrivate)); err != nil || fi.Mode().Perm() != 0o600 {
		t.Errorf("private key mode %v %v", fi.Mode(), err)
	}
}

// TestTamperThroughVerify rewrites copies of a real signed data directory
// as someone with write access but without the key would, and runs
// `cleanmon verify` without the key, with it, and with the kept
// checkpoints: what each finds is what the README promises.
func TestTamperThroughVerify(t *testing.T) {
	data, pub, heads := signedRun(t)
	if code, out, errs := runCLI(t, "verify", "--data", data, "--key", pub, "--head", heads); code != exitOK || !strings.Contains(out, "signatures checked") {
		t.Fatalf("the untouched store: %d %s%s", code, out, errs)
	}
	// The path the daemon's messages print (the database file) is taken.
	if code, out, errs := runCLI(t, "verify", filepath.Join(data, store.FileName)); code != exitOK {
		t.Fatalf("verify of the database file: %d %s%s", code, out, errs)
	}
	const found, passes = exitFail, exitOK
	cases := []struct {
		name               string
		tamper             func(path string)
		plain, keyed, head int
	}{
		{"rewrite an entry, hashes recomputed", func(p string) {
			rechainFile(t, p, false, func(es []store.AuditEntry) []store.AuditEntry {
				es[len(es)-3].Reason = "nothing happened"
				return es
			})
		}, passes, found, found},
		{"reorder two entries, hashes recomputed", func(p string) {
			rechainFile(t, p, false, func(es []store.AuditEntry) []store.AuditEntry {
				n := len(es)
				es[n-2], es[n-3] = es[n-3], es[n-2]
				return es
			})
		}, passes, found, found},
		{"insert an entry, hashes recomputed", func(p string) {
			rechainFile(t, p, false, func(es []store.AuditEntry) []store.AuditEntry {
				extra := store.AuditEntry{Time: es[3].Time, Actor: "qa.reviewer", Action: store.AuditConfigLoad, Reason: "approved"}
				return append(es[:4:4], append([]store.AuditEntry{extra}, es[4:]...)...)
			})
		}, passes, found, found},
		{"cut the tail and its signatures", func(p string) {
			cp, err := store.ReadCheckpointFile(heads)
			if err != nil {
				t.Fatal(err)
			}
			rechainFile(t, p, true, func(es []store.AuditEntry) []store.AuditEntry { return es[:cp.Seq-1] })
		}, passes, passes, found},
		{"a reading changed, its checksum recomputed", func(p string) {
			// Compaction moves readings from the head into chunks.
			editValue(t, p, readingBucket(t, p), "pc-0")
		}, found, found, found},
		{"a rollup changed, its checksum recomputed", func(p string) {
			editValue(t, p, rollupBucket(t, p), "pc-0")
		}, found, found, found},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := copyDataDir(t, data)
			c.tamper(filepath.Join(dir, store.FileName))
			for _, v := range []struct {
				args []string
				want int
			}{
				{[]string{"verify", dir}, c.plain},
				{[]string{"verify", dir, "--key", pub}, c.keyed},
				{[]string{"verify", dir, "--head", heads}, c.head},
			} {
				code, out, errs := runCLI(t, v.args...)
				if code != v.want {
					t.Errorf("%s: exit %d, want %d\n%s%s", strings.Join(v.args[2:], " "), code, v.want, out, errs)
				}
				if code == exitFail && !strings.Contains(out, "fault:") {
					t.Errorf("%s: no fault named:\n%s", strings.Join(v.args[2:], " "), out)
				}
			}
		})
	}
}

// readingBucket is where pc-0's readings are: the head, or chunks once
// compacted.
func readingBucket(t *testing.T, path string) string {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true, Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	name := "chunks"
	db.View(func(tx *bolt.Tx) error {
		if b := tx.Bucket([]byte("readings")); b != nil && b.Bucket([]byte("pc-0")) != nil && b.Bucket([]byte("pc-0")).Stats().KeyN > 1 {
			name = "readings"
		}
		return nil
	})
	return name
}

// rollupBucket is the rollup bucket that holds pc-0's rollups.
func rollupBucket(t *testing.T, path string) string {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true, Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	name := ""
	db.View(func(tx *bolt.Tx) error {
		for _, b := range []string{"rollups_1h", "rollups_1m"} {
			if rb := tx.Bucket([]byte(b)); rb != nil && rb.Bucket([]byte("pc-0")) != nil && rb.Bucket([]byte("pc-0")).Stats().KeyN > 1 {
				name = b
				return nil
			}
		}
		return nil
	})
	if name == "" {
		t.Fatal("the store holds no rollups of pc-0 to change")
	}
	return name
}

// TestKeyRotationAudited: a daemon started with a new key records the
// change, naming both keys; verify needs every public key since the
// chain began.
func TestKeyRotationAudited(t *testing.T) {
	privA, pubA := auditKeys(t)
	privB, pubB := auditKeys(t)
	data := t.TempDir()
	d := startDaemon(t, "--config", trustSite(t, "  signing_key_file: "+privA+"\n", ""), "--data", data)
	postReadings(t, d.url, 5)
	d.stop()
	d = startDaemon(t, "--config", trustSite(t, "  signing_key_file: "+privB+"\n  public_key_files: ["+pubA+"]\n", ""), "--data", data)
	var changes []map[string]any
	for _, e := range auditEntries(t, d.url) {
		if e["action"] == store.AuditKeyChange {
			changes = append(changes, e)
		}
	}
	d.stop()
	if len(changes) != 2 {
		t.Fatalf("%d key-change entries, want 2 (the first key, then the rotation): %v", len(changes), changes)
	}
	idA, idB := keyID(t, pubA), keyID(t, pubB)
	rot := fmt.Sprint(changes[1])
	if !strings.Contains(rot, idA) || !strings.Contains(rot, idB) {
		t.Errorf("the rotation entry does not name both keys %s and %s: %s", idA, idB, rot)
	}
	if code, out, errs := runCLI(t, "verify", data, "--key", pubA, "--key", pubB); code != exitOK {
		t.Errorf("verify with both keys: %d %s%s", code, out, errs)
	}
	if code, out, _ := runCLI(t, "verify", data, "--key", pubB); code != exitFail {
		t.Errorf("verify with the new key only: %d, want 1 (entries signed by the old key cannot be checked)\n%s", code, out)
	}
}

func keyID(t *testing.T, pub string) string {
	t.Helper()
	k, err := store.LoadAuditPublicKey(pub)
	if err != nil {
		t.Fatal(err)
	}
	return store.KeyID(k)
}
