package store

import (
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Record kinds an audit entry can cover, and where their records live.
const (
	coverReadings = 'r' // readings/<counter>/<time>
	coverPressure = 'p' // pressure/<sensor>/<time>
	coverOpState  = 'o' // opstate/<zone>/<sequence>
	coverJournal  = 'j' // alarm_journal/<sequence>, name ""
	coverEnv      = 'e' // environment/<sensor>/<time>
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
	case coverEnv:
		return bucketEnvironment
	}
	return nil
}

// coverage builds the Detail of an entry that covers stored records: the
// records' series names and keys, and a SHA-256 over them, so Verify can
// find each record again and see whether it changed. Records are listed
// per series, the series in the order they first appear and each
// series' records in the order written:
//
//	kind byte (upper case) | uvarint unit | varint base | uvarint names |
//	  (uvarint shared, str rest: the name, front-coded against the one
//	   before | uvarint count | uvarint (first − base)/unit |
//	   when count > 1: uvarint steady,
//	     steady 1: varint step/unit (every step equal),
//	     steady 0: (varint delta of delta/unit) × (count − 1))… | digest[32]
//
// base is the smallest key and unit the greatest common divisor of every
// key's distance from it (a second, or a minute, for counters sampling on
// whole seconds), so a series sampling at a steady period costs its name
// and three or four bytes whatever its record count. Each record enters
// the digest, in the listed order, as str(name) ‖ key ‖ str(value); keys
// are 8-byte big-endian times or sequence numbers.
//
// Entries written before this form list every record as (uvarint name
// index, varint delta of delta in nanoseconds) in the order written, with
// the kind byte in lower case; decodeCoverage reads both.
type coverage struct {
	kind   byte
	names  []string
	index  map[string]int
	series [][]coveredVal // per name, in the order written
	n      int
}

type coveredVal struct {
	key int64
	val []byte // the caller's, kept until detail
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
	return &coverage{kind: kind, index: map[string]int{}}
}

// add lists one record; val is kept (not copied) until detail.
func (c *coverage) add(name string, key, val []byte) {
	i, ok := c.index[name]
	if !ok {
		i = len(c.names)
		c.names = append(c.names, name)
		c.series = append(c.series, nil)
		c.index[name] = i
	}
	c.series[i] = append(c.series[i], coveredVal{int64(binary.BigEndian.Uint64(key)), val})
	c.n++
}

func recordDigestInput(b []byte, name string, key, val []byte) []byte {
	b = appendBytes(b, []byte(name))
	b = append(b, key...)
	return appendBytes(b, val)
}

// keyUnit is the smallest key and the greatest common divisor of every
// key's distance from it (1 when all keys are equal).
func (c *coverage) keyUnit() (base int64, unit uint64) {
	first := true
	for _, ser := range c.series {
		for _, r := range ser {
			if first || r.key < base {
				base, first = r.key, false
			}
		}
	}
	for _, ser := range c.series {
		for _, r := range ser {
			unit = gcd(unit, uint64(r.key-base))
		}
	}
	if unit == 0 {
		unit = 1
	}
	return base, unit
}

func gcd(a, b uint64) uint64 {
	for b != 0 {
		a, b = b, a%b
	}
	return a
}

func (c *coverage) detail() []byte {
	base, unit := c.keyUnit()
	size := 1 + 20 + 10 + 32
	for _, n := range c.names {
		size += 8 + len(n)
	}
	b := make([]byte, 0, size)
	b = append(b, upperKind(c.kind))
	b = binary.AppendUvarint(b, unit)
	b = binary.AppendVarint(b, base)
	b = binary.AppendUvarint(b, uint64(len(c.names)))
	h := sha256.New()
	var scratch []byte
	prev := ""
	for i, name := range c.names {
		ser := c.series[i]
		b = appendFrontCoded(b, prev, name)
		prev = name
		b = binary.AppendUvarint(b, uint64(len(ser)))
		b = binary.AppendUvarint(b, uint64(ser[0].key-base)/unit)
		if len(ser) > 1 {
			b = appendSteps(b, ser, int64(unit))
		}
		for _, r := range ser {
			scratch = recordDigestInput(scratch[:0], name, nanosKey(r.key), r.val)
			h.Write(scratch)
		}
	}
	return h.Sum(b)
}

// appendSteps writes the keys after a series' first: one step when all
// are equal, else each delta of delta, all in units.
func appendSteps(b []byte, ser []coveredVal, unit int64) []byte {
	step := ser[1].key - ser[0].key
	steady := true
	for j := 2; j < len(ser) && steady; j++ {
		steady = ser[j].key-ser[j-1].key == step
	}
	if steady {
		b = append(b, 1)
		return binary.AppendVarint(b, step/unit)
	}
	b = append(b, 0)
	var ks keyStep // over keys as multiples of unit from the first, exactly
	first := ser[0].key
	for _, r := range ser[1:] {
		b = binary.AppendVarint(b, ks.next((r.key-first)/unit))
	}
	return b
}

