package store

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"time"

	bolt "go.etcd.io/bbolt"
)

// sampleKind describes a kind of sensor sample kept one value each in a
// head bucket and compacted into chunks of its own (DP, environment): S is
// a chunk's decoded sample, T the sample the store gives out.
type sampleKind[S, T any] struct {
	head, chunks []byte // top-level buckets: sensor → time → value, sensor → time of last → chunk
	ns           func(*S) int64
	decodeChunk  func(sensor string, key, v []byte) ([]S, []byte, error)
	fromChunk    func(sensor string, s *S) T
	decodeHead   func(sensor string, key, v []byte) (T, error)
	// For compaction: a head value as a chunk sample with its tag, a
	// chunk's encoding, a decoded chunk's stored tag put back, and the
	// kind's name in errors.
	fromHead    func(sensor string, key, v []byte) (S, error)
	encodeChunk func(key []byte, ss []S) []byte
	setTag      func(s *S, tag byte)
	what        string
	// For appends: the head value of a sample, its audit cover, the
	// audit action of a batch and the batch's words in it, and the stored
	// value of a chunked sample (nil when none).
	prepare    func(t *T) (sensor string, key, val []byte)
	check      func(t *T) (field, reason string)
	recordKind string // RecordError.Kind
	cover      byte
	action     string
	plural     string
	chunkValue func(tx *bolt.Tx, sensor string, key []byte) ([]byte, error)
}

// preparedSample is a checked sample ready for any number of transaction
// attempts.
type preparedSample struct {
	sensor   string
	key, val []byte
}

// appendSamples stores ts in one durable transaction with an audit entry
// covering what it stored. A sample whose sensor and time are already
// stored, in the head or a chunk, is counted in duplicates and not stored
// again (logged when its value differs); an invalid one fails the call
// with a *RecordError and nothing is stored. outcomes[i] says what became
// of ts[i].
func appendSamples[S, T any](ctx context.Context, s *Store, k *sampleKind[S, T], ts []T) (outcomes []Outcome, err error) {
	if err := s.enter(); err != nil {
		return nil, err
	}
	defer s.exit()
	if len(ts) == 0 {
		return nil, ctx.Err()
	}
	prep := make([]preparedSample, len(ts))
	for i := range ts {
		if field, reason := k.check(&ts[i]); field != "" {
			return nil, &RecordError{Kind: k.recordKind, Index: i, Field: field, Reason: reason}
		}
		sensor, key, val := k.prepare(&ts[i])
		prep[i] = preparedSample{sensor: sensor, key: key, val: val}
	}
	outcomes = make([]Outcome, len(ts))
	err = s.submit(ctx, len(prep), func(tx *bolt.Tx) error {
		clear(outcomes) // the group may run the call again after another member failed
		series := newSeriesBuckets(tx, k.head)
		cov := newCoverage(k.cover)
		chunked := map[string]int64{} // newest chunked time per sensor
		for i := range prep {
			p := &prep[i]
			b, err := series.get(p.sensor)
			if err != nil {
				return err
			}
			old := b.Get(p.key)
			if old == nil {
				last, ok := chunked[p.sensor]
				if !ok {
					last = lastChunkIn(tx, k.chunks, p.sensor)
					chunked[p.sensor] = last
				}
				if ns, _ := keyNanos(p.key); ns <= last {
					if old, err = k.chunkValue(tx, p.sensor, p.key); err != nil {
						return err
					}
				}
			}
			if old != nil {
				outcomes[i] = Duplicate
				if !bytes.Equal(old, p.val) {
					outcomes[i] = Conflict
					// Not stored (the first stays), but an instrument or a
					// gateway re-sent a sample with another value, or two
					// samples carry one time: someone should look.
					s.log.Warn("store: "+k.what+" sample not stored: one of this sensor at this time is stored with another value",
						"sensor", p.sensor, "time", keyString(p.key))
				}
				continue
			}
			if err := b.Put(p.key, p.val); err != nil {
				return fmt.Errorf("store: put %s sample of %q: %w", k.what, p.sensor, err)
			}
			outcomes[i] = Stored
			cov.add(p.sensor, p.key, p.val)
		}
		return auditBatch(tx, cov, k.action, k.plural)
	})
	if err != nil {
		return nil, err
	}
	return outcomes, nil
}

// countOutcomes is what an unmarked append answers: how many were stored,
// and how many were not (duplicates and conflicts).
func countOutcomes(os []Outcome, err error) (accepted, duplicates int, _ error) {
	if err != nil {
		return 0, 0, err
	}
	for _, o := range os {
		if o == Stored {
			accepted++
		}
	}
	return accepted, len(os) - accepted, nil
}

