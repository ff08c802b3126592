package store

import (
	"crypto/ed25519"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"time"

	bolt "go.etcd.io/bbolt"
)

// VerifyOptions adds to Verify the checks that need something kept away
// from the data directory.
type VerifyOptions struct {
	// Keys are the public keys the audit chain was signed with (every key
	// in use since the chain began, rotations included). With keys, a
	// rewrite of any entry, of the records an entry covers, or of the
	// chain after it is found even when the hashes were recomputed.
	Keys []ed25519.PublicKey
	// Head is a kept checkpoint (Store.Checkpoint): the chain must still
	// hold its entry with its hash. It finds entries removed from the
	// chain's tail, which neither hashes nor signatures can.
	Head *Checkpoint
}

// VerifyWith runs Verify and then the checks opt asks for, on a file no
// daemon holds open. Problems are listed as Verify lists them.
func VerifyWith(path string, opt VerifyOptions) ([]string, error) {
	problems, err := Verify(path)
	if err != nil || (len(opt.Keys) == 0 && opt.Head == nil) {
		return problems, err
	}
	if info, serr := os.Stat(path); serr == nil && info.IsDir() {
		path = filepath.Join(path, FileName)
	}
	db, err := openBolt(path, &bolt.Options{ReadOnly: true, Timeout: DefaultLockTimeout})
	if err != nil {
		return problems, err
	}
	defer db.Close()
	v := &verifier{}
	v.guarded("audit signatures", func() {
		_ = db.View(func(tx *bolt.Tx) error {
			v.keyed(tx, opt, 1)
			return nil
		})
	})
	return append(problems, v.problems...), nil
}

// keyed checks the signatures of the entries numbered from on, and the
// kept checkpoint.
func (v *verifier) keyed(tx *bolt.Tx, opt VerifyOptions, from uint64) {
	if opt.Head != nil {
		v.head(tx, opt.Head, opt.Keys)
	}
	if len(opt.Keys) == 0 {
		return
	}
	keys := make(map[string]ed25519.PublicKey, len(opt.Keys))
	for _, k := range opt.Keys {
		keys[KeyID(k)] = k
	}
	sc := &sigCheck{verifier: v, keys: keys}
	if meta := tx.Bucket(bucketMeta); from > 1 && meta != nil {
		// A partial walk starts after the key-change entry: take the key
		// in force from where the store keeps it.
		if v := meta.Get(metaAuditKey); len(v) == 16 {
			if since, _ := keySeq(v[8:]); since < from {
				sc.active, sc.activeSince = hex.EncodeToString(v[:8]), since
			}
		}
	}
	sc.walk(tx, from)
}

// sigCheck is the state of one walk over the signatures.
type sigCheck struct {
	*verifier
	keys           map[string]ed25519.PublicKey
	active         string // key id in force, from the last key-change entry
	activeSince    uint64
	good, last     uint64 // entries with a valid signature; the newest of them
	gapFrom, gapTo uint64 // a run of unsigned entries under a key
}

func (sc *sigCheck) walk(tx *bolt.Tx, from uint64) {
	audit, sigs := tx.Bucket(bucketAudit), tx.Bucket(bucketAuditSig)
	if audit == nil {
		return
	}
	var lastSeq uint64
	c := audit.Cursor()
	for k, val := c.Seek(seqKey(from)); k != nil; k, val = c.Next() {
		seq, ok := keySeq(k)
		if !ok || len(val) < 1+32 {
			continue // the chain walk reports it
		}
		lastSeq = seq
		var hash [32]byte
		copy(hash[:], val[1:33])
		if e, err := decodeAudit(k, val); err == nil && e.Action == AuditKeyChange && len(e.Detail) >= 9 {
			sc.flushGap()
			sc.active, sc.activeSince = hex.EncodeToString(e.Detail[1:9]), seq
		}
		var sig []byte
		if sigs != nil {
			sig = sigs.Get(k)
		}
		sc.entry(seq, hash, sig)
	}
	sc.flushGap()
	if sigs != nil {
		sc.orphans(sigs, lastSeq, from)
	}
	if sc.good == 0 && from <= 1 {
		sc.add("audit signatures: no entry carries a valid signature by the given key(s): the chain is not authenticated")
	}
}