// appendFrontCoded writes name as the length of the prefix it shares with
// prev and the rest: counters named pc-101, pc-102, … cost two bytes each.
func appendFrontCoded(b []byte, prev, name string) []byte {
	n := 0
	for n < len(prev) && n < len(name) && prev[n] == name[n] {
		n++
	}
	b = binary.AppendUvarint(b, uint64(n))
	return appendBytes(b, []byte(name[n:]))
}

// frontCoded reads what appendFrontCoded wrote after prev.
func (d *decoder) frontCoded(what, prev string, max int) string {
	n := d.uvarint(what + " shared prefix")
	if d.err == nil && n > uint64(len(prev)) {
		d.fail("%s: shares %d bytes with a name of %d", what, n, len(prev))
	}
	rest := d.str(what, max)
	if d.err != nil {
		return ""
	}
	if int(n)+len(rest) > max {
		d.fail("%s: %d bytes, more than %d", what, int(n)+len(rest), max)
		return ""
	}
	return prev[:n] + rest
}

func upperKind(kind byte) byte { return kind - 'a' + 'A' }

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

// maxCovered bounds the records one Detail may claim, so a damaged one
// cannot make the decoder allocate without end: far above any batch.
const maxCovered = 1 << 22

func decodeCoverage(detail []byte) (covered, error) {
	var c covered
	if len(detail) < 1+32 {
		return c, fmt.Errorf("detail is %d bytes, too short", len(detail))
	}
	c.kind = detail[0]
	grouped := c.kind >= 'A' && c.kind <= 'Z'
	if grouped {
		c.kind = c.kind - 'A' + 'a'
	}
	if coverBucket(c.kind) == nil {
		return c, fmt.Errorf("unknown record kind %q", detail[0])
	}
	copy(c.digest[:], detail[len(detail)-32:])
	d := decoder{b: detail[1 : len(detail)-32]}
	if grouped {
		c.decodeGrouped(&d)
	} else {
		c.decodeListed(&d)
	}
	d.end()
	return c, d.err
}

// decodeGrouped reads the per-series form.
func (c *covered) decodeGrouped(d *decoder) {
	unit := int64(d.uvarint("unit"))
	base := d.varint("base")
	nn := d.uvarint("names")
	if d.err == nil && nn > uint64(len(d.b)) {
		d.fail("names: %d, more than the detail holds", nn)
	}
	prev := ""
	for i := uint64(0); i < nn && d.err == nil; i++ {
		prev = d.frontCoded("name", prev, maxNameLen)
		c.names = append(c.names, prev)
		count := d.uvarint("count")
		if d.err == nil && (count == 0 || len(c.recs)+int(min(count, maxCovered)) > maxCovered) {
			d.fail("series %d: %d records", i, count)
		}
		first := base + int64(d.uvarint("first key"))*unit
		if d.err != nil {
			return
		}
		c.recs = append(c.recs, coveredRec{int(i), first})
		if count == 1 {
			continue
		}
		switch d.byte1("steady") {
		case 1:
			step := d.varint("step") * unit
			for j := uint64(1); j < count && d.err == nil; j++ {
				c.recs = append(c.recs, coveredRec{int(i), first + int64(j)*step})
			}
		case 0:
			var ks keyStep
			for j := uint64(1); j < count && d.err == nil; j++ {
				dod := d.varint("key")
				if d.err == nil {
					c.recs = append(c.recs, coveredRec{int(i), first + ks.back(dod)*unit})
				}
			}
		default:
			d.fail("series %d: steady flag is neither 0 nor 1", i)
		}
	}
}

// decodeListed reads the form of older entries: one record at a time.
func (c *covered) decodeListed(d *decoder) {
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
	return baselineDetail(tx, []byte{coverReadings, coverPressure, coverOpState, coverEnv}, true)
}

// baselineDetail is chainStart's form for the series of kinds (and the
// alarm journal when journal is set).
func baselineDetail(tx *bolt.Tx, kinds []byte, journal bool) ([]byte, error) {
	var out []baseline
	for _, kind := range kinds {
		if kind == coverEnv {
			// Counted in head and chunks: an AuditEnvStart that failed at
			// one start is written at a later one, after compactions.
			for _, name := range envSensors(tx) {
				s := baseline{kind: kind, name: name, last: -1}
				forEachKey(tx, bucketEnvironment, bucketEChunks, name, func(ns int64) { s.last, s.count = max(s.last, ns), s.count+1 })
				if s.count > 0 && s.last >= 0 {
					out = append(out, s)
				}
			}
			continue
		}
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
	if j := tx.Bucket(bucketJournal); j != nil && journal {
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
		Subject: coverSubject(cov.names),
		Reason:  fmt.Sprintf("ingest: %d %s", cov.n, what),
		Detail:  cov.detail(),
	})
	return err
}

// coverSubject names a batch's series briefly: the entry's Detail lists
// them all, and a Subject naming each would cost as much again.
func coverSubject(names []string) string {
	if len(names) == 1 {
		return cutText(names[0], maxReasonLen)
	}
	return cutText(fmt.Sprintf("%s and %d more", names[0], len(names)-1), maxReasonLen)
}

func actorOrSystem(by string) string {
	if by == "" {
		return AuditActorSystem
	}
	return by
}
