package store

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"
)

// fillUntilFull appends 500-reading batches until a commit reports
// ErrDiskFull, and checks that nothing of the failed batch went in.
func fillUntilFull(t *testing.T, s *Store) (acked int, failed []Reading) {
	t.Helper()
	for i := 0; i < 2000; i++ {
		batch := series("pc-asm-1", t0.Add(time.Duration(i*500)*time.Minute), 500)
		_, _, err := s.AppendReadings(context.Background(), batch)
		if err == nil {
			acked += len(batch)
			continue
		}
		if !errors.Is(err, ErrDiskFull) {
			t.Fatalf("batch %d: %v, want ErrDiskFull", i, err)
		}
		t.Logf("after %d readings: %v", acked, err)
		if got := scanAll(t, s, "pc-asm-1", batch[0].Time, time.Time{}); len(got) != 0 {
			t.Fatalf("%d readings of the failed batch were stored", len(got))
		}
		if r := rollupsAll(t, s, "pc-asm-1", time.Minute); len(r) != acked {
			t.Fatalf("%d minute rollups for %d acknowledged readings", len(r), acked)
		}
		return acked, batch
	}
	t.Fatal("the store never filled up")
	return 0, nil
}

// usableAfterFull checks reads, frees space by Sweep, writes the failed
// batch again, and verifies the file.
func usableAfterFull(t *testing.T, s *Store, acked int, failed []Reading) {
	t.Helper()
	if got := scanAll(t, s, "pc-asm-1", time.Time{}, time.Time{}); len(got) != acked {
		t.Fatalf("%d readings readable after disk full, %d acknowledged", len(got), acked)
	}
	res, err := s.Sweep(context.Background(), t0.Add(time.Duration(acked/2)*time.Minute))
	if err != nil || res.Readings != acked/2 {
		t.Fatalf("sweep after disk full: %+v %v", res, err)
	}
	if acc, _ := appendOK(t, s, failed); acc != len(failed) {
		t.Fatalf("re-append accepted %d", acc)
	}
	path := s.Path()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after disk full: %q %v", problems, err)
	}
}

func TestDiskFullMaxBytes(t *testing.T) {
	s := openTest(t, t.TempDir(), Options{NoSync: true, MaxBytes: 2 << 20})
	acked, failed := fillUntilFull(t, s)
	if acked == 0 {
		t.Fatal("the cap was hit by the first batch; the test proves nothing")
	}
	usableAfterFull(t, s, acked, failed)
}

// TestDiskFullENOSPC fills a real small file system. It needs one, so it
// runs only when CLEANMON_TEST_SMALLFS names a directory on it, e.g.
//
//	mount -t tmpfs -o size=8m tmpfs /mnt/small
//	CLEANMON_TEST_SMALLFS=/mnt/small go test -run ENOSPC ./store/
func TestDiskFullENOSPC(t *testing.T) {
	root := os.Getenv("CLEANMON_TEST_SMALLFS")
	if root == "" {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatal("CLEANMON_TEST_SMALLFS is not set and CLEANMON_REQUIRE_TOOLS is: .ci/run mounts one")
		}
		t.Skip("CLEANMON_TEST_SMALLFS not set: no small file system to fill")
	}
	// The daemon's disk-full test fills the same file system from another
	// package's test binary: one filler at a time.
	lock, err := os.OpenFile(filepath.Join(root, ".fill-lock"), os.O_CREATE|os.O_RDWR, 0o600)
	if err != nil {
		t.Fatal(err)
	}
	if err := syscall.Flock(int(lock.Fd()), syscall.LOCK_EX); err != nil {
		t.Fatal(err)
	}
	dir, err := os.MkdirTemp(root, "store-enospc-")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		_ = os.RemoveAll(dir)
		_ = lock.Close() // releases the lock
	})
	s := openTest(t, dir, Options{})
	acked, failed := fillUntilFull(t, s)
	usableAfterFull(t, s, acked, failed)
}
