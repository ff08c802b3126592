package store

import (
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"os"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// FaultKind classifies an integrity fault, for a metric label and for the
// daemon's choice of words.
type FaultKind string

// Kinds of integrity fault.
const (
	FaultFile      FaultKind = "file"            // the file is shorter than its pages say, or cannot be read
	FaultPages     FaultKind = "pages"           // bbolt's consistency check failed (a damaged or lost page)
	FaultChain     FaultKind = "audit-chain"     // the audit chain's links, numbering or content do not hold
	FaultSignature FaultKind = "audit-signature" // a signature is missing or wrong, or a kept checkpoint is not in the chain
	FaultRecords   FaultKind = "records"         // a record, rollup, index or coverage problem the full check found
)

// Fault is one integrity problem.
type Fault struct {
	Kind   FaultKind
	Detail string
}

// IntegrityError is the answer of a check that found faults. A daemon
// holding one should refuse writes (503 naming the first fault), raise an
// integrity action alarm, report not ready, keep serving reads, and tell
// the operator the VerifyCommand and its latest backup. It matches
// ErrCorrupt under errors.Is.
type IntegrityError struct {
	Path   string // the database file
	Full   bool   // from the full check, not the quick one
	Faults []Fault
}

// Error names the first fault, how many there are and what to run.
func (e *IntegrityError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "store: integrity fault in %s: %s: %s", e.Path, e.Faults[0].Kind, e.Faults[0].Detail)
	if n := len(e.Faults) - 1; n > 0 {
		fmt.Fprintf(&b, " (and %d more)", n)
	}
	fmt.Fprintf(&b, "; stop the daemon and run `%s` for a full report, then restore the latest backup", e.VerifyCommand())
	return b.String()
}

// Unwrap makes an IntegrityError match ErrCorrupt.
func (e *IntegrityError) Unwrap() error { return ErrCorrupt }

// VerifyCommand is the command line that reports the faults in full.
func (e *IntegrityError) VerifyCommand() string { return "cleanmon verify " + e.Path }

// CheckOptions tunes CheckQuick and CheckFull.
type CheckOptions struct {
	// Keys verify the audit signatures; the key given to UseAuditKey is
	// used too. Without keys signatures are not checked.
	Keys []ed25519.PublicKey
	// Head is a kept checkpoint the chain must still hold.
	Head *Checkpoint
	// Links is how many of the newest audit entries CheckQuick checks
	// (default 64).
	Links int
}

// DefaultCheckLinks is CheckOptions.Links when zero.
const DefaultCheckLinks = 64

// CheckQuick is the start-up check: the file's length against its meta
// page, bbolt's page consistency check, and the newest audit entries
// (their links, numbering and signatures). It returns nil or an
// *IntegrityError; another error means the check could not run.
func (s *Store) CheckQuick(ctx context.Context, opt CheckOptions) error {
	return s.check(ctx, opt, false)
}

// CheckFull runs everything Verify runs, on the open store, plus the
// signatures of the whole chain and the kept checkpoint: for the
// background and daily. It returns nil or an *IntegrityError.
func (s *Store) CheckFull(ctx context.Context, opt CheckOptions) error {
	return s.check(ctx, opt, true)
}

func (s *Store) check(ctx context.Context, opt CheckOptions, full bool) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	if opt.Links <= 0 {
		opt.Links = DefaultCheckLinks
	}
	st := signingFor(s.db)
	st.mu.Lock()
	if st.signer != nil {
		opt.Keys = append(opt.Keys[:len(opt.Keys):len(opt.Keys)], st.signer.Public())
	}
	st.mu.Unlock()
	ie := &IntegrityError{Path: s.path, Full: full}
	add := func(kind FaultKind, problems []string) {
		for _, p := range problems {
			ie.Faults = append(ie.Faults, Fault{Kind: kind, Detail: p})
		}
	}
	if info, err := os.Stat(s.path); err != nil {
		add(FaultFile, []string{err.Error()})
	} else {
		var need int64
		_ = s.db.View(func(tx *bolt.Tx) error { need = tx.Size(); return nil })
		if info.Size() < need {
			add(FaultFile, []string{fmt.Sprintf("the file is %d bytes, its pages need %d: it was truncated", info.Size(), need)})
		}
	}
	add(FaultPages, s.pageCheck())
	if err := ctx.Err(); err != nil {
		return err
	}
	if full {
		v := &verifier{}
		v.guarded("store check", func() { _ = s.db.View(v.run) })
		add(FaultRecords, v.problems)
	} else {
		add(FaultChain, s.lastLinks(opt.Links))
	}
	if len(opt.Keys) > 0 || opt.Head != nil {
		v := &verifier{}
		from := uint64(1)
		if !full {
			from = s.linksFrom(opt.Links)
		}
		v.guarded("audit signatures", func() {
			_ = s.db.View(func(tx *bolt.Tx) error { v.keyed(tx, VerifyOptions{Keys: opt.Keys, Head: opt.Head}, from); return nil })
		})
		add(FaultSignature, v.problems)
	}
	if len(ie.Faults) == 0 {
		return nil
	}
	s.log.Error("store: integrity check failed", "path", s.path, "full", full, "faults", len(ie.Faults), "first", ie.Faults[0].Detail, "at", time.Now().UTC())
	return ie
}

