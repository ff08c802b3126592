package store

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"
	"time"
)

// A store whose head churned (many small batches, compacted into chunks)
// takes less disk after CompactFile, verifies clean, and holds the same
// readings and audit head.
func TestCompactFile(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	const counters, per = 20, 1200
	for c := range counters {
		rs := series(fmt.Sprintf("pc-fill-%d", c), t0, per)
		for i := 0; i < per; i += 50 {
			appendOK(t, s, rs[i:i+50])
		}
	}
	seq, head, err := s.AuditHead()
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	res, err := CompactFile(dir, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	if res.After <= 0 || res.After >= res.Before {
		t.Fatalf("allocated bytes %d before, %d after", res.Before, res.After)
	}
	if got, _ := AllocatedBytes(dir); got != res.After {
		t.Errorf("AllocatedBytes %d, result says %d", got, res.After)
	}
	if _, err := os.Stat(filepath.Join(dir, FileName+compactingSuffix)); !os.IsNotExist(err) {
		t.Errorf("the temporary file is left: %v", err)
	}
	problems, err := Verify(dir)
	if err != nil || len(problems) != 0 {
		t.Fatalf("Verify after CompactFile: %q %v", problems, err)
	}
	s = openTest(t, dir, Options{NoSync: true})
	defer s.Close()
	n := 0
	for c := range counters {
		if err := s.ScanReadings(fmt.Sprintf("pc-fill-%d", c), time.Time{}, time.Time{}, func(Reading) error { n++; return nil }); err != nil {
			t.Fatal(err)
		}
	}
	if n != counters*per {
		t.Errorf("%d readings after CompactFile, want %d", n, counters*per)
	}
	seq2, head2, err := s.AuditHead()
	if err != nil || seq2 < seq || (seq2 == seq && head2 != head) {
		t.Errorf("audit head #%d %x, was #%d %x (%v)", seq2, head2[:4], seq, head[:4], err)
	}
}

// CompactFile refuses a store that is open, and one whose last stop was
// not clean, and changes neither.
func TestCompactFileRefuses(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	appendOK(t, s, series("pc-fill-1", t0, 10))
	if _, err := CompactFile(dir, 50*time.Millisecond); !errors.Is(err, ErrNotStopped) && !errors.Is(err, ErrLocked) {
		t.Errorf("open store: %v, want ErrNotStopped or ErrLocked", err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	before, _ := os.ReadFile(filepath.Join(dir, FileName))
	if err := os.WriteFile(filepath.Join(dir, RunningMarker), []byte("x"), 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := CompactFile(dir, time.Second); !errors.Is(err, ErrNotStopped) {
		t.Errorf("marker left: %v, want ErrNotStopped", err)
	}
	after, _ := os.ReadFile(filepath.Join(dir, FileName))
	if string(before) != string(after) {
		t.Error("a refused CompactFile changed the file")
	}
}

// A clean stop rewrites a file that is mostly free pages (the head's
// high-water mark after a burst, compacted into chunks at the stop); the
// store opens and verifies as before, and KeepFreePages leaves it be.
func TestCloseShrinks(t *testing.T) {
	for _, keep := range []bool{false, true} {
		t.Run(fmt.Sprintf("keep=%v", keep), func(t *testing.T) {
			dir := t.TempDir()
			s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1, KeepFreePages: keep})
			for c := range 70 {
				appendOK(t, s, series(fmt.Sprintf("pc-fill-%d", c), t0, 2500))
			}
			if err := s.Close(); err != nil {
				t.Fatal(err)
			}
			info, err := os.Stat(filepath.Join(dir, FileName))
			if err != nil {
				t.Fatal(err)
			}
			shrunk := info.Size() < shrinkMinBytes
			if shrunk == keep {
				t.Errorf("file %d bytes after the stop (KeepFreePages %v)", info.Size(), keep)
			}
			if problems, err := Verify(dir); err != nil || len(problems) != 0 {
				t.Fatalf("Verify: %q %v", problems, err)
			}
		})
	}
}
