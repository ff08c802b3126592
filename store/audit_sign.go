package store

import (
	"context"
	"crypto/ed25519"
	"encoding/base64"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"sync"
	"time"

	bolt "go.etcd.io/bbolt"
)

// AuditKeyChange is the action of the entry the store writes when a
// signing key comes into use or replaces another: Subject is the new key
// id, Detail version 1 ‖ new key id (8) ‖ its public key (32) ‖ previous
// key id (8, zero for none). The entry is signed with the new key.
const AuditKeyChange = "audit-key"

// metaAuditKey holds the id (8 bytes) of the key the chain was last
// signed with and the number (8) of the entry that brought it in, so
// that a start with another key records a rotation and a check of the
// newest entries knows which of them must be signed.
var metaAuditKey = []byte("audit_key")

// maxPendingSign bounds the entries written before a key was set that the
// first UseAuditKey of the same process signs (the chain start, an
// unclean-stop entry, the daemon's start entry).
const maxPendingSign = 64

// signing is the per-file signing state: the store's write paths reach
// the audit chain through a bolt transaction only, so it is kept by
// database, not by Store.
type signing struct {
	mu      sync.Mutex
	signer  *AuditSigner
	pending []uint64 // entries this process wrote before the key was set
	keyed   bool     // UseAuditKey was called: stop collecting pending
}

var signingByDB sync.Map // *bolt.DB → *signing

func signingFor(db *bolt.DB) *signing {
	if v, ok := signingByDB.Load(db); ok {
		return v.(*signing)
	}
	v, _ := signingByDB.LoadOrStore(db, &signing{})
	return v.(*signing)
}

func forgetSigning(db *bolt.DB) { signingByDB.Delete(db) }

// entryMessage is what an entry's signature covers: its number and its
// chain hash, which covers every entry before it.
func entryMessage(seq uint64, hash [32]byte) []byte {
	m := append([]byte("cleanmon audit entry v1\x00"), seqKey(seq)...)
	return append(m, hash[:]...)
}

// signEntry stores the signature of entry seq in tx when a key is set,
// and otherwise remembers the entry for the key to come.
func signEntry(tx *bolt.Tx, seq uint64, hash [32]byte) error {
	st := signingFor(tx.DB())
	st.mu.Lock()
	signer := st.signer
	if signer == nil && !st.keyed && len(st.pending) < maxPendingSign {
		st.pending = append(st.pending, seq)
	}
	st.mu.Unlock()
	if signer == nil {
		return nil
	}
	return putSignature(tx, signer, seq, hash)
}

func putSignature(tx *bolt.Tx, signer *AuditSigner, seq uint64, hash [32]byte) error {
	b, err := tx.CreateBucketIfNotExists(bucketAuditSig)
	if err != nil {
		return err
	}
	id, _ := hex.DecodeString(signer.id)
	v := append(id, ed25519.Sign(signer.priv, entryMessage(seq, hash))...)
	if err := b.Put(seqKey(seq), v); err != nil {
		return fmt.Errorf("store: audit signature: %w", err)
	}
	return nil
}

// UseAuditKey makes the store sign every audit entry from now on with
// signer, and signs the entries this process wrote since Open (the chain
// start, an unclean-stop entry). When the chain was last signed with
// another key, or never, it first records an AuditKeyChange entry naming
// both: a rotation is part of the record. actor is who made the change
// (AuditActorSystem when empty). Call it right after Open; a daemon
// without a key should not call it, and should warn that the record can
// be rewritten by anyone who can write its data directory.
func (s *Store) UseAuditKey(ctx context.Context, signer *AuditSigner, actor string) error {
	if signer == nil || signer.priv == nil {
		return fmt.Errorf("%w: no key", ErrKey)
	}
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	st := signingFor(s.db)
	st.mu.Lock()
	st.signer, st.keyed = signer, true
	pending := st.pending
	st.pending = nil
	st.mu.Unlock()
	return s.update(func(tx *bolt.Tx) error {
		if err := signPending(tx, signer, pending); err != nil {
			return err
		}
		meta := tx.Bucket(bucketMeta)
		id, _ := hex.DecodeString(signer.id)
		prev := meta.Get(metaAuditKey)
		if len(prev) >= 8 && string(prev[:8]) == string(id) {
			return nil
		}
		detail := append([]byte{1}, id...)
		detail = append(detail, signer.Public()...)
		reason := "audit signing key " + signer.id + " in use"
		if len(prev) >= 8 {
			detail = append(detail, prev[:8]...)
			reason = "audit signing key rotated from " + hex.EncodeToString(prev[:8]) + " to " + signer.id
		} else {
			detail = append(detail, make([]byte, 8)...)
		}
		seq, _, err := appendAudit(tx, &AuditEntry{
			Time: time.Now().UTC(), Actor: actorOrSystem(actor), Action: AuditKeyChange,
			Subject: signer.id, Reason: reason, Detail: detail,
		})
		if err != nil {
			return err
		}
		return meta.Put(metaAuditKey, append(id, seqKey(seq)...))
	})
}

// signPending signs entries written by this process before the key was
// set; an entry since removed by a rolled-back transaction is skipped.
func signPending(tx *bolt.Tx, signer *AuditSigner, pending []uint64) error {
	audit := tx.Bucket(bucketAudit)
	for _, seq := range pending {
		v := audit.Get(seqKey(seq))
		if len(v) < 1+32 {
			continue
		}
		var hash [32]byte
		copy(hash[:], v[1:33])
		if err := putSignature(tx, signer, seq, hash); err != nil {
			return err
		}
	}
	return nil
}

