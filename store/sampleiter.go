package store

import (
	"math"

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
