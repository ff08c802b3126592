package store

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"strings"
	"time"
	"unicode"

	bolt "go.etcd.io/bbolt"
)

// Actions of the audit entries the store writes itself, inside the
// transaction of the change they record. AppendAudit refuses them, so
// that only the store can write what Verify checks against the data.
const (
	AuditChainStart = "chain-start"       // entry #1: the chain begins (with what the file held before it)
	AuditReadings   = "readings-batch"    // one AppendReadings call: its stored readings' digest
	AuditPressure   = "pressure-batch"    // one AppendPressure call: its stored samples' digest
	AuditOpState    = "operating-state"   // one SetOperatingState change
	AuditAlarm      = "alarm-transition"  // one RecordAlarms record, acknowledgements included
	AuditSweep      = "sweep"             // one Sweep transaction: its horizon and what it deleted
	AuditBackup     = "backup"            // a Backup or BackupFile that completed
	AuditEnv        = "environment-batch" // one AppendEnvironment call: its stored samples' digest
	// AuditEnvStart is written once, on the first start of a file whose
	// chain began before environment samples were covered: the newest key
	// and count of each environment sensor then, as the chain start does.
	AuditEnvStart = "environment-cover-start"
)

// Actions the daemon is expected to record through AppendAudit; any
// other action name of its own is allowed too.
const (
	AuditStart      = "start"       // the daemon started
	AuditStop       = "stop"        // the daemon stopped cleanly
	AuditConfigLoad = "config-load" // a configuration was loaded; Detail holds its SHA-256
)

// AuditActorSystem is the Actor of entries the store writes on the
// daemon's own account (ingest batches, sweeps, backups, alarm
// transitions the engine made by itself).
const AuditActorSystem = "cleanmon"

var storeActions = map[string]bool{
	AuditChainStart: true, AuditReadings: true, AuditPressure: true, AuditOpState: true,
	AuditAlarm: true, AuditSweep: true, AuditBackup: true, AuditKeyChange: true, AuditUncleanStop: true,
	AuditEnv: true, AuditEnvStart: true,
}

// AuditEntry is one entry of the audit trail. Each entry is chained to the
// one before it:
//
//	Hash(n) = SHA-256( Hash(n−1) ‖ n as 8 bytes big-endian ‖ body(n) )
//	body    = varint(Time, Unix ns) ‖ str(Actor) ‖ str(Action) ‖ str(Subject) ‖ str(Reason) ‖ str(Detail)
//
// with Hash(0) 32 zero bytes, varint the signed varint and str a uvarint
// length then the bytes (encoding/binary). Link computes it, so a system
// holding a copy of an earlier AuditHead can check the entries since.
type AuditEntry struct {
	Seq     uint64    // set by the store: 1, 2, 3, …
	Time    time.Time // when it happened; zero in AppendAudit means now
	Actor   string    // who: a user, a service, or AuditActorSystem
	Action  string    // what, e.g. AuditConfigLoad
	Subject string    // what it was done to: a zone, an alarm, a file
	Reason  string    // why, as given
	Detail  []byte    // anything else; for the store's own actions, its encoding
	Hash    [32]byte  // set by the store: the chain link of this entry
}

func (e *AuditEntry) body() []byte {
	b := make([]byte, 0, 16+len(e.Actor)+len(e.Action)+len(e.Subject)+len(e.Reason)+len(e.Detail)+8)
	b = binary.AppendVarint(b, e.Time.UnixNano())
	for _, s := range []string{e.Actor, e.Action, e.Subject, e.Reason} {
		b = appendBytes(b, []byte(s))
	}
	return appendBytes(b, e.Detail)
}

// Link is the hash that chains e, numbered e.Seq, to the entry before it
// whose hash is prev.
func (e AuditEntry) Link(prev [32]byte) [32]byte { return auditLink(prev, e.Seq, e.body()) }

func auditLink(prev [32]byte, seq uint64, body []byte) [32]byte {
	h := sha256.New()
	h.Write(prev[:])
	h.Write(seqKey(seq))
	h.Write(body)
	var out [32]byte
	h.Sum(out[:0])
	return out
}

func checkAuditEntry(e *AuditEntry) (field, reason string) {
	if why := checkName(e.Actor); why != "" {
		return "Actor", why
	}
	if why := checkName(e.Action); why != "" {
		return "Action", why
	}
	if strings.ContainsFunc(e.Action, unicode.IsControl) {
		// The index by action separates the action from the sequence
		// number with a NUL.
		return "Action", "has a control character"
	}
	if storeActions[e.Action] {
		return "Action", fmt.Sprintf("%q is written by the store itself", e.Action)
	}
	if len(e.Subject) > maxReasonLen {
		return "Subject", fmt.Sprintf("%d bytes, more than %d", len(e.Subject), maxReasonLen)
	}
	if len(e.Reason) > maxReasonLen {
		return "Reason", fmt.Sprintf("%d bytes, more than %d", len(e.Reason), maxReasonLen)
	}
	if len(e.Detail) > maxPayloadLen {
		return "Detail", fmt.Sprintf("%d bytes, more than %d", len(e.Detail), maxPayloadLen)
	}
	if why := checkTime(e.Time); why != "" {
		return "Time", why
	}
	return "", ""
}

