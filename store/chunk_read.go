package store

import (
	"fmt"
	"math"
	"slices"

	bolt "go.etcd.io/bbolt"
)

// readingIter walks the readings of one counter with times in [lo, hi)
// in time order, merging its chunks and its head. Both are walked from a
// Seek, so an empty stretch of time costs nothing however long it is.
type readingIter struct {
	counter string
	lo, hi  int64

	chunks *bolt.Cursor
	ck     []chunkReading // the chunk being read
	ci     int
	cdone  bool

	head []headVal // the head's readings in [lo, hi), in time order, once loaded
	hi2  int       // next of head
	// The head log's readings are gathered only when the walk reaches
	// their first time: a caller that reads a year in slices (the API's
	// raw answer) must not copy the whole head for every slice.
	hv         *headView
	tx         *bolt.Tx
	headLoaded bool
	headFirst  int64
	err        error
	template   map[*byte]Reading // decoded shape of each run, by its first byte
}

// newReadingIter walks counter's chunks and the head of hv; a nil hv
// leaves the head log out (the hourly rollups count only what compaction
// moved into chunks, and the legacy head).
func newReadingIter(tx *bolt.Tx, hv *headView, counter string, lo, hi int64) *readingIter {
	it := &readingIter{counter: counter, lo: lo, hi: hi, cdone: true, template: map[*byte]Reading{}}
	if lo >= hi {
		return it // an empty range (a rolled-up query's aligned edge) decodes nothing
	}
	it.hv, it.tx = hv, tx
	if tx.Bucket(bucketReadings).Bucket([]byte(counter)) != nil {
		it.head, it.headLoaded = hv.values(tx, counter, lo, hi), true // a legacy head: rare, read at once
	} else if first, last, ok := hv.logSpan(counter); ok && last >= lo && first < hi {
		it.headFirst = max(first, lo)
	} else {
		it.headLoaded = true // nothing in the head for this range
	}
	if root := tx.Bucket(bucketChunks); root != nil {
		if b := root.Bucket([]byte(counter)); b != nil {
			it.chunks = b.Cursor()
			it.cdone = false
			k, v := it.chunks.Seek(nanosKey(lo))
			it.loadChunk(k, v)
		}
	}
	return it
}

// loadChunk decodes the chunk at k and positions on its first reading
// at or after lo.
func (it *readingIter) loadChunk(k, v []byte) {
	for {
		if k == nil || it.err != nil {
			it.cdone = true
			return
		}
		if _, first, ok := chunkHeader(v); ok && first >= it.hi {
			it.cdone = true
			return
		}
		rs, _, err := decodeChunk(it.counter, k, v)
		if err != nil {
			it.err = err
			it.cdone = true
			return
		}
		it.ck, it.ci = rs, 0
		clear(it.template) // shapes are shared within one chunk only
		for it.ci < len(rs) && rs[it.ci].ns < it.lo {
			it.ci++
		}
		if it.ci < len(rs) {
			if rs[it.ci].ns >= it.hi {
				it.cdone = true
			}
			return
		}
		k, v = it.chunks.Next()
	}
}

// next returns the next reading in time order as its time, shape and
// counts; ok is false at the end or on error (see it.err).
func (it *readingIter) next() (cr chunkReading, ok bool) {
	for it.err == nil {
		if !it.headLoaded && (it.cdone || it.ck[it.ci].ns >= it.headFirst) {
			it.head, it.headLoaded = it.hv.logValues(it.counter, it.lo, it.hi), true
		}
		cOK := !it.cdone
		hOK := it.hi2 < len(it.head)
		if !cOK && !hOK {
			return cr, false
		}
		var hns int64 = math.MaxInt64
		if hOK {
			hns = it.head[it.hi2].ns
		}
		if cOK && it.ck[it.ci].ns <= hns {
			cr = it.ck[it.ci]
			if cr.ns == hns { // both hold it (an interrupted move): the chunk's copy counts once
				it.advanceHead()
			}
			it.ci++
			if it.ci == len(it.ck) {
				k, v := it.chunks.Next()
				it.loadChunk(k, v)
			} else if it.ck[it.ci].ns >= it.hi {
				it.cdone = true
			}
			return cr, true
		}
		hk, hv := nanosKey(hns), it.head[it.hi2].val
		shape, counts, err := splitV1(hk, hv)
		if err != nil {
			_, derr := decodeReading(it.counter, hk, hv)
			it.err = derr
			if derr == nil {
				it.err = fmt.Errorf("%w: reading of counter %q at %s: %v", ErrCorrupt, it.counter, keyString(hk), err)
			}
			return cr, false
		}
		cr = chunkReading{ns: hns, shape: shape, counts: counts, head: true}
		it.advanceHead()
		return cr, true
	}
	return cr, false
}

// advanceHead steps past the current head reading and any repeat of its
// time (a damaged file could hold one in two places; it counts once).
func (it *readingIter) advanceHead() {
	ns := it.head[it.hi2].ns
	for it.hi2 < len(it.head) && it.head[it.hi2].ns == ns {
		it.hi2++
	}
}

