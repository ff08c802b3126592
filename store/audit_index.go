package store

import (
	"bytes"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// bucketAuditIndex lists the entries written through AppendAudit by
// action: action ‖ 0 ‖ sequence → nothing. Those are the rare entries
// (sign-ins, signatures, account and configuration changes), a few among
// the millions of ingest covers a year brings, so a reader wanting every
// signature at start finds them without walking the chain. The chain stays
// the record; Verify checks the index against it.
var bucketAuditIndex = []byte("audit_by_action")

// auditIndexKey is the index key of entry seq of action.
func auditIndexKey(action string, seq uint64) []byte {
	k := make([]byte, 0, len(action)+1+8)
	k = append(k, action...)
	k = append(k, 0)
	return append(k, seqKey(seq)...)
}

// indexedAction reports whether entries of action are indexed: those a
// caller writes, not the store's own.
func indexedAction(action string) bool { return !storeActions[action] }

// indexAudit records e in the index when its action is indexed. Actions
// hold no NUL (checkAuditEntry), so the prefix of one action never runs
// into another's.
func indexAudit(tx *bolt.Tx, e *AuditEntry) error {
	if !indexedAction(e.Action) {
		return nil
	}
	b := tx.Bucket(bucketAuditIndex)
	if b == nil {
		return nil // a file opened before the index existed: built at its next writable open
	}
	if err := b.Put(auditIndexKey(e.Action, e.Seq), nil); err != nil {
		return fmt.Errorf("store: audit index: %w", err)
	}
	return nil
}

// buildAuditIndex fills the index of a file written before it existed,
// with one walk of the chain. An entry that cannot be read is left out:
// Verify reports it, and the index lists what can be shown.
func buildAuditIndex(tx *bolt.Tx) error {
	audit, idx := tx.Bucket(bucketAudit), tx.Bucket(bucketAuditIndex)
	if audit == nil || idx == nil {
		return nil
	}
	c := audit.Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		e, err := decodeAudit(k, v)
		if err != nil || !indexedAction(e.Action) {
			continue
		}
		if err := idx.Put(auditIndexKey(e.Action, e.Seq), nil); err != nil {
			return fmt.Errorf("store: building the audit index: %w", err)
		}
	}
	return nil
}

// ScanAuditAction calls fn with every entry of action written through
// AppendAudit, in chain order, inside one read transaction; an error from
// fn stops it and is returned. It reads only those entries, through the
// index by action, which Open builds for a file written before it.
func (s *Store) ScanAuditAction(action string, fn func(AuditEntry) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	if !indexedAction(action) {
		return fmt.Errorf("%w: audit action %q is the store's own and not indexed: use ScanAudit", ErrInvalid, action)
	}
	return s.view(func(tx *bolt.Tx, g *guard) error {
		audit, idx := tx.Bucket(bucketAudit), tx.Bucket(bucketAuditIndex)
		if idx == nil {
			return fmt.Errorf("%w: no %q bucket", ErrCorrupt, bucketAuditIndex)
		}
		prefix := append([]byte(action), 0)
		c := idx.Cursor()
		for k, _ := c.Seek(prefix); k != nil && bytes.HasPrefix(k, prefix); k, _ = c.Next() {
			key := k[len(prefix):]
			v := audit.Get(key)
			if v == nil {
				return fmt.Errorf("%w: the audit index lists entry %s of %q, which is not in the chain", ErrCorrupt, seqString(key), action)
			}
			e, err := decodeAudit(key, v)
			if err != nil {
				return err
			}
			if e.Action != action {
				return fmt.Errorf("%w: the audit index lists entry %s under %q, but it is %q", ErrCorrupt, seqString(key), action, e.Action)
			}
			if err := g.call(func() error { return fn(e) }); err != nil {
				return err
			}
		}
		return nil
	})
}

// auditIndexCheck compares the index with the chain for Verify: every
// indexed entry listed, and nothing else.
type auditIndexCheck struct {
	idx     *bolt.Bucket
	audit   *bolt.Bucket
	listed  int // entries of the chain that should be in the index
	missing []uint64
}

// saw notes an entry of the chain.
func (c *auditIndexCheck) saw(e *AuditEntry) {
	if c.idx == nil || !indexedAction(e.Action) {
		return
	}
	c.listed++
	if c.idx.Get(auditIndexKey(e.Action, e.Seq)) == nil && len(c.missing) < 10 {
		c.missing = append(c.missing, e.Seq)
	}
}

// faults lists what is wrong with the index after the chain was walked;
// blind: an entry of the chain could not be read, so the count of what
// should be listed is not known.
func (c *auditIndexCheck) faults(blind bool) []string {
	if c.idx == nil {
		return nil
	}
	var out []string
	for _, seq := range c.missing {
		out = append(out, fmt.Sprintf("audit index: entry #%d is not listed under its action (a search by action would not show it)", seq))
	}
	n := 0
	cur := c.idx.Cursor()
	for k, _ := cur.First(); k != nil; k, _ = cur.Next() {
		n++
		i := bytes.IndexByte(k, 0)
		if i < 0 || len(k) != i+1+8 {
			out = append(out, fmt.Sprintf("audit index: key %x is not an action and a sequence number", k))
			continue
		}
		action, key := string(k[:i]), k[i+1:]
		v := c.audit.Get(key)
		if v == nil {
			out = append(out, fmt.Sprintf("audit index: lists entry %s of %q, which is not in the chain", seqString(key), action))
			continue
		}
		if e, err := decodeAudit(key, v); err == nil && e.Action != action {
			out = append(out, fmt.Sprintf("audit index: lists entry %s under %q, but it is %q", seqString(key), action, e.Action))
		}
	}
	if n != c.listed && len(out) == 0 && !blind {
		out = append(out, fmt.Sprintf("audit index: %d keys for %d entries", n, c.listed))
	}
	return out
}

