package store

import (
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"hash"
	"strings"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Record kinds an audit entry can cover, and where their records live.
const (
	coverReadings = 'r' // readings/<counter>/<time>
	coverPressure = 'p' // pressure/<sensor>/<time>
	coverOpState  = 'o' // opstate/<zone>/<sequence>
	coverJournal  = 'j' // alarm_journal/<sequence>, name ""
)

func coverBucket(kind byte) []byte {
	switch kind {
	case coverReadings:
		return bucketReadings
	case coverPressure:
		return bucketPressure
	case coverOpState:
		return bucketOpState
	case coverJournal:
		return bucketJournal
	}
	return nil
}

// coverage builds the Detail of an entry that covers stored records: the
// records' series names and keys in the order written, and a SHA-256
// over them, so Verify can find each record again and see whether it
// changed. Encoding:
//
//	kind byte | uvarint names | str name… | uvarint records |
//	  (uvarint name index, varint delta of delta)… | digest[32]
//
// The delta of delta is, within the record's series, (key − previous key)
// − (previous key − the one before), both 0 before the first: a counter
// sampling at a steady period costs two bytes a record. Each record
// enters the digest as str(name) ‖ key ‖ str(value); keys are 8-byte
// big-endian times or sequence numbers.
type coverage struct {
	kind    byte
	names   []string
	index   map[string]int
	last    []keyStep // per name
	recs    []byte
	n       int
	h       hash.Hash
	scratch []byte
}

// keyStep is the latest key of a series and the step that led to it.
type keyStep struct{ key, delta int64 }

// next returns the delta of delta of key and moves on to it.
func (s *keyStep) next(key int64) int64 {
	delta := key - s.key
	dod := delta - s.delta
	s.key, s.delta = key, delta
	return dod
}

// back is next's inverse.
func (s *keyStep) back(dod int64) int64 {
	s.delta += dod
	s.key += s.delta
	return s.key
}

func newCoverage(kind byte) *coverage {
	return &coverage{kind: kind, index: map[string]int{}, h: sha256.New()}
}

func (c *coverage) add(name string, key, val []byte) {
	i, ok := c.index[name]
	if !ok {
		i = len(c.names)
		c.names = append(c.names, name)
		c.last = append(c.last, keyStep{})
		c.index[name] = i
	}
	k := int64(binary.BigEndian.Uint64(key))
	c.recs = binary.AppendUvarint(c.recs, uint64(i))
	c.recs = binary.AppendVarint(c.recs, c.last[i].next(k))
	c.n++
	c.scratch = recordDigestInput(c.scratch[:0], name, key, val)
	c.h.Write(c.scratch)
}

func recordDigestInput(b []byte, name string, key, val []byte) []byte {
	b = appendBytes(b, []byte(name))
	b = append(b, key...)
	return appendBytes(b, val)
}

func (c *coverage) detail() []byte {
	size := 1 + 10 + 10 + len(c.recs) + 32
	for _, n := range c.names {
		size += 2 + len(n)
	}
	b := make([]byte, 0, size)
	b = append(b, c.kind)
	b = binary.AppendUvarint(b, uint64(len(c.names)))
	for _, n := range c.names {
		b = appendBytes(b, []byte(n))
	}
	b = binary.AppendUvarint(b, uint64(c.n))
	b = append(b, c.recs...)
	return c.h.Sum(b)
}

// covered is a decoded coverage Detail.
type covered struct {
	kind   byte
	names  []string
	recs   []coveredRec
	digest [32]byte
}

type coveredRec struct {
	name int
	key  int64
}

func decodeCoverage(detail []byte) (covered, error) {
	var c covered
	if len(detail) < 1+32 {
		return c, fmt.Errorf("detail is %d bytes, too short", len(detail))
	}
	c.kind = detail[0]
	if coverBucket(c.kind) == nil {
		return c, fmt.Errorf("unknown record kind %q", c.kind)
	}
	copy(c.digest[:], detail[len(detail)-32:])
	d := decoder{b: detail[1 : len(detail)-32]}
	nn := d.uvarint("names")
	if d.err == nil && nn > uint64(len(d.b)) {
		d.fail("names: %d, more than the detail holds", nn)
	}
	for i := uint64(0); i < nn && d.err == nil; i++ {
		c.names = append(c.names, d.str("name", maxNameLen))
	}
	nr := d.uvarint("records")
	if d.err == nil && nr > uint64(len(d.b)) {
		d.fail("records: %d, more than the detail holds", nr)
	}
	last := make([]keyStep, len(c.names))
	for i := uint64(0); i < nr && d.err == nil; i++ {
		idx := d.uvarint("name index")
		dod := d.varint("key")
		if d.err == nil && idx >= uint64(len(c.names)) {
			d.fail("record %d: name index %d of %d names", i, idx, len(c.names))
		}
		if d.err == nil {
			c.recs = append(c.recs, coveredRec{int(idx), last[idx].back(dod)})
		}
	}
	d.end()
	return c, d.err
}

// chainStart is the Detail of entry #1: for each series the store held
// when the chain began (a file written before the chain existed), its
// newest key and record count, and the sweep horizon then, so Verify
// does not ask the chain for what is older than itself. A new file has
// no series and horizon 0.
//
//	uvarint series | (kind byte, str name, 8-byte last key, uvarint count)… | 8-byte horizon
type baseline struct {
	kind  byte
	name  string
	last  int64
	count uint64
}

func chainStartDetail(tx *bolt.Tx) ([]byte, error) {
	var out []baseline
	for _, kind := range []byte{coverReadings, coverPressure, coverOpState} {
		root := tx.Bucket(coverBucket(kind))
		if root == nil {
			continue
		}
		err := root.ForEachBucket(func(name []byte) error {
			b := root.Bucket(name)
			k, _ := b.Cursor().Last()
			if n, ok := keyNanos(k); ok {
				out = append(out, baseline{kind, string(name), n, uint64(b.Stats().KeyN)})
			}
			return nil
		})
		if err != nil {
			return nil, err
		}
	}
	if j := tx.Bucket(bucketJournal); j != nil {
		if k, _ := j.Cursor().Last(); k != nil {
			if n, ok := keyNanos(k); ok {
				out = append(out, baseline{coverJournal, "", n, uint64(j.Stats().KeyN)})
			}
		}
	}
	b := binary.AppendUvarint(nil, uint64(len(out)))
	for _, s := range out {
		b = append(b, s.kind)
		b = appendBytes(b, []byte(s.name))
		b = binary.BigEndian.AppendUint64(b, uint64(s.last))
		b = binary.AppendUvarint(b, s.count)
	}
	var horizon int64
	if meta := tx.Bucket(bucketMeta); meta != nil {
		horizon, _ = keyNanos(meta.Get(metaSweptBefore))
	}
	return binary.BigEndian.AppendUint64(b, uint64(horizon)), nil
}

func decodeChainStart(detail []byte) (series []baseline, horizon int64, err error) {
	d := decoder{b: detail}
	n := d.uvarint("series")
	if d.err == nil && n > uint64(len(d.b)) {
		d.fail("series: %d, more than the detail holds", n)
	}
	var out []baseline
	for i := uint64(0); i < n && d.err == nil; i++ {
		s := baseline{kind: d.byte1("kind")}
		s.name = d.str("name", maxNameLen)
		if d.err == nil && len(d.b) < 8 {
			d.fail("last key: value ends early")
		}
		if d.err == nil {
			s.last = int64(binary.BigEndian.Uint64(d.b))
			d.b = d.b[8:]
		}
		s.count = d.uvarint("count")
		if d.err == nil && coverBucket(s.kind) == nil {
			d.fail("unknown record kind %q", s.kind)
		}
		out = append(out, s)
	}
	if d.err == nil && len(d.b) != 8 {
		d.fail("horizon: %d bytes left, want 8", len(d.b))
	}
	if d.err != nil {
		return nil, 0, d.err
	}
	return out, int64(binary.BigEndian.Uint64(d.b)), nil
}

// auditBatch chains the entry of one Append call, if it stored anything.
func auditBatch(tx *bolt.Tx, cov *coverage, action, what string) error {
	if cov.n == 0 {
		return nil
	}
	_, _, err := appendAudit(tx, &AuditEntry{
		Time: time.Now().UTC(), Actor: AuditActorSystem, Action: action,
		Subject: cutText(strings.Join(cov.names, ","), maxReasonLen),
		Reason:  fmt.Sprintf("ingest: %d %s", cov.n, what),
		Detail:  cov.detail(),
	})
	return err
}

func actorOrSystem(by string) string {
	if by == "" {
		return AuditActorSystem
	}
	return by
}