// sampleIter merges the chunks and head of one sensor over [lo, hi), in
// time order, both walked from a Seek. A time in both places (a damaged
// file only: compaction moves a sample in one transaction) is given once,
// the chunk's copy.
type sampleIter[S, T any] struct {
	kind   *sampleKind[S, T]
	sensor string
	lo, hi int64
	chunks *bolt.Cursor
	ck     []S
	ci     int
	cdone  bool
	head   *bolt.Cursor
	hk, hv []byte
	hdone  bool
	err    error
}

func newSampleIter[S, T any](tx *bolt.Tx, kind *sampleKind[S, T], sensor string, lo, hi int64) *sampleIter[S, T] {
	it := &sampleIter[S, T]{kind: kind, sensor: sensor, lo: lo, hi: hi, cdone: true, hdone: true}
	if b := tx.Bucket(kind.head).Bucket([]byte(sensor)); b != nil {
		it.head = b.Cursor()
		it.hk, it.hv = it.head.Seek(nanosKey(lo))
		it.hdone = false
		it.headCheck()
	}
	if root := tx.Bucket(kind.chunks); root != nil {
		if b := root.Bucket([]byte(sensor)); b != nil {
			it.chunks = b.Cursor()
			it.cdone = false
			k, v := it.chunks.Seek(nanosKey(lo))
			it.load(k, v)
		}
	}
	return it
}

func (it *sampleIter[S, T]) headCheck() {
	if it.hk == nil {
		it.hdone = true
		return
	}
	if ns, ok := keyNanos(it.hk); !ok || ns >= it.hi {
		it.hdone = true
	}
}

// load decodes the chunk at k (or the next with a sample in range) and
// positions on its first sample at or after lo.
func (it *sampleIter[S, T]) load(k, v []byte) {
	for {
		if k == nil {
			it.cdone = true
			return
		}
		if _, first, ok := chunkHeader(v); ok && first >= it.hi {
			it.cdone = true
			return
		}
		ss, _, err := it.kind.decodeChunk(it.sensor, k, v)
		if err != nil {
			it.err, it.cdone = err, true
			return
		}
		it.ck, it.ci = ss, 0
		for it.ci < len(ss) && it.kind.ns(&ss[it.ci]) < it.lo {
			it.ci++
		}
		if it.ci < len(ss) {
			it.cdone = it.kind.ns(&ss[it.ci]) >= it.hi
			return
		}
		k, v = it.chunks.Next()
	}
}

// next returns the next sample in time order.
func (it *sampleIter[S, T]) next() (T, bool) {
	var zero T
	if it.err != nil || (it.cdone && it.hdone) {
		return zero, false
	}
	var hns int64 = math.MaxInt64
	if !it.hdone {
		hns, _ = keyNanos(it.hk)
	}
	if !it.cdone && it.kind.ns(&it.ck[it.ci]) <= hns {
		s := &it.ck[it.ci]
		if it.kind.ns(s) == hns {
			it.advanceHead()
		}
		it.ci++
		if it.ci == len(it.ck) {
			k, v := it.chunks.Next()
			it.load(k, v)
		} else if it.kind.ns(&it.ck[it.ci]) >= it.hi {
			it.cdone = true
		}
		if it.err != nil {
			return zero, false
		}
		return it.kind.fromChunk(it.sensor, s), true
	}
	t, err := it.kind.decodeHead(it.sensor, it.hk, it.hv)
	if err != nil {
		it.err = err
		return zero, false
	}
	it.advanceHead()
	return t, true
}

func (it *sampleIter[S, T]) advanceHead() {
	it.hk, it.hv = it.head.Next()
	it.headCheck()
}

// latest is the newest sample of sensor, head or chunk; false if none.
func (k *sampleKind[S, T]) latest(tx *bolt.Tx, sensor string) (T, bool, error) {
	var out T
	found := false
	var headNs int64 = -1
	if b := tx.Bucket(k.head).Bucket([]byte(sensor)); b != nil {
		if key, v := b.Cursor().Last(); key != nil {
			t, err := k.decodeHead(sensor, key, v)
			if err != nil {
				return out, false, err
			}
			headNs, _ = keyNanos(key)
			out, found = t, true
		}
	}
	last := lastChunkIn(tx, k.chunks, sensor)
	if last <= headNs {
		return out, found, nil
	}
	it := newSampleIter(tx, k, sensor, last, last+1)
	if t, ok := it.next(); ok {
		out, found = t, true
	}
	return out, found, it.err
}