// shared is reading without copies: Sizes is the run's own slice, shared
// by the readings of the run. For StreamReadings only.
func (it *readingIter) shared(cr *chunkReading) (Reading, error) {
	var id *byte
	if len(cr.shape) > 0 && !cr.head {
		id = &cr.shape[0]
	}
	tpl, ok := it.template[id]
	if !ok || id == nil || tpl.Differential {
		return it.reading(cr)
	}
	tpl.Time = nsTime(cr.ns)
	tpl.Counts = cr.counts
	if len(tpl.Counts) != len(tpl.Sizes) {
		return it.reading(cr)
	}
	return tpl, nil
}

// reading turns cr into a checked Reading. The shape of a run is decoded
// and checked once; later readings of the run copy it.
func (it *readingIter) reading(cr *chunkReading) (Reading, error) {
	var id *byte
	if len(cr.shape) > 0 && !cr.head {
		id = &cr.shape[0]
	}
	tpl, ok := it.template[id]
	if !ok || id == nil {
		key := nanosKey(cr.ns)
		r, err := decodeReading(it.counter, key, cr.v1Value(key))
		if err != nil {
			return r, err
		}
		if id != nil {
			tpl = r
			tpl.Counts = nil
			it.template[id] = tpl
		}
		return r, nil
	}
	r := tpl
	r.Time = nsTime(cr.ns)
	r.Sizes = append([]float64(nil), tpl.Sizes...)
	r.Counts = cr.counts // decoded afresh for this scan: not shared with any other reading
	if len(r.Counts) != len(r.Sizes) {
		return r, fmt.Errorf("%w: reading of counter %q at %s: %d counts for %d sizes", ErrCorrupt, it.counter, keyString(nanosKey(cr.ns)), len(r.Counts), len(r.Sizes))
	}
	if r.Differential {
		if field, reason := checkReading(&r); field != "" {
			return r, fmt.Errorf("%w: reading of counter %q at %s: %s: %s", ErrCorrupt, it.counter, keyString(nanosKey(cr.ns)), field, reason)
		}
	}
	return r, nil
}

// storedValue returns the schema-1 value of counter's reading at key,
// from the legacy head or from a chunk; nil when there is none. The head
// log is looked up by its callers (the writer's index, or a headView).
func storedValue(tx *bolt.Tx, counter string, key []byte) ([]byte, error) {
	if b := tx.Bucket(bucketReadings).Bucket([]byte(counter)); b != nil {
		if v := b.Get(key); v != nil {
			return v, nil
		}
	}
	k, v, ns := chunkCovering(tx, bucketChunks, counter, key)
	if k == nil {
		return nil, nil
	}
	rs, _, err := decodeChunk(counter, k, v)
	if err != nil {
		return nil, err
	}
	for i := range rs {
		if rs[i].ns == ns {
			return rs[i].v1Value(key), nil
		}
	}
	return nil, nil
}

// lastChunkNanos is the time of counter's newest chunked reading, −1 when
// it has none: a reading after it cannot be a duplicate of a chunked one.
func lastChunkNanos(tx *bolt.Tx, counter string) int64 {
	return lastChunkIn(tx, bucketChunks, counter)
}

// chunkCovering returns the chunk of name in the chunk bucket kind that
// would hold the sample at key, and key's time: k is nil when no chunk can
// (none ends at or after it, or the next one starts after it). Chunks are
// keyed by their last sample's time.
func chunkCovering(tx *bolt.Tx, kind []byte, name string, key []byte) (k, v []byte, ns int64) {
	ns, _ = keyNanos(key)
	root := tx.Bucket(kind)
	if root == nil {
		return nil, nil, ns
	}
	b := root.Bucket([]byte(name))
	if b == nil {
		return nil, nil, ns
	}
	k, v = b.Cursor().Seek(key)
	if k == nil {
		return nil, nil, ns
	}
	if _, first, ok := chunkHeader(v); ok && first > ns {
		return nil, nil, ns
	}
	return k, v, ns
}

// lastChunkIn is the key time of name's last chunk in the chunk bucket
// kind (its newest sample), −1 when it has none.
func lastChunkIn(tx *bolt.Tx, kind []byte, name string) int64 {
	root := tx.Bucket(kind)
	if root == nil {
		return -1
	}
	b := root.Bucket([]byte(name))
	if b == nil {
		return -1
	}
	k, _ := b.Cursor().Last()
	if ns, ok := keyNanos(k); ok {
		return ns
	}
	return -1
}

// readingCounters lists the counters with readings in the legacy head,
// in chunks, or in the head records of hv, in byte order.
func readingCounters(tx *bolt.Tx, hv *headView) []string {
	names := seriesNames(tx, bucketReadings, bucketChunks)
	if hv == nil {
		return names
	}
	for _, n := range hv.counters() {
		if _, found := slices.BinarySearch(names, n); !found {
			names = append(names, n)
		}
	}
	slices.Sort(names)
	return names
}

// pressureSensors lists the DP sensors with samples in the head or in
// chunks, in byte order.
func pressureSensors(tx *bolt.Tx) []string { return seriesNames(tx, bucketPressure, bucketPChunks) }

func seriesNames(tx *bolt.Tx, kinds ...[]byte) []string {
	var out []string
	seen := map[string]bool{}
	for _, kind := range kinds {
		root := tx.Bucket(kind)
		if root == nil {
			continue
		}
		_ = root.ForEachBucket(func(name []byte) error {
			if !seen[string(name)] {
				seen[string(name)] = true
				out = append(out, string(name))
			}
			return nil
		})
	}
	slices.Sort(out)
	return out
}
