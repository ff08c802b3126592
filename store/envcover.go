package store

import (
	"time"

	bolt "go.etcd.io/bbolt"
)

// coverEnvironmentOnce starts the audit chain's cover of environment
// samples in a file whose chain began before they were covered: one
// AuditEnvStart entry records each sensor's newest key and count then, so
// Verify asks the chain only for the samples stored since. A file whose
// chain starts now has them in its chain start already.
func (s *Store) coverEnvironmentOnce() error {
	done := false
	if err := s.db.View(func(tx *bolt.Tx) error {
		done = tx.Bucket(bucketMeta).Get(metaEnvCovered) != nil
		return nil
	}); err != nil || done {
		return err
	}
	return s.update(func(tx *bolt.Tx) error {
		detail, err := baselineDetail(tx, []byte{coverEnv}, false)
		if err != nil {
			return err
		}
		if _, _, err := appendAudit(tx, &AuditEntry{
			Time: time.Now().UTC(), Actor: AuditActorSystem, Action: AuditEnvStart,
			Reason: "environment samples covered by the audit chain from here on", Detail: detail,
		}); err != nil {
			return err
		}
		return tx.Bucket(bucketMeta).Put(metaEnvCovered, []byte{1})
	})
}
