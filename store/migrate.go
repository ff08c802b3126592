package store

import (
	"encoding/binary"
	"fmt"
	"os"
	"time"

	bolt "go.etcd.io/bbolt"
)

// upgrade brings a file of an older schema to this one, in place, after
// a backup next to it. Schema 1 kept every reading as its own value and
// kept per-minute rollups; schema 2 reads those values as they are (they
// are the head: the background compaction moves them into chunks, a
// counter at a time, like any new reading), so the upgrade itself only
// drops the per-minute rollups (at the sample period they cost more than
// the readings and save no work: a minute step is computed from the
// readings) and records the new version. The backup is
// cleanmon.db.schema1-<time>.bak in the data directory: a copy the
// older program can still open.
func (s *Store) upgrade() error {
	var ver uint64
	if err := s.view(func(tx *bolt.Tx, _ *guard) error {
		ver, _ = binary.Uvarint(tx.Bucket(bucketMeta).Get(metaSchema))
		return nil
	}); err != nil {
		return err
	}
	if ver >= schemaVersion {
		return nil
	}
	bak := fmt.Sprintf("%s.schema%d-%s.bak", s.path, ver, time.Now().UTC().Format("20060102T150405Z"))
	if _, err := s.backupFile(bak); err != nil {
		return fmt.Errorf("store: backup before the schema %d → %d upgrade: %w", ver, schemaVersion, err)
	}
	s.log.Info("store: upgrading the file's schema", "from", ver, "to", schemaVersion, "backup", bak)
	return s.update(func(tx *bolt.Tx) error {
		if tx.Bucket(bucketRollup1m) != nil {
			if err := tx.DeleteBucket(bucketRollup1m); err != nil {
				return err
			}
		}
		return tx.Bucket(bucketMeta).Put(metaSchema, binary.AppendUvarint(nil, schemaVersion))
	})
}

// backupFile is the copy of BackupFile without an audit entry: the
// upgrade runs before the committer that entries go through.
func (s *Store) backupFile(path string) (int64, error) {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return 0, err
	}
	n, _, _, err := s.backup(f)
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		_ = os.Remove(path)
	}
	return n, err
}
