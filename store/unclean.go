package store

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"time"
	"unicode/utf8"

	bolt "go.etcd.io/bbolt"
)

// AuditUncleanStop is the action of the entry the store writes when it is
// opened after a run that never closed it (kill -9, a crash, lost power):
// Subject names the last entry before it ("#N"), Detail holds that
// entry's number (8 bytes), its hash (32) and when the unclosed run
// opened the store (8, Unix ns), so the gap shows in the record.
const AuditUncleanStop = "unclean-stop"

// RunningMarker is the file beside the database that exists while a
// process has the store open; Close removes it. Finding it at Open means
// the last run ended without closing. It is a file, not a key in the
// database, so that a backup of an open store does not carry it.
const RunningMarker = FileName + ".open"

// markRunning records an unclean stop when the marker of an earlier run
// is still there, then writes the marker of this one, durably.
func (s *Store) markRunning() (unclean bool, err error) {
	marker := filepath.Join(filepath.Dir(s.path), RunningMarker)
	prev, rerr := os.ReadFile(marker)
	switch {
	case rerr == nil:
		unclean = true
		if err := s.update(func(tx *bolt.Tx) error { return appendUncleanStop(tx, prev) }); err != nil {
			return true, err
		}
	case !errors.Is(rerr, fs.ErrNotExist):
		return false, fmt.Errorf("store: read %s: %w", marker, rerr)
	}
	return unclean, writeMarker(marker, fmt.Sprintf("%s pid %d\n", time.Now().UTC().Format(time.RFC3339Nano), os.Getpid()))
}

// writeMarker replaces the marker and syncs it and its directory, so that
// a power loss right after the start still leaves it.
func writeMarker(path, text string) error {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_TRUNC, 0o600)
	if err != nil {
		return fmt.Errorf("store: marker: %w", err)
	}
	_, werr := f.WriteString(text)
	serr := f.Sync()
	if err := errors.Join(werr, serr, f.Close()); err != nil {
		return fmt.Errorf("store: marker: %w", err)
	}
	d, err := os.Open(filepath.Dir(path))
	if err != nil {
		return fmt.Errorf("store: marker: %w", err)
	}
	defer d.Close()
	return d.Sync()
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
	if f := strings.Fields(string(marker)); len(f) > 0 && textOK(f[0]) {
		opened = f[0]
	}
	detail := binary.BigEndian.AppendUint64(nil, last.Seq)
	detail = append(detail, last.Hash[:]...)
	if t, err := time.Parse(time.RFC3339Nano, opened); err == nil {
		detail = binary.BigEndian.AppendUint64(detail, uint64(t.UnixNano()))
	} else {
		detail = binary.BigEndian.AppendUint64(detail, 0)
	}
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

// closeAudit removes the running marker and forgets the signing key;
// Close calls it once every write has finished. A failure leaves the
// marker, so the next start records an unclean stop: the safe side.
func (s *Store) closeAudit() {
	marker := filepath.Join(filepath.Dir(s.path), RunningMarker)
	if err := os.Remove(marker); err != nil && !errors.Is(err, fs.ErrNotExist) {
		s.log.Warn("store: could not record the clean stop; the next start will record an unclean one", "path", marker, "err", err)
	}
	forgetSigning(s.db)
}

// textOK reports whether s is printable text without control characters.
func textOK(s string) bool {
	for _, r := range s {
		if r < 0x20 || r == 0x7f || r == utf8.RuneError {
			return false
		}
	}
	return true
}