// bucketAuditHours lets a listing of recent entries start near its first
// one instead of at entry #1: hour start (8-byte time key) → the first
// entry appended at or after it. An entry's append time is taken as the
// later of the clock and its own time, and never earlier than the entry
// before it, so every entry before the one a key names has a time before
// that key's hour: a listing from time F can start at the entry of the
// last key at or before F and miss nothing. Verify checks exactly that.
var bucketAuditHours = []byte("audit_by_hour")

// auditClock is the clock of the time index; a variable for tests.
var auditClock = time.Now

// indexAuditHour records seq under the hour of its append time when it is
// the first entry of a later hour than the last one recorded.
func indexAuditHour(tx *bolt.Tx, e *AuditEntry) error {
	b := tx.Bucket(bucketAuditHours)
	if b == nil {
		return nil // a file opened before the index existed: built at its next writable open
	}
	at := auditClock()
	if e.Time.After(at) {
		at = e.Time
	}
	return putAuditHour(b, at, e.Seq)
}

func putAuditHour(b *bolt.Bucket, at time.Time, seq uint64) error {
	h := at.UTC().Truncate(time.Hour)
	if k, _ := b.Cursor().Last(); k != nil {
		if last, ok := keyNanos(k); ok && last >= h.UnixNano() {
			return nil
		}
	}
	if err := b.Put(timeKey(h), seqKey(seq)); err != nil {
		return fmt.Errorf("store: audit time index: %w", err)
	}
	return nil
}

// buildAuditHours fills the time index of a file written before it, with
// the latest entry time so far standing for each entry's append time.
func buildAuditHours(tx *bolt.Tx) error {
	audit, idx := tx.Bucket(bucketAudit), tx.Bucket(bucketAuditHours)
	if audit == nil || idx == nil {
		return nil
	}
	var latest time.Time
	c := audit.Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		e, err := decodeAudit(k, v)
		if err != nil {
			continue // Verify reports it; its time is not known
		}
		if e.Time.After(latest) {
			latest = e.Time
		}
		if err := putAuditHour(idx, latest, e.Seq); err != nil {
			return err
		}
	}
	return nil
}

// ScanAuditSince calls fn with every entry from the first one that can
// have a time at or after since to the last, in chain order, inside one
// read transaction, as ScanAudit does: entries before since may be among
// them (fn filters), none at or after it is left out.
func (s *Store) ScanAuditSince(since time.Time, fn func(AuditEntry) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	return s.scanAudit(func(tx *bolt.Tx) uint64 { return auditStartFor(tx.Bucket(bucketAuditHours), since) }, 0, fn)
}

// auditStartFor is the entry of the last hour key at or before since; 0
// (the first entry) when there is none or no index.
func auditStartFor(idx *bolt.Bucket, since time.Time) uint64 {
	if idx == nil {
		return 0
	}
	c := idx.Cursor()
	k, v := c.Seek(timeKey(since.UTC().Truncate(time.Hour).Add(time.Hour)))
	if k == nil {
		k, v = c.Last()
	} else {
		k, v = c.Prev()
	}
	if k == nil {
		return 0
	}
	if ns, ok := keyNanos(k); !ok || ns > since.UnixNano() {
		return 0
	}
	seq, ok := keySeq(v)
	if !ok {
		return 0
	}
	return seq
}

// auditHoursCheck compares the time index with the chain for Verify: every
// entry before the one a key names has a time before that key's hour, so
// that a listing starting there leaves nothing out.
type auditHoursCheck struct {
	keys    []auditHourKey
	next    int       // the first key whose entry is not reached yet
	latest  time.Time // the latest entry time so far
	latestN uint64    // the entry that has it
	faults  []string
}

type auditHourKey struct {
	hour time.Time
	seq  uint64
}

func newAuditHoursCheck(idx *bolt.Bucket) *auditHoursCheck {
	c := &auditHoursCheck{}
	if idx == nil {
		return c
	}
	var prev uint64
	cur := idx.Cursor()
	for k, v := cur.First(); k != nil; k, v = cur.Next() {
		ns, okK := keyNanos(k)
		seq, okV := keySeq(v)
		if !okK || !okV || seq <= prev {
			c.faults = append(c.faults, fmt.Sprintf("audit time index: key %x → %x is not an hour and a later entry", k, v))
			continue
		}
		prev = seq
		c.keys = append(c.keys, auditHourKey{hour: nsTime(ns), seq: seq})
	}
	return c
}

// saw notes an entry of the chain, in order.
func (c *auditHoursCheck) saw(e *AuditEntry) {
	c.keysUpTo(e.Seq)
	if e.Time.After(c.latest) {
		c.latest, c.latestN = e.Time, e.Seq
	}
}

// finish checks the keys naming entries past the end of the chain: a
// listing from their hour would start after every entry.
func (c *auditHoursCheck) finish() { c.keysUpTo(^uint64(0)) }

// keysUpTo checks the keys naming an entry up to seq against the entries
// before it.
func (c *auditHoursCheck) keysUpTo(seq uint64) {
	for c.next < len(c.keys) && c.keys[c.next].seq <= seq {
		k := c.keys[c.next]
		if !c.latest.IsZero() && !c.latest.Before(k.hour) {
			c.faults = append(c.faults, fmt.Sprintf("audit time index: listings from %s start at entry #%d, after entry #%d of %s: they would leave it out",
				k.hour.Format(time.RFC3339), k.seq, c.latestN, c.latest.Format(time.RFC3339Nano)))
		}
		c.next++
	}
}