// Checkpoint is the head of the audit chain at one time, signed when the
// store has a key. Publish it (log, notifiers, a system off the machine):
// a kept checkpoint lets CheckHead find a chain cut back or rewritten
// before it, with or without a key.
type Checkpoint struct {
	Seq   uint64    // number of the newest entry
	Hash  [32]byte  // its chain hash
	Time  time.Time // when the checkpoint was taken
	KeyID string    // the signing key's id; "" unsigned
	Sig   []byte    // Ed25519 signature of checkpointMessage; nil unsigned
}

func (c *Checkpoint) message() []byte {
	m := append([]byte("cleanmon audit checkpoint v1\x00"), seqKey(c.Seq)...)
	m = append(m, c.Hash[:]...)
	return binary.BigEndian.AppendUint64(m, uint64(c.Time.UnixNano()))
}

// Checkpoint returns the current chain head, signed with the key set by
// UseAuditKey if any.
func (s *Store) Checkpoint() (Checkpoint, error) {
	seq, hash, err := s.AuditHead()
	if err != nil {
		return Checkpoint{}, err
	}
	c := Checkpoint{Seq: seq, Hash: hash, Time: time.Now().UTC().Truncate(time.Microsecond)}
	st := signingFor(s.db)
	st.mu.Lock()
	signer := st.signer
	st.mu.Unlock()
	if signer != nil {
		c.KeyID = signer.id
		c.Sig = ed25519.Sign(signer.priv, c.message())
	}
	return c, nil
}

const checkpointPrefix = "cleanmon-audit-checkpoint/1"

// String is the one-line form of the checkpoint, for a log line, a
// notification or a file given to `verify --head`:
//
//	cleanmon-audit-checkpoint/1 seq=N hash=HEX time=RFC3339 [key=ID sig=BASE64URL]
func (c Checkpoint) String() string {
	s := fmt.Sprintf("%s seq=%d hash=%x time=%s", checkpointPrefix, c.Seq, c.Hash, c.Time.UTC().Format(time.RFC3339Nano))
	if c.KeyID != "" {
		s += " key=" + c.KeyID + " sig=" + base64.RawURLEncoding.EncodeToString(c.Sig)
	}
	return s
}

// ErrCheckpoint reports a checkpoint text that cannot be read or whose
// signature does not hold.
var ErrCheckpoint = errors.New("store: audit checkpoint")

// ParseCheckpoint reads the String form. Surrounding white space and
// other fields are refused, not skipped.
func ParseCheckpoint(text string) (Checkpoint, error) {
	fields := strings.Fields(text)
	if len(fields) == 0 || fields[0] != checkpointPrefix {
		return Checkpoint{}, fmt.Errorf("%w: the text does not start with %q", ErrCheckpoint, checkpointPrefix)
	}
	var c Checkpoint
	seen := map[string]bool{}
	for _, f := range fields[1:] {
		k, v, ok := strings.Cut(f, "=")
		if !ok || seen[k] {
			return Checkpoint{}, fmt.Errorf("%w: field %q is not key=value, or given twice", ErrCheckpoint, f)
		}
		seen[k] = true
		if err := c.setField(k, v); err != nil {
			return Checkpoint{}, fmt.Errorf("%w: %s: %w", ErrCheckpoint, k, err)
		}
	}
	if !seen["seq"] || !seen["hash"] || !seen["time"] || seen["key"] != seen["sig"] {
		return Checkpoint{}, fmt.Errorf("%w: seq, hash and time are required, key and sig go together", ErrCheckpoint)
	}
	return c, nil
}

func (c *Checkpoint) setField(k, v string) error {
	var err error
	switch k {
	case "seq":
		c.Seq, err = strconv.ParseUint(v, 10, 64)
	case "hash":
		var b []byte
		if b, err = hex.DecodeString(v); err == nil && len(b) != 32 {
			err = errors.New("not 32 bytes")
		}
		copy(c.Hash[:], b)
	case "time":
		c.Time, err = time.Parse(time.RFC3339Nano, v)
	case "key":
		if b, e := hex.DecodeString(v); e != nil || len(b) != 8 {
			err = errors.New("not an 8-byte hex key id")
		}
		c.KeyID = v
	case "sig":
		if c.Sig, err = base64.RawURLEncoding.DecodeString(v); err == nil && len(c.Sig) != ed25519.SignatureSize {
			err = errors.New("not an Ed25519 signature")
		}
	default:
		err = errors.New("unknown field")
	}
	return err
}

// CheckSignature verifies a signed checkpoint with the public key of its
// KeyID among keys. An unsigned checkpoint is refused when keys are given.
func (c Checkpoint) CheckSignature(keys []ed25519.PublicKey) error {
	if c.KeyID == "" {
		return fmt.Errorf("%w: the checkpoint is not signed", ErrCheckpoint)
	}
	for _, k := range keys {
		if KeyID(k) == c.KeyID {
			if ed25519.Verify(k, c.message(), c.Sig) {
				return nil
			}
			return fmt.Errorf("%w: the signature by key %s does not match: the checkpoint was altered", ErrCheckpoint, c.KeyID)
		}
	}
	return fmt.Errorf("%w: signed by key %s, which was not given", ErrCheckpoint, c.KeyID)
}