// pageCheck runs bbolt's consistency check, a damaged page's panic or
// memory fault included, in a write transaction that is rolled back.
// bbolt's Check reads the freelist, which a concurrent commit changes
// without a lock a reader would take: in a read transaction it races with
// the committer and reports pages a later commit freed as "reachable
// freed". In a write transaction it sees one consistent state; commits
// wait for it (readers do not), about the time it takes to read the file.
func (s *Store) pageCheck() []string {
	return s.pageCheckIn(func(fn func(*bolt.Tx) error) error {
		err := s.db.Update(func(tx *bolt.Tx) error {
			_ = fn(tx)
			return errRollback
		})
		if errors.Is(err, errRollback) {
			return nil
		}
		return err
	})
}

// errRollback ends the write transaction of a check without a commit.
var errRollback = errors.New("store: check done, roll back")

func (s *Store) pageCheckIn(run func(func(*bolt.Tx) error) error) []string {
	v := &verifier{}
	v.guarded("bbolt check", func() {
		err := run(func(tx *bolt.Tx) error {
			for err := range tx.Check() {
				v.add("bbolt: %v", err)
			}
			return nil
		})
		if err != nil {
			v.add("bbolt check could not run: %v", err)
		}
	})
	return v.problems
}

// linksFrom is the first entry number of the newest n.
func (s *Store) linksFrom(n int) uint64 {
	var last uint64
	_ = s.view(func(tx *bolt.Tx, _ *guard) error {
		if k, _ := tx.Bucket(bucketAudit).Cursor().Last(); k != nil {
			last, _ = keySeq(k)
		}
		return nil
	})
	if last <= uint64(n) {
		return 1
	}
	return last - uint64(n) + 1
}

// lastLinks checks the newest n entries of the chain: each decodes,
// follows the one before without a gap, and hashes to its link; the last
// is the last number issued.
func (s *Store) lastLinks(n int) []string {
	v := &verifier{}
	v.guarded("audit chain", func() {
		_ = s.db.View(func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketAudit)
			c := b.Cursor()
			k, _ := c.Last()
			for i := 1; i < n+1 && k != nil; i++ {
				k, _ = c.Prev()
			}
			var prev [32]byte
			var want uint64
			if k == nil {
				k, _ = c.First()
			} else {
				val := b.Get(k)
				if len(val) >= 1+32 {
					copy(prev[:], val[1:33])
				}
				want, _ = keySeq(k)
				k, _ = c.Next()
			}
			for ; k != nil; k, _ = c.Next() {
				val := b.Get(k)
				seq, _ := keySeq(k)
				if want != 0 && seq != want+1 {
					v.add("audit chain: entries #%d to #%d are missing", want+1, seq-1)
				}
				want = seq
				e, err := decodeAudit(k, val)
				if err != nil {
					v.add("audit chain: %s", trimCorrupt(err))
					continue
				}
				if e.Link(prev) != e.Hash {
					v.add("audit chain: entry #%d (%s): its hash does not match its content and the entry before it", seq, e.Time.Format(time.RFC3339Nano))
				}
				prev = e.Hash
			}
			if issued := b.Sequence(); want < issued {
				v.add("audit chain: the chain ends at entry #%d, but %d were issued: the last entries were removed", want, issued)
			}
			return nil
		})
	})
	return v.problems
}