// compactSamples moves the head samples of sensor into chunks, as
// compactCounter does for readings: merged with the last chunk while it
// is not full and with any chunk they overlap, written as full chunks,
// the head values deleted in the same transaction.
func compactSamples[S, T any](tx *bolt.Tx, k *sampleKind[S, T], sensor string) (moved, chunks int, err error) {
	headRoot := tx.Bucket(k.head)
	head := headRoot.Bucket([]byte(sensor))
	if head == nil {
		return 0, 0, nil
	}
	var fresh []S
	var headKeys [][]byte
	c := head.Cursor()
	for key, v := c.First(); key != nil; key, v = c.Next() {
		s, err := k.fromHead(sensor, key, v)
		if err != nil {
			return 0, 0, err
		}
		fresh = append(fresh, s)
		headKeys = append(headKeys, append([]byte(nil), key...))
	}
	if len(fresh) == 0 {
		return 0, 0, nil
	}
	cb, err := tx.Bucket(k.chunks).CreateBucketIfNotExists([]byte(sensor))
	if err != nil {
		return 0, 0, fmt.Errorf("store: %s chunks of %q: %w", k.what, sensor, err)
	}
	cb.FillPercent = fillPercent
	var old []S
	var oldKeys [][]byte
	cur := cb.Cursor()
	key, v := cur.Seek(nanosKey(k.ns(&fresh[0])))
	if key == nil {
		if key, v = cur.Last(); key != nil {
			if n, _, ok := chunkHeader(v); ok && n >= maxChunkReadings {
				key = nil
			}
		}
	}
	for ; key != nil; key, v = cur.Next() {
		ss, tags, err := k.decodeChunk(sensor, key, v)
		if err != nil {
			return 0, 0, err
		}
		// The checksum held, so the stored tags are the samples' own.
		for i := range ss {
			k.setTag(&ss[i], tags[i])
		}
		old = append(old, ss...)
		oldKeys = append(oldKeys, append([]byte(nil), key...))
	}
	merged := make([]S, 0, len(old)+len(fresh))
	i, j := 0, 0
	for i < len(old) || j < len(fresh) {
		switch {
		case j == len(fresh) || (i < len(old) && k.ns(&old[i]) < k.ns(&fresh[j])):
			merged = append(merged, old[i])
			i++
		case i == len(old) || k.ns(&fresh[j]) < k.ns(&old[i]):
			merged = append(merged, fresh[j])
			j++
		default:
			return 0, 0, fmt.Errorf("%w: %s sensor %q at %s", errChunkOverlap, k.what, sensor, keyString(nanosKey(k.ns(&old[i]))))
		}
	}
	for _, key := range oldKeys {
		if err := cb.Delete(key); err != nil {
			return 0, 0, err
		}
	}
	for i := 0; i < len(merged); i += maxChunkReadings {
		part := merged[i:min(i+maxChunkReadings, len(merged))]
		key := nanosKey(k.ns(&part[len(part)-1]))
		if err := cb.Put(key, k.encodeChunk(key, part)); err != nil {
			return 0, 0, fmt.Errorf("store: put %s chunk of %q: %w", k.what, sensor, err)
		}
		chunks++
	}
	if err := dropMovedHead(headRoot, head, sensor, headKeys); err != nil {
		return 0, 0, err
	}
	return len(fresh), chunks, nil
}

// scanSamples calls fn with each sample of sensor in [from, to), oldest
// first, head and chunks merged, in one read transaction.
func scanSamples[S, T any](s *Store, k *sampleKind[S, T], sensor string, from, to time.Time, fn func(T) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	loN, hiN, ok, err := seriesRange(sensor, from, to)
	if err != nil || !ok {
		return err
	}
	return s.view(func(tx *bolt.Tx, g *guard) error {
		it := newSampleIter(tx, k, sensor, loN, hiN)
		for {
			t, ok := it.next()
			if !ok {
				return it.err
			}
			if err := g.call(func() error { return fn(t) }); err != nil {
				return err
			}
		}
	})
}

// latestSample is the newest sample of sensor in its own read
// transaction; false if none.
func latestSample[S, T any](s *Store, k *sampleKind[S, T], sensor string) (T, bool, error) {
	var out T
	if err := s.enter(); err != nil {
		return out, false, err
	}
	defer s.exit()
	if reason := checkName(sensor); reason != "" {
		return out, false, fmt.Errorf("%w: name %q: %s", ErrInvalid, sensor, reason)
	}
	found := false
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		var err error
		out, found, err = k.latest(tx, sensor)
		return err
	})
	if err != nil {
		var zero T
		return zero, false, err
	}
	return out, found, nil
}
