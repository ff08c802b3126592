package store

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"time"

	bolt "go.etcd.io/bbolt"
)

// bbolt never gives a file's free pages back to the file system: the head
// readings a compaction moved into chunks leave their pages free inside
// the file, reused by later writes but still on disk. CompactFile copies
// a stopped store into a new file holding only the pages in use, each
// filled, and puts it in place of the old one. It is what `cleanmon
// compact` runs; a site runs it at a clean stop when the disk matters
// (after the first import of a long history, say), not as routine.

// compactingSuffix names the new file while it is written, beside the
// store; a leftover one (a crash during CompactFile) is removed by the
// next CompactFile and never opened as the store.
const compactingSuffix = ".compacting"

// ErrNotStopped: CompactFile found the store open by a process, or not
// stopped cleanly (its running marker is there: the next start must
// record the unclean stop first).
var ErrNotStopped = errors.New("store: not stopped cleanly")

// CompactFileResult is what CompactFile did: the file's bytes on disk
// (allocated blocks, not its apparent length) before and after.
type CompactFileResult struct {
	Before, After int64
	Took          time.Duration
}

// CompactFile rewrites the stopped store in dir into a file without free
// pages, atomically: the old file is replaced only once the new one is
// complete and durable, so a crash at any point leaves one whole store.
// It refuses a store another process holds (ErrLocked after lockWait) or
// one not stopped cleanly (ErrNotStopped). The audit chain, signatures and
// every record are copied as they are: Verify finds the same.
func CompactFile(dir string, lockWait time.Duration) (CompactFileResult, error) {
	var res CompactFileResult
	path := filepath.Join(dir, FileName)
	if _, err := os.Stat(filepath.Join(dir, RunningMarker)); err == nil {
		return res, fmt.Errorf("%w: %s exists; start and stop the daemon once, then compact", ErrNotStopped, RunningMarker)
	}
	begin := time.Now()
	before, err := allocatedBytes(path)
	if err != nil {
		return res, fmt.Errorf("store: compact %s: %w", path, err)
	}
	// Opened for writing: bbolt's exclusive lock keeps a daemon out while
	// the copy is made.
	src, err := openBolt(path, &bolt.Options{Timeout: max(lockWait, time.Millisecond), FreelistType: bolt.FreelistMapType})
	if err != nil {
		return res, err
	}
	defer src.Close()
	tmp := path + compactingSuffix
	_ = os.Remove(tmp)
	dst, err := bolt.Open(tmp, 0o600, &bolt.Options{NoSync: true, FreelistType: bolt.FreelistMapType})
	if err != nil {
		return res, fmt.Errorf("store: compact: create %s: %w", tmp, err)
	}
	dst.AllocSize = allocSize
	if err := bolt.Compact(dst, src, 64<<20); err != nil {
		_ = dst.Close()
		_ = os.Remove(tmp)
		return res, fmt.Errorf("store: compact %s: %w", path, err)
	}
	if err := dst.Sync(); err != nil {
		_ = dst.Close()
		_ = os.Remove(tmp)
		return res, fmt.Errorf("store: compact: sync %s: %w", tmp, err)
	}
	if err := dst.Close(); err != nil {
		_ = os.Remove(tmp)
		return res, fmt.Errorf("store: compact: close %s: %w", tmp, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		_ = os.Remove(tmp)
		return res, fmt.Errorf("store: compact: replace %s: %w", path, err)
	}
	if err := syncDir(dir); err != nil {
		return res, fmt.Errorf("store: compact: sync %s: %w", dir, err)
	}
	after, err := allocatedBytes(path)
	if err != nil {
		return res, err
	}
	return CompactFileResult{Before: before, After: after, Took: time.Since(begin)}, nil
}

// AllocatedBytes is the disk the store in dir takes: the blocks allocated
// to its file (st_blocks × 512 where the system reports them, else the
// file's length), the way du counts, not the file's apparent length.
func AllocatedBytes(dir string) (int64, error) {
	return allocatedBytes(filepath.Join(dir, FileName))
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	defer d.Close()
	return d.Sync()
}
