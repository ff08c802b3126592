package store

import (
	"context"
	"path/filepath"
	"slices"
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

// ScanAuditAction finds the entries of one action among the ingest
// covers, in chain order, and refuses the store's own actions.
func TestScanAuditAction(t *testing.T) {
	dir, sigs := auditIndexStore(t)
	s := openTest(t, dir, Options{NoSync: true})
	if got := scanAction(t, s, "e-signature"); !slices.Equal(got, sigs) {
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
	if got := scanAction(t, s, "e-signature"); !slices.Equal(got, sigs) {
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

// hoursStore appends entries at a moving clock, among them one stamped
// in the clock's future and one stamped hours before it (a late reading's
// alarm), and returns the store and the time the clock started at (after
// the chain start, which the store stamps with the real clock).
func hoursStore(t *testing.T, dir string) (*Store, time.Time) {
	t.Helper()
	base := time.Now().UTC().Truncate(time.Hour).Add(2 * time.Hour)
	clock := base
	auditClock = func() time.Time { return clock }
	t.Cleanup(func() { auditClock = time.Now })
	s := openTest(t, dir, Options{NoSync: true})
	ctx := context.Background()
	for i := range 60 {
		clock = base.Add(time.Duration(i) * 13 * time.Minute)
		at := clock
		switch i {
		case 20:
			at = clock.Add(4 * time.Minute) // a sender's clock a little fast
		case 40:
			at = clock.Add(-5 * time.Hour) // recorded late
		}
		if _, _, err := s.AppendAudit(ctx, AuditEntry{Time: at, Actor: "op.berg", Action: "operating-state-set", Subject: "assembly"}); err != nil {
			t.Fatal(err)
		}
	}
	return s, base
}

// checkSince asserts that ScanAuditSince leaves out no entry at or after
// each time across the chain's span, and starts after entry #1 for some.
func checkSince(t *testing.T, s *Store, base time.Time) {
	t.Helper()
	var all []AuditEntry
	if err := s.ScanAudit(0, 0, func(e AuditEntry) error { all = append(all, e); return nil }); err != nil {
		t.Fatal(err)
	}
	skipped := false
	for m := -6 * 60; m < 60*15; m += 7 {
		since := base.Add(time.Duration(m) * time.Minute)
		got := map[uint64]bool{}
		first := uint64(0)
		if err := s.ScanAuditSince(since, func(e AuditEntry) error {
			if first == 0 {
				first = e.Seq
			}
			got[e.Seq] = true
			return nil
		}); err != nil {
			t.Fatal(err)
		}
		if first > 1 {
			skipped = true
		}
		for _, e := range all {
			if !e.Time.Before(since) && !got[e.Seq] {
				t.Fatalf("since %s: entry #%d of %s left out", since.Format(time.RFC3339), e.Seq, e.Time.Format(time.RFC3339))
			}
		}
	}
	if !skipped {
		t.Error("every listing started at the first entry: the index saved nothing")
	}
}

// A listing from a time leaves out no entry at or after it, future- or
// late-stamped ones included, and skips what lies before.
func TestScanAuditSince(t *testing.T) {
	s, base := hoursStore(t, t.TempDir())
	checkSince(t, s, base)
}

// A file written before the time index gets it at its next open, built
// from the entries' own times, with the same guarantee; Verify finds an
// index moved so that a listing would leave an entry out.
func TestAuditHoursOlderFileAndTamper(t *testing.T) {
	dir := t.TempDir()
	s, base := hoursStore(t, dir)
	s.Close()
	path := filepath.Join(dir, "cleanmon.db")
	edit := func(fn func(tx *bolt.Tx) error) {
		t.Helper()
		db, err := bolt.Open(path, 0o600, nil)
		if err != nil {
			t.Fatal(err)
		}
		defer db.Close()
		if err := db.Update(fn); err != nil {
			t.Fatal(err)
		}
	}
	edit(func(tx *bolt.Tx) error { return tx.DeleteBucket(bucketAuditHours) })
	s = openTest(t, dir, Options{NoSync: true})
	checkSince(t, s, base)
	s.Close()
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after the rebuild: %v %v", problems, err)
	}
	// Point the last hour at the entry after its first one, then past
	// the end of the chain.
	for _, past := range []uint64{1, 1000} {
		edit(func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketAuditHours)
			k, v := b.Cursor().Last()
			seq, _ := keySeq(v)
			return b.Put(k, seqKey(seq+past))
		})
		problems, err := Verify(path)
		if err != nil {
			t.Fatal(err)
		}
		if len(problems) != 1 || !strings.Contains(problems[0], "would leave it out") {
			t.Errorf("%d past: problems %q, want the time index named", past, problems)
		}
	}
}
