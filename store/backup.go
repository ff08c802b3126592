package store

import (
	"bufio"
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Backup writes a consistent snapshot of the whole database to w inside
// one read transaction; writers carry on meanwhile. The copy is a store
// file: name it cleanmon.db in a directory and Open or Verify it. Once
// the copy is written, an AuditBackup entry records its size and the
// audit head it holds; if only that entry fails, the error says so.
func (s *Store) Backup(w io.Writer) (int64, error) {
	if err := s.enter(); err != nil {
		return 0, err
	}
	defer s.exit()
	n, seq, head, err := s.backup(w)
	if err != nil {
		return n, err
	}
	return n, s.auditBackup("stream", n, seq, head)
}

// backup writes the snapshot and returns the audit head inside it.
func (s *Store) backup(w io.Writer) (n int64, seq uint64, head [32]byte, err error) {
	err = s.view(func(tx *bolt.Tx, g *guard) error {
		if k, v := tx.Bucket(bucketAudit).Cursor().Last(); k != nil && len(v) >= 1+32 {
			seq, _ = keySeq(k)
			copy(head[:], v[1:33])
		}
		return g.call(func() error {
			var err error
			n, err = tx.WriteTo(w)
			return err
		})
	})
	if err != nil {
		return n, 0, head, fmt.Errorf("store: backup: %w", err)
	}
	return n, seq, head, nil
}

// auditBackup chains the entry of a completed backup. Detail:
//
//	uvarint bytes | 8-byte audit sequence | 32-byte audit hash (the copy's head)
func (s *Store) auditBackup(target string, n int64, seq uint64, head [32]byte) error {
	d := binary.AppendUvarint(nil, uint64(n))
	d = append(d, seqKey(seq)...)
	d = append(d, head[:]...)
	e := AuditEntry{
		Time: time.Now().UTC(), Actor: AuditActorSystem, Action: AuditBackup,
		Subject: cutText(target, maxReasonLen),
		Reason:  fmt.Sprintf("backup of %d bytes, holding the audit chain to entry #%d", n, seq),
		Detail:  d,
	}
	err := s.submit(context.Background(), 1, func(tx *bolt.Tx) error {
		_, _, err := appendAudit(tx, &e)
		return err
	})
	if err != nil {
		return fmt.Errorf("store: backup written, but its audit entry failed: %w", err)
	}
	return nil
}

// BackupFile writes a snapshot to path atomically: to a temporary file in
// the same directory, fsynced, then renamed over path, so a crash leaves
// either the old backup or the new one, never half of one. The audit
// entry follows the rename, as with Backup.
func (s *Store) BackupFile(path string) (n int64, err error) {
	if err := s.enter(); err != nil {
		return 0, err
	}
	defer s.exit()
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
	var (
		seq  uint64
		head [32]byte
	)
	if n, seq, head, err = s.backup(bw); err != nil {
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
	return n, s.auditBackup(path, n, seq, head)
}
