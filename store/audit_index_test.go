package store

import (
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// auditIndexStore writes a chain in which two signatures sit among many
// ingest covers and other entries, and returns the store's directory.
func auditIndexStore(t *testing.T) (dir string, sigs []uint64) {
	t.Helper()
	dir = t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	ctx := context.Background()
	for i := range 20 {
		if _, _, err := s.AppendReadings(ctx, []Reading{reading("pc-asm-1", t0.Add(time.Duration(i)*time.Minute), 30)}); err != nil {
			t.Fatal(err)
		}
		switch i {
		case 4, 15:
			seq, _, err := s.AppendAudit(ctx, AuditEntry{Actor: "qa.lind", Action: "e-signature", Subject: "certification/assembly", Reason: "approved"})
			if err != nil {
				t.Fatal(err)
			}
			sigs = append(sigs, seq)
		case 9:
			if _, _, err := s.AppendAudit(ctx, AuditEntry{Actor: "admin", Action: "account-add", Subject: "op.berg"}); err != nil {
				t.Fatal(err)
			}
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	return dir, sigs
}

func scanAction(t *testing.T, s *Store, action string) []uint64 {
	t.Helper()
	var got []uint64
	if err := s.ScanAuditAction(action, func(e AuditEntry) error {
		if e.Action != action {
			t.Errorf("entry #%d is %q", e.Seq, e.Action)
		}
		got = append(got, e.Seq)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	return got
}

func equalSeqs(a, b []uint64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// ScanAuditAction finds the entries of one action among the ingest
// covers, in chain order, and refuses the store's own actions.
func TestScanAuditAction(t *testing.T) {
	dir, sigs := auditIndexStore(t)
	s := openTest(t, dir, Options{NoSync: true})
	if got := scanAction(t, s, "e-signature"); !equalSeqs(got, sigs) {
		t.Errorf("signatures %v, want %v", got, sigs)
	}
	if got := scanAction(t, s, "account-add"); len(got) != 1 {
		t.Errorf("account changes %v, want one", got)
	}
	if got := scanAction(t, s, "nothing-of-the-kind"); len(got) != 0 {
		t.Errorf("unknown action found %v", got)
	}
	if err := s.ScanAuditAction(AuditReadings, func(AuditEntry) error { return nil }); err == nil {
		t.Error("the store's own action was scanned by index")
	}
}

// A file written before the index existed verifies clean as it is, gets
// its index at its next open, and verifies clean again.
func TestAuditIndexBuiltForOlderFile(t *testing.T) {
	dir, sigs := auditIndexStore(t)
	path := filepath.Join(dir, "cleanmon.db")
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.Update(func(tx *bolt.Tx) error { return tx.DeleteBucket(bucketAuditIndex) }); err != nil {
		t.Fatal(err)
	}
	db.Close()
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify of the file without its index: %v %v", problems, err)
	}
	s := openTest(t, dir, Options{NoSync: true})
	if got := scanAction(t, s, "e-signature"); !equalSeqs(got, sigs) {
		t.Errorf("after the rebuild: signatures %v, want %v", got, sigs)
	}
	s.Close()
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after the rebuild: %v %v", problems, err)
	}
}

// Verify finds an index that hides an entry or lists one that is not
// there, or not of its action.
func TestVerifyAuditIndex(t *testing.T) {
	cases := []struct {
		name string
		edit func(tx *bolt.Tx, sigs []uint64) error
		want string
	}{
		{"signature unlisted", func(tx *bolt.Tx, sigs []uint64) error {
			return tx.Bucket(bucketAuditIndex).Delete(auditIndexKey("e-signature", sigs[0]))
		}, "is not listed under its action"},
		{"entry listed that is not in the chain", func(tx *bolt.Tx, sigs []uint64) error {
			return tx.Bucket(bucketAuditIndex).Put(auditIndexKey("e-signature", 999), nil)
		}, "which is not in the chain"},
		{"ingest cover listed as a signature", func(tx *bolt.Tx, sigs []uint64) error {
			return tx.Bucket(bucketAuditIndex).Put(auditIndexKey("e-signature", 3), nil)
		}, "but it is"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			dir, sigs := auditIndexStore(t)
			path := filepath.Join(dir, "cleanmon.db")
			db, err := bolt.Open(path, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := db.Update(func(tx *bolt.Tx) error { return tc.edit(tx, sigs) }); err != nil {
				t.Fatal(err)
			}
			db.Close()
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(problems) != 1 || !strings.Contains(problems[0], tc.want) {
				t.Errorf("problems %q, want one with %q", problems, tc.want)
			}
		})
	}
}
