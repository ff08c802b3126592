package store

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"

	bolt "go.etcd.io/bbolt"
)

// Backup writes a consistent snapshot of the whole database to w inside
// one read transaction; writers carry on meanwhile. The copy is a store
// file: name it cleanmon.db in a directory and Open or Verify it.
func (s *Store) Backup(w io.Writer) (int64, error) {
	if err := s.enter(); err != nil {
		return 0, err
	}
	defer s.exit()
	var n int64
	err := s.view(func(tx *bolt.Tx, g *guard) error {
		return g.call(func() error {
			var err error
			n, err = tx.WriteTo(w)
			return err
		})
	})
	if err != nil {
		return n, fmt.Errorf("store: backup: %w", err)
	}
	return n, nil
}

// BackupFile writes a snapshot to path atomically: to a temporary file in
// the same directory, fsynced, then renamed over path, so a crash leaves
// either the old backup or the new one, never half of one.
func (s *Store) BackupFile(path string) (n int64, err error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, filepath.Base(path)+".tmp-*")
	if err != nil {
		return 0, fmt.Errorf("store: backup: %w", err)
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			_ = f.Close()
			_ = os.Remove(tmp)
		}
	}()
	bw := bufio.NewWriterSize(f, 1<<20)
	if n, err = s.Backup(bw); err != nil {
		return n, err
	}
	if err = bw.Flush(); err != nil {
		return n, fmt.Errorf("store: backup: %w", err)
	}
	if err = f.Sync(); err != nil {
		return n, fmt.Errorf("store: backup: %w", err)
	}
	if err = f.Close(); err != nil {
		return n, fmt.Errorf("store: backup: %w", err)
	}
	if err = os.Rename(tmp, path); err != nil {
		return n, fmt.Errorf("store: backup: %w", err)
	}
	if d, derr := os.Open(dir); derr == nil {
		_ = d.Sync() // make the rename itself durable
		_ = d.Close()
	}
	return n, nil
}
