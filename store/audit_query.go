package store

import (
	bolt "go.etcd.io/bbolt"
)

// maxBackupLookback bounds how far back LastBackup walks the chain: a
// damaged store must still answer quickly, and a backup older than this
// many entries is not the one to restore anyway.
const maxBackupLookback = 1 << 20

// LastBackup returns the newest backup entry of the audit chain (Subject
// is the file or target the backup went to), and false when there is
// none within the newest million entries. It reads entries one by one
// and skips one it cannot decode, so that a damaged store, which is when
// the answer matters, still gives it.
func (s *Store) LastBackup() (AuditEntry, bool, error) {
	if err := s.enter(); err != nil {
		return AuditEntry{}, false, err
	}
	defer s.exit()
	var found AuditEntry
	ok := false
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		c := tx.Bucket(bucketAudit).Cursor()
		n := 0
		for k, v := c.Last(); k != nil && n < maxBackupLookback; k, v = c.Prev() {
			n++
			e, err := decodeAudit(k, v)
			if err != nil || e.Action != AuditBackup {
				continue
			}
			found, ok = e, true
			return nil
		}
		return nil
	})
	return found, ok, err
}

// AuditKeyID returns the id of the key the store signs with, and false
// when it signs nothing: a daemon reports this at start and in its status.
func (s *Store) AuditKeyID() (string, bool) {
	st := signingFor(s.db)
	st.mu.Lock()
	defer st.mu.Unlock()
	if st.signer == nil {
		return "", false
	}
	return st.signer.id, true
}