// AppendAudit adds an entry to the audit chain durably, through the group
// commit, and returns its sequence number and hash, the new chain head.
// The store writes its own entries (the Audit* actions above the
// AuditStart group) itself; AppendAudit refuses those actions. A bad
// entry gives a *RecordError naming the field.
func (s *Store) AppendAudit(ctx context.Context, e AuditEntry) (seq uint64, head [32]byte, err error) {
	if err := s.enter(); err != nil {
		return 0, head, err
	}
	defer s.exit()
	if e.Time.IsZero() {
		e.Time = time.Now()
	}
	e.Time = e.Time.UTC()
	if field, reason := checkAuditEntry(&e); field != "" {
		return 0, head, &RecordError{Kind: "audit entry", Index: 0, Field: field, Reason: reason}
	}
	err = s.submit(ctx, 1, func(tx *bolt.Tx) error {
		seq, head, err = appendAudit(tx, &e)
		return err
	})
	if err != nil {
		return 0, [32]byte{}, err
	}
	return seq, head, nil
}

// appendAudit chains e onto the audit bucket of tx. The previous hash is
// read from the stored value without checking its checksum: appending
// must not stop on a damaged entry, and Verify reports it.
func appendAudit(tx *bolt.Tx, e *AuditEntry) (uint64, [32]byte, error) {
	b := tx.Bucket(bucketAudit)
	var prev [32]byte
	if k, v := b.Cursor().Last(); k != nil && len(v) >= 1+32 {
		copy(prev[:], v[1:33])
	}
	seq, err := b.NextSequence()
	if err != nil {
		return 0, prev, err
	}
	body := e.body()
	hash := auditLink(prev, seq, body)
	key := seqKey(seq)
	v := make([]byte, 0, 1+32+len(body)+crcLen)
	v = append(v, codecV1)
	v = append(v, hash[:]...)
	v = append(v, body...)
	if err := b.Put(key, seal(key, v)); err != nil {
		return 0, prev, fmt.Errorf("store: audit entry: %w", err)
	}
	if err := signEntry(tx, seq, hash); err != nil {
		return 0, prev, err
	}
	e.Seq = seq
	if err := indexAudit(tx, e); err != nil {
		return 0, prev, err
	}
	if err := indexAuditHour(tx, e); err != nil {
		return 0, prev, err
	}
	return seq, hash, nil
}

func decodeAudit(key, v []byte) (AuditEntry, error) {
	fail := func(err error) (AuditEntry, error) {
		return AuditEntry{}, fmt.Errorf("%w: audit entry %s: %v", ErrCorrupt, seqString(key), err)
	}
	seq, ok := keySeq(key)
	if !ok || seq == 0 {
		return fail(fmt.Errorf("key is not a nonzero 8-byte sequence number"))
	}
	body, err := unseal(key, v)
	if err != nil {
		return fail(err)
	}
	if len(body) < 32 {
		return fail(fmt.Errorf("value ends early"))
	}
	e := AuditEntry{Seq: seq}
	copy(e.Hash[:], body[:32])
	d := decoder{b: body[32:]}
	ns := d.varint("Time")
	e.Actor = d.str("Actor", maxNameLen)
	e.Action = d.str("Action", maxNameLen)
	e.Subject = d.str("Subject", maxReasonLen)
	e.Reason = d.str("Reason", maxReasonLen)
	e.Detail = d.bytes("Detail", maxPayloadLen)
	d.end()
	if d.err != nil {
		return fail(d.err)
	}
	e.Time = nsTime(ns)
	return e, nil
}

// auditBody returns the body of a stored entry as hashed, for Verify.
func auditBody(v []byte) []byte { return v[1+32 : len(v)-crcLen] }

// ScanAudit calls fn with the entries numbered from to to (to 0: the
// last), in chain order, inside one read transaction; an error from fn
// stops it and is returned. fn may keep the entry.
func (s *Store) ScanAudit(from, to uint64, fn func(AuditEntry) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	if to != 0 && from > to {
		return fmt.Errorf("%w: audit range from #%d is after to #%d", ErrInvalid, from, to)
	}
	return s.scanAudit(func(*bolt.Tx) uint64 { return from }, to, fn)
}

// scanAudit is ScanAudit with the first entry found in its own read
// transaction; the caller has entered the store.
func (s *Store) scanAudit(start func(*bolt.Tx) uint64, to uint64, fn func(AuditEntry) error) error {
	return s.view(func(tx *bolt.Tx, g *guard) error {
		c := tx.Bucket(bucketAudit).Cursor()
		for k, v := c.Seek(seqKey(start(tx))); k != nil; k, v = c.Next() {
			if n, _ := keySeq(k); to != 0 && n > to {
				return nil
			}
			e, err := decodeAudit(k, v)
			if err != nil {
				return err
			}
			if err := g.call(func() error { return fn(e) }); err != nil {
				return err
			}
		}
		return nil
	})
}

// AuditHead returns the sequence number and hash of the newest audit
// entry: hand them to a system outside the daemon, and a later rewrite of
// the chain up to there no longer matches them.
func (s *Store) AuditHead() (seq uint64, hash [32]byte, err error) {
	if err := s.enter(); err != nil {
		return 0, hash, err
	}
	defer s.exit()
	err = s.view(func(tx *bolt.Tx, _ *guard) error {
		k, v := tx.Bucket(bucketAudit).Cursor().Last()
		if k == nil {
			return nil
		}
		e, err := decodeAudit(k, v)
		if err != nil {
			return err
		}
		seq, hash = e.Seq, e.Hash
		return nil
	})
	return seq, hash, err
}