func (sc *sigCheck) entry(seq uint64, hash [32]byte, sig []byte) {
	if sig == nil {
		if sc.active != "" {
			if sc.gapFrom == 0 {
				sc.gapFrom = seq
			}
			sc.gapTo = seq
		}
		return
	}
	sc.flushGap()
	if len(sig) != 8+ed25519.SignatureSize {
		sc.add("audit signatures: entry #%d: the signature record is %d bytes, not %d", seq, len(sig), 8+ed25519.SignatureSize)
		return
	}
	id := hex.EncodeToString(sig[:8])
	pub, ok := sc.keys[id]
	switch {
	case !ok:
		sc.add("audit signatures: entry #%d is signed by key %s, which was not given: give every key the chain was signed with", seq, id)
	case !ed25519.Verify(pub, entryMessage(seq, hash), sig[8:]):
		sc.add("audit signatures: entry #%d: the signature by key %s does not match: the entry, the records it covers or an entry before it was rewritten", seq, id)
	default:
		sc.good++
		sc.last = seq
		if sc.active != "" && id != sc.active {
			sc.add("audit signatures: entry #%d is signed by key %s, but key %s is in force", seq, id, sc.active)
		}
	}
}

func (sc *sigCheck) flushGap() {
	if sc.gapFrom == 0 {
		return
	}
	what := fmt.Sprintf("entry #%d is", sc.gapFrom)
	if sc.gapTo > sc.gapFrom {
		what = fmt.Sprintf("entries #%d to #%d are", sc.gapFrom, sc.gapTo)
	}
	since := ""
	if sc.activeSince > 0 {
		since = fmt.Sprintf(" since entry #%d", sc.activeSince)
	}
	sc.add("audit signatures: %s not signed, though key %s is in force%s: written without the key, or rewritten", what, sc.active, since)
	sc.gapFrom, sc.gapTo = 0, 0
}

// orphans reports signatures of entries the chain no longer holds.
func (sc *sigCheck) orphans(sigs *bolt.Bucket, lastSeq, from uint64) {
	c := sigs.Cursor()
	k, _ := c.Seek(seqKey(lastSeq + 1))
	if k == nil {
		return
	}
	first, _ := keySeq(k)
	n := 0
	for ; k != nil; k, _ = c.Next() {
		n++
	}
	sc.add("audit signatures: %d signed entries from #%d on are missing from the chain, which ends at #%d: its tail was removed", n, first, lastSeq)
}

// ErrHead reports a chain that no longer holds a kept checkpoint.
var ErrHead = errors.New("store: the audit chain does not hold the kept checkpoint")

// head compares the chain with a kept checkpoint.
func (v *verifier) head(tx *bolt.Tx, cp *Checkpoint, keys []ed25519.PublicKey) {
	if len(keys) > 0 {
		if err := cp.CheckSignature(keys); err != nil {
			v.add("checkpoint of %s: %v", cp.Time.Format(time.RFC3339Nano), err)
		}
	}
	if err := checkHead(tx, cp); err != nil {
		v.add("%v", err)
	}
}

func checkHead(tx *bolt.Tx, cp *Checkpoint) error {
	audit := tx.Bucket(bucketAudit)
	if audit == nil {
		return fmt.Errorf("%w: there is no audit chain", ErrHead)
	}
	val := audit.Get(seqKey(cp.Seq))
	if val == nil {
		last := uint64(0)
		if k, _ := audit.Cursor().Last(); k != nil {
			last, _ = keySeq(k)
		}
		if last < cp.Seq {
			return fmt.Errorf("%w: the chain ends at entry #%d, before entry #%d of the checkpoint of %s: entries were removed from its tail", ErrHead, last, cp.Seq, cp.Time.Format(time.RFC3339Nano))
		}
		return fmt.Errorf("%w: entry #%d of the checkpoint of %s is missing", ErrHead, cp.Seq, cp.Time.Format(time.RFC3339Nano))
	}
	if len(val) < 1+32 || string(val[1:33]) != string(cp.Hash[:]) {
		return fmt.Errorf("%w: entry #%d no longer has the hash the checkpoint of %s recorded: the chain was rewritten at or before it", ErrHead, cp.Seq, cp.Time.Format(time.RFC3339Nano))
	}
	return nil
}
