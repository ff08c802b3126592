package store

import (
	"encoding/binary"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// AuditUncleanStop is the action of the entry the store writes when it is
// opened after a run that never closed it (kill -9, a crash, lost power):
// Subject names the last entry before it ("#N"), Detail holds that
// entry's number (8 bytes), its hash (32) and when the unclosed run
// opened the store (8, Unix ns), so the gap shows in the record.
const AuditUncleanStop = "unclean-stop"

// metaRunning is set while a process has the store open, and removed by
// Close: finding it at Open means the last run ended without closing.
var metaRunning = []byte("running")

// markRunning records an unclean stop when the marker of an earlier run
// is still there, then sets the marker of this one, in one transaction.
func (s *Store) markRunning() (unclean bool, err error) {
	err = s.update(func(tx *bolt.Tx) error {
		meta := tx.Bucket(bucketMeta)
		if prev := meta.Get(metaRunning); prev != nil {
			unclean = true
			if err := appendUncleanStop(tx, prev); err != nil {
				return err
			}
		}
		return meta.Put(metaRunning, nanosKey(time.Now().UnixNano()))
	})
	return unclean, err
}

func appendUncleanStop(tx *bolt.Tx, marker []byte) error {
	var last AuditEntry
	k, v := tx.Bucket(bucketAudit).Cursor().Last()
	what := "the chain is empty"
	if k != nil {
		e, err := decodeAudit(k, v)
		if err != nil {
			// Still record the stop; the damage is for Verify to report.
			last.Seq, _ = keySeq(k)
			what = fmt.Sprintf("#%d (unreadable)", last.Seq)
		} else {
			last = e
			what = fmt.Sprintf("#%d (%s at %s)", e.Seq, e.Action, e.Time.Format(time.RFC3339Nano))
		}
	}
	opened := "an unknown time"
	if ns, ok := keyNanos(marker); ok {
		opened = nsTime(ns).Format(time.RFC3339Nano)
	}
	detail := binary.BigEndian.AppendUint64(nil, last.Seq)
	detail = append(detail, last.Hash[:]...)
	detail = append(detail, marker...)
	_, _, err := appendAudit(tx, &AuditEntry{
		Time:    time.Now().UTC(),
		Actor:   AuditActorSystem,
		Action:  AuditUncleanStop,
		Subject: fmt.Sprintf("#%d", last.Seq),
		Reason:  fmt.Sprintf("the run that opened the store at %s ended without closing it (killed, crashed or lost power); the last entry before this one is %s", opened, what),
		Detail:  detail,
	})
	return err
}

// closeAudit clears the running marker and forgets the signing key; Close
// calls it once every write has finished. A failure leaves the marker, so
// the next start records an unclean stop: the safe side.
func (s *Store) closeAudit() {
	if err := s.update(func(tx *bolt.Tx) error { return tx.Bucket(bucketMeta).Delete(metaRunning) }); err != nil {
		s.log.Warn("store: could not record the clean stop; the next start will record an unclean one", "path", s.path, "err", err)
	}
	forgetSigning(s.db)
}
