package store

import (
	"context"
	"crypto/ed25519"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// TestUncleanStop: a store opened again after a run that never closed it
// (kill -9) records an unclean-stop entry naming the last entry before
// it; a clean close leaves no such entry.
func TestUncleanStop(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	appendOK(t, s, series("pc-gown", t0, 5))
	lastSeq, lastHash, err := s.AuditHead()
	if err != nil {
		t.Fatal(err)
	}
	// The file as a kill -9 leaves it: every commit synced, Close never run.
	crashed := copyFile(t, filepath.Join(dir, FileName))
	marker, err := os.ReadFile(filepath.Join(dir, RunningMarker))
	if err != nil {
		t.Fatalf("no running marker while open: %v", err)
	}
	if err := os.WriteFile(filepath.Join(filepath.Dir(crashed), RunningMarker), marker, 0o600); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(dir, RunningMarker)); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("the running marker outlived Close: %v", err)
	}

	after := openTest(t, filepath.Dir(crashed), Options{})
	var got []AuditEntry
	if err := after.ScanAudit(lastSeq+1, 0, func(e AuditEntry) error { got = append(got, e); return nil }); err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 || got[0].Action != AuditUncleanStop || got[0].Actor != AuditActorSystem {
		t.Fatalf("entries after the crash: %+v", got)
	}
	e := got[0]
	if want := "#" + itoa(lastSeq); e.Subject != want || !strings.Contains(e.Reason, "last entry before this one is "+want+" (readings-batch") {
		t.Errorf("unclean-stop names %q / %q, want %s", e.Subject, e.Reason, want)
	}
	if opened := strings.Fields(string(marker))[0]; !strings.Contains(e.Reason, "opened the store at "+opened) {
		t.Errorf("reason %q does not say when the unclosed run began (%s)", e.Reason, opened)
	}
	if len(e.Detail) != 8+32+8 || string(e.Detail[8:40]) != string(lastHash[:]) {
		t.Errorf("detail does not hold the last entry's hash: %x", e.Detail)
	}
	if err := after.Close(); err != nil {
		t.Fatal(err)
	}
	// Closed cleanly now: the next start records nothing.
	again := openTest(t, filepath.Dir(crashed), Options{})
	n := 0
	if err := again.ScanAudit(1, 0, func(e AuditEntry) error {
		if e.Action == AuditUncleanStop {
			n++
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	if n != 1 {
		t.Errorf("%d unclean-stop entries after a clean stop, want 1", n)
	}
	if p, err := Verify(dir); err != nil || len(p) > 0 {
		t.Errorf("Verify of the cleanly closed original: %q %v", p, err)
	}
}

func itoa(n uint64) string { return strconv.FormatUint(n, 10) }

// TestCheckClean: both checks pass on a sound store, with and without a
// key, and the quick one looks at no more than its links.
func TestCheckClean(t *testing.T) {
	signer, pub := newSigner(t)
	s := quick(t)
	ctx := context.Background()
	if err := s.CheckQuick(ctx, CheckOptions{}); err != nil {
		t.Fatalf("empty store: %v", err)
	}
	if err := s.UseAuditKey(ctx, signer, ""); err != nil {
		t.Fatal(err)
	}
	for i := range 80 {
		appendOK(t, s, series("pc-met", t0.Add(time.Duration(i)*time.Hour), 2))
	}
	cp, err := s.Checkpoint()
	if err != nil {
		t.Fatal(err)
	}
	for _, full := range []bool{false, true} {
		opt := CheckOptions{Head: &cp, Links: 8}
		if full {
			opt.Keys = append(opt.Keys, pub)
		}
		if err := s.check(ctx, opt, full); err != nil {
			t.Errorf("full=%v: %v", full, err)
		}
	}
}

// storeWithData builds a closed store file large enough to span many
// pages.
func storeWithData(t *testing.T) string {
	t.Helper()
	dir := t.TempDir()
	s, err := Open(dir, Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	// Enough counters and batches that the file has a few dozen pages in
	// use once compacted: chunks, rollups, audit entries.
	for _, c := range []string{"pc-asm-1", "pc-asm-2", "pc-hood", "pc-asm-3", "pc-asm-4", "pc-gown-1", "pc-gown-2", "pc-fill-1"} {
		rs := series(c, t0, 1500)
		for i := 0; i < len(rs); i += 100 {
			appendOK(t, s, rs[i:i+100])
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	return filepath.Join(dir, FileName)
}

// usedPages lists the branch and leaf pages of a file, and its page size.
func usedPages(t *testing.T, path string) ([]int, int) {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true, PreLoadFreelist: true})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var ids []int
	err = db.View(func(tx *bolt.Tx) error {
		for id := 2; id < int(tx.Size())/db.Info().PageSize; id++ {
			p, err := tx.Page(id)
			if err != nil {
				return err
			}
			if p != nil && (p.Type == "leaf" || p.Type == "branch") {
				ids = append(ids, id)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return ids, db.Info().PageSize
}

// TestZeroedPageDetected zeroes one 4 KiB page in use in copies of a real
// store: opening refuses the file, or the start-up check reports it.
func TestZeroedPageDetected(t *testing.T) {
	orig := storeWithData(t)
	ids, size := usedPages(t, orig)
	if len(ids) < 10 || size != 4096 {
		t.Fatalf("%d pages in use of %d bytes: too few to test", len(ids), size)
	}
	// The first, the last and some between: branch, leaf, audit, meta buckets.
	picks := []int{ids[0], ids[len(ids)/3], ids[len(ids)/2], ids[2*len(ids)/3], ids[len(ids)-1]}
	for _, id := range picks {
		t.Run(itoa(uint64(id)), func(t *testing.T) {
			path := copyFile(t, orig)
			f, err := os.OpenFile(path, os.O_WRONLY, 0)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := f.WriteAt(make([]byte, size), int64(id*size)); err != nil {
				t.Fatal(err)
			}
			_ = f.Close()
			s, err := Open(filepath.Dir(path), Options{NoSync: true})
			if err != nil {
				if !errors.Is(err, ErrCorrupt) {
					t.Fatalf("Open: %v, want ErrCorrupt", err)
				}
				return
			}
			defer s.Close()
			err = s.CheckQuick(context.Background(), CheckOptions{})
			var ie *IntegrityError
			if !errors.As(err, &ie) || len(ie.Faults) == 0 {
				t.Fatalf("zeroed page %d: Open and CheckQuick passed (%v)", id, err)
			}
			if ie.Faults[0].Kind != FaultPages && ie.Faults[0].Kind != FaultChain {
				t.Errorf("first fault %+v", ie.Faults[0])
			}
		})
	}
}

// TestTruncatedFileDetected cuts a copy of a real store short.
func TestTruncatedFileDetected(t *testing.T) {
	orig := storeWithData(t)
	ids, size := usedPages(t, orig)
	// The pages in use end here; bbolt grows the file ahead of them, and
	// cutting only that slack loses nothing.
	used := int64((ids[len(ids)-1] + 1) * size)
	for _, keep := range []int64{used / 2, used - int64(size)} {
		path := copyFile(t, orig)
		if err := os.Truncate(path, keep); err != nil {
			t.Fatal(err)
		}
		s, err := Open(filepath.Dir(path), Options{NoSync: true})
		if err == nil {
			err = s.CheckQuick(context.Background(), CheckOptions{})
			_ = s.Close()
		}
		if !errors.Is(err, ErrCorrupt) {
			t.Errorf("truncated to %d of %d bytes in use: %v", keep, used, err)
		}
	}
}

// TestCheckQuickUnsignedTail: entries appended without the key by
// someone who opened the file while the daemon was stopped are found by
// the start-up check of the daemon that has the key.
func TestCheckQuickUnsignedTail(t *testing.T) {
	signer, _ := newSigner(t)
	path, _ := buildSigned(t, signer)
	// Written by a program without the key: the store as anyone could open it.
	s, err := Open(filepath.Dir(path), Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	for range 3 {
		if _, _, err := s.AppendAudit(context.Background(), AuditEntry{Actor: "intruder", Action: AuditConfigLoad}); err != nil {
			t.Fatal(err)
		}
	}
	_ = s.Close()
	d := openTest(t, filepath.Dir(path), Options{NoSync: true})
	if err := d.UseAuditKey(context.Background(), signer, ""); err != nil {
		t.Fatal(err)
	}
	err = d.CheckQuick(context.Background(), CheckOptions{Links: 8})
	var ie *IntegrityError
	if !errors.As(err, &ie) || ie.Faults[0].Kind != FaultSignature || !strings.Contains(ie.Faults[0].Detail, "not signed, though key "+signer.KeyID()) {
		t.Fatalf("CheckQuick: %v", err)
	}
}

// TestCheckQuickFirstKey: a store that ran long without a key and starts
// signing passes the start-up check: the entries before the key are
// covered by the first signature, not faults.
func TestCheckQuickFirstKey(t *testing.T) {
	signer, pub := newSigner(t)
	s := quick(t)
	ctx := context.Background()
	for range 100 {
		if _, _, err := s.AppendAudit(ctx, AuditEntry{Actor: "qa.reviewer", Action: AuditConfigLoad}); err != nil {
			t.Fatal(err)
		}
	}
	if err := s.UseAuditKey(ctx, signer, ""); err != nil {
		t.Fatal(err)
	}
	appendOK(t, s, series("pc-hood", t0, 3))
	if err := s.CheckQuick(ctx, CheckOptions{Links: 8}); err != nil {
		t.Errorf("quick: %v", err)
	}
	if err := s.CheckFull(ctx, CheckOptions{Keys: []ed25519.PublicKey{pub}}); err != nil {
		t.Errorf("full: %v", err)
	}
}

// TestCheckFullFindsChangedReading: a reading changed in place (its
// checksum recomputed, nothing else) is found by the full check, without
// a key.
func TestCheckFullFindsChangedReading(t *testing.T) {
	path, _ := buildSigned(t, nil)
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		b := headOf(tx, "pc-asm-1")
		k, v := b.First()
		rd, err := decodeReading("pc-asm-1", k, v)
		if err != nil {
			return err
		}
		rd.Counts[0]++
		return b.Put(k, encodeReading(k, &rd))
	})
	_ = db.Close()
	if err != nil {
		t.Fatal(err)
	}
	s := openTest(t, filepath.Dir(path), Options{NoSync: true})
	err = s.CheckFull(context.Background(), CheckOptions{})
	var ie *IntegrityError
	errors.As(err, &ie)
	found := false
	for _, f := range ie.faultsOrNone() {
		found = found || (f.Kind == FaultRecords && strings.Contains(f.Detail, "changed after they were stored"))
	}
	if !errors.As(err, &ie) || !found {
		t.Fatalf("CheckFull: %v", err)
	}
}

// TestUncleanStopSigned: the unclean-stop entry written at Open is signed
// once the daemon sets its key, so a keyed verify finds nothing to say.
func TestUncleanStopSigned(t *testing.T) {
	signer, pub := newSigner(t)
	path, _ := buildSigned(t, signer)
	if err := os.WriteFile(filepath.Join(filepath.Dir(path), RunningMarker), []byte("2026-03-02T09:00:00Z pid 1\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	s, err := Open(filepath.Dir(path), Options{NoSync: true})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.UseAuditKey(context.Background(), signer, ""); err != nil {
		t.Fatal(err)
	}
	n := 0
	_ = s.ScanAudit(1, 0, func(e AuditEntry) error {
		if e.Action == AuditUncleanStop {
			n++
		}
		return nil
	})
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if n != 1 {
		t.Fatalf("%d unclean-stop entries, want 1", n)
	}
	if p, err := VerifyWith(path, VerifyOptions{Keys: []ed25519.PublicKey{pub}}); err != nil || len(p) > 0 {
		t.Errorf("keyed verify: %q %v", p, err)
	}
}

func TestLastBackupAndKeyID(t *testing.T) {
	s := quick(t)
	if _, ok, err := s.LastBackup(); ok || err != nil {
		t.Fatalf("a new store has a backup: %v %v", ok, err)
	}
	if id, ok := s.AuditKeyID(); ok {
		t.Fatalf("signing without a key: %s", id)
	}
	target := filepath.Join(t.TempDir(), "nightly.db")
	if _, err := s.BackupFile(target); err != nil {
		t.Fatal(err)
	}
	appendOK(t, s, series("pc-gown", t0, 2))
	e, ok, err := s.LastBackup()
	if err != nil || !ok || e.Subject != target {
		t.Fatalf("LastBackup: %+v %v %v, want %s", e, ok, err, target)
	}
	signer, _ := newSigner(t)
	if err := s.UseAuditKey(context.Background(), signer, ""); err != nil {
		t.Fatal(err)
	}
	if id, ok := s.AuditKeyID(); !ok || id != signer.KeyID() {
		t.Errorf("AuditKeyID %s %v, want %s", id, ok, signer.KeyID())
	}
}

// TestVerifyFileWithoutSignatureBucket: a file written before signatures
// existed verifies clean without the key.
func TestVerifyFileWithoutSignatureBucket(t *testing.T) {
	path, _ := buildSigned(t, nil)
	db, err := bolt.Open(path, 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	err = db.Update(func(tx *bolt.Tx) error { return tx.DeleteBucket(bucketAuditSig) })
	_ = db.Close()
	if err != nil {
		t.Fatal(err)
	}
	if p, err := Verify(path); err != nil || len(p) > 0 {
		t.Errorf("Verify: %q %v", p, err)
	}
	s := openTest(t, filepath.Dir(path), Options{NoSync: true})
	signer, pub := newSigner(t)
	if err := s.UseAuditKey(context.Background(), signer, ""); err != nil {
		t.Fatalf("signing an older file: %v", err)
	}
	if err := s.CheckFull(context.Background(), CheckOptions{Keys: []ed25519.PublicKey{pub}}); err != nil {
		t.Errorf("CheckFull: %v", err)
	}
}

// BenchmarkCheckQuick shows the start-up check's cost on a store of 20 000
// readings (bbolt's page check walks every page; the chain part is fixed).
func BenchmarkCheckQuick(b *testing.B) {
	s := openTest(b, b.TempDir(), Options{NoSync: true})
	for i := range 20 {
		if _, _, err := s.AppendReadings(context.Background(), series("pc-asm-1", t0.Add(time.Duration(i)*1000*time.Minute), 1000)); err != nil {
			b.Fatal(err)
		}
	}
	ctx := context.Background()
	for b.Loop() {
		if err := s.CheckQuick(ctx, CheckOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}

// faultsOrNone lists the faults of a possibly nil error.
func (e *IntegrityError) faultsOrNone() []Fault {
	if e == nil {
		return nil
	}
	return e.Faults
}
