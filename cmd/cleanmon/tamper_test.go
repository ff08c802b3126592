package main

import (
	"bytes"
	"encoding/binary"
	"path/filepath"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// tamper changes one byte of one stored value in a copy of a store,
// bypassing the store (as someone with the file and a bbolt tool could):
// in the readings of a counter, or in the audit chain.
func tamper(t *testing.T, path string, audit bool) (what string) {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	err = db.Update(func(tx *bolt.Tx) error {
		var b *bolt.Bucket
		if audit {
			b = tx.Bucket([]byte("audit"))
			what = "audit"
		} else {
			// A stopped store keeps its readings in compressed chunks.
			b = tx.Bucket([]byte("chunks")).Bucket([]byte("pc-asm-1"))
			what = "pc-asm-1"
		}
		c := b.Cursor()
		k, v := c.First()
		nv := append([]byte(nil), v...)
		nv[len(nv)/2] ^= 0x01
		return b.Put(append([]byte(nil), k...), nv)
	})
	if err != nil {
		t.Fatal(err)
	}
	return what
}

// TestVerifyNamesTampering: a byte changed in a reading, or in an audit
// entry, of a copy of the store makes `cleanmon verify` fail and say where.
func TestVerifyNamesTampering(t *testing.T) {
	data := t.TempDir()
	seedStore(t, data, 50)
	for _, audit := range []bool{false, true} {
		name := map[bool]string{false: "reading", true: "audit entry"}[audit]
		t.Run(name, func(t *testing.T) {
			cp := filepath.Join(t.TempDir(), "copy.db")
			if code, _, e := runCLI(t, "backup", "--data", data, "--out", cp); code != 0 {
				t.Fatalf("backup: %s", e)
			}
			if code, _, _ := runCLI(t, "verify", "--file", cp); code != 0 {
				t.Fatal("the untouched copy does not verify")
			}
			what := tamper(t, cp, audit)
			code, out, errs := runCLI(t, "verify", "--file", cp)
			if code != exitFail {
				t.Fatalf("verify of a tampered copy: exit %d\n%s%s", code, out, errs)
			}
			t.Logf("verify says:\n%s", out)
			if !strings.Contains(out, "fault:") || !strings.Contains(out, what) {
				t.Errorf("the fault does not name the %s (%s):\n%s", name, what, out)
			}
		})
	}
	// Readings removed outright are found too: the audit entries that
	// covered them list them, and they are gone.
	cp := filepath.Join(t.TempDir(), "copy.db")
	runCLI(t, "backup", "--data", data, "--out", cp)
	db, err := bolt.Open(cp, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	db.Update(func(tx *bolt.Tx) error {
		// The chunk holding the readings of pc-asm-1 from 10:00 on goes.
		b := tx.Bucket([]byte("chunks")).Bucket([]byte("pc-asm-1"))
		k, _ := b.Cursor().Seek(binary.BigEndian.AppendUint64(nil, uint64(time.Date(2026, 3, 2, 10, 7, 0, 0, time.UTC).UnixNano())))
		if k == nil {
			t.Fatal("the chunk to remove is not where the test expects it")
		}
		return b.Delete(append([]byte(nil), k...))
	})
	db.Close()
	code, out, _ := runCLI(t, "verify", "--file", cp)
	if code != exitFail || !bytes.Contains([]byte(out), []byte("fault:")) {
		t.Errorf("a removed reading went unnoticed: exit %d\n%s", code, out)
	}
}
