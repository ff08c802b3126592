package store

import (
	"bytes"
	"fmt"

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
