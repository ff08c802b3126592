package store

import (
	"fmt"
	"math"
	"sort"

	bolt "go.etcd.io/bbolt"
)

// chunks checks every reading chunk: key order, decoding, checksum, and,
// in a chunk whose checksum fails, which readings changed (their tags no
// longer match). A head reading that repeats a chunked one is reported
// too: a reading lives in one place.
func (v *verifier) chunks(tx *bolt.Tx) {
	root := tx.Bucket(bucketChunks)
	if root == nil {
		return
	}
	v.guarded(string(bucketChunks), func() {
		_ = root.ForEach(func(name, val []byte) error {
			if val != nil {
				v.add("%s: entry %q is a value, not a bucket", bucketChunks, name)
				return nil
			}
			v.guarded(fmt.Sprintf("%s/%s", bucketChunks, name), func() { v.chunkSeries(tx, string(name), root.Bucket(name)) })
			return nil
		})
	})
}

func (v *verifier) chunkSeries(tx *bolt.Tx, counter string, b *bolt.Bucket) {
	head := tx.Bucket(bucketReadings).Bucket([]byte(counter))
	var prevLast int64 = -1
	c := b.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		if val == nil {
			v.add("%s/%s: %s is a bucket, not a value", bucketChunks, counter, keyString(k))
			continue
		}
		rs, tags, err := decodeChunk(counter, k, val)
		if rs == nil {
			v.addErr(err)
			continue
		}
		if rs[0].ns <= prevLast {
			v.add("chunk of counter %q ending %s overlaps the chunk before it", counter, keyString(k))
		}
		prevLast = rs[len(rs)-1].ns
		if err != nil {
			named := 0
			for i := range rs {
				key := nanosKey(rs[i].ns)
				if tagOf(rs[i].v1Value(key)) != tags[i] {
					v.add("reading of counter %q at %s: changed after it was stored (its chunk's checksum and its own tag do not match)", counter, keyString(key))
					named++
				}
			}
			if named == 0 {
				v.addErr(err)
			}
		}
		v.chunkReadings(counter, head, rs)
	}
}

// headLog checks the head log: every record decodes with its checksum,
// keys are sequence numbers, every reading in it decodes, and no reading
// is held by two records (or by a record and the legacy head).
func (v *verifier) headLog(tx *bolt.Tx) {
	b := tx.Bucket(bucketHeadLog)
	if b == nil {
		return
	}
	v.guarded(string(bucketHeadLog), func() {
		hv, problems := lenientHead(tx)
		v.hv = hv
		for _, p := range problems {
			v.add("%s", p)
		}
		seen := map[string]map[int64]bool{}
		legacy := tx.Bucket(bucketReadings)
		for _, r := range hv.recs {
			for name, vs := range r.by {
				m := seen[name]
				if m == nil {
					m = map[int64]bool{}
					seen[name] = m
				}
				var lb *bolt.Bucket
				if legacy != nil {
					lb = legacy.Bucket([]byte(name))
				}
				for _, hvv := range vs {
					key := nanosKey(hvv.ns)
					if _, err := decodeReading(name, key, hvv.val); err != nil {
						v.addErr(err)
					}
					if m[hvv.ns] || (lb != nil && lb.Get(key) != nil) {
						v.add("reading of counter %q at %s is held twice in the head", name, keyString(key))
					}
					m[hvv.ns] = true
				}
			}
		}
	})
}

// chunkReadings checks each distinct shape of a chunk once (and every
// differential reading, whose counts must add up), and that the head
// holds none of its readings.
func (v *verifier) chunkReadings(counter string, head *bolt.Bucket, rs []chunkReading) {
	checked := map[*byte]bool{}
	for i := range rs {
		id := &rs[i].shape[0]
		if !checked[id] || rs[i].shape[0]&flagDifferential != 0 {
			checked[id] = true
			if _, err := rs[i].toReading(counter); err != nil {
				v.addErr(err)
			}
		}
	}
	if v.hv != nil {
		for i := range rs {
			if v.hv.get(counter, rs[i].ns) != nil {
				v.add("reading of counter %q at %s is both in the head and in a chunk", counter, keyString(nanosKey(rs[i].ns)))
			}
		}
	}
	if head == nil {
		return
	}
	if k, _ := head.Cursor().Seek(nanosKey(rs[0].ns)); k == nil {
		return
	} else if ns, _ := keyNanos(k); ns > rs[len(rs)-1].ns {
		return
	}
	for i := range rs {
		if key := nanosKey(rs[i].ns); head.Get(key) != nil {
			v.add("reading of counter %q at %s is both in the head and in a chunk", counter, keyString(key))
		}
	}
}

// chunkCache finds chunked readings by key for the audit check, keeping
// the last chunk of each counter decoded: the readings an audit entry
// lists come in time order per counter.
type chunkCache struct {
	tx   *bolt.Tx
	hv   *headView
	m    map[string]*cachedChunk
	head map[string]*bolt.Bucket // read transactions do not cache nested buckets
	p    map[string][]pchunkSample
	e    map[string][]echunkSample // verify_echunk.go
}

type cachedChunk struct {
	first, last int64
	rs          []chunkReading
}

func newChunkCache(tx *bolt.Tx, hv *headView) *chunkCache {
	return &chunkCache{tx: tx, hv: hv, m: map[string]*cachedChunk{}, head: map[string]*bolt.Bucket{}, p: map[string][]pchunkSample{}}
}

// value returns the schema-1 value of counter's reading at key, from the
// head or a chunk, or nil. A chunk that does not decode gives nil (the
// walk of the chunks reports it).
func (cc *chunkCache) value(counter string, key []byte) []byte {
	ns, ok := keyNanos(key)
	if !ok {
		return nil
	}
	// The cached chunk first: after compaction nearly every reading is in
	// one, and a head lookup per reading would cost a tree search.
	if ch := cc.m[counter]; ch != nil && ns >= ch.first && ns <= ch.last {
		if v := ch.find(key, ns); v != nil {
			return v
		}
	}
	b, seen := cc.head[counter]
	if !seen {
		b = cc.tx.Bucket(bucketReadings).Bucket([]byte(counter))
		cc.head[counter] = b
	}
	if b != nil {
		if v := b.Get(key); v != nil {
			return v
		}
	}
	if v := cc.hv.get(counter, ns); v != nil {
		return v
	}
	ch := cc.m[counter]
	if ch == nil || ns < ch.first || ns > ch.last {
		if ch = cc.load(counter, key); ch == nil {
			return nil
		}
	}
	return ch.find(key, ns)
}

func (ch *cachedChunk) find(key []byte, ns int64) []byte {
	i := sort.Search(len(ch.rs), func(i int) bool { return ch.rs[i].ns >= ns })
	if i == len(ch.rs) || ch.rs[i].ns != ns {
		return nil
	}
	return ch.rs[i].v1Value(key)
}

func (cc *chunkCache) load(counter string, key []byte) *cachedChunk {
	root := cc.tx.Bucket(bucketChunks)
	if root == nil {
		return nil
	}
	b := root.Bucket([]byte(counter))
	if b == nil {
		return nil
	}
	k, v := b.Cursor().Seek(key)
	if k == nil {
		return nil
	}
	rs, _, _ := decodeChunk(counter, k, v)
	if rs == nil {
		return nil
	}
	ch := &cachedChunk{first: rs[0].ns, last: rs[len(rs)-1].ns, rs: rs}
	cc.m[counter] = ch
	return ch
}

// forEachReadingKey calls fn with the time of every reading of counter,
// head (the log's records of hv, when not nil) and chunks, in time order, without decoding head values: Verify
// counts a damaged reading as present (the walk reports the damage). A
// chunk that does not decode is passed over (the chunk walk reports it).
func forEachReadingKey(tx *bolt.Tx, hv *headView, counter string, fn func(ns int64)) {
	logged := hv.logValues(counter, math.MinInt64, math.MaxInt64)
	i := 0
	forEachKey(tx, bucketReadings, bucketChunks, counter, func(ns int64) {
		for ; i < len(logged) && logged[i].ns <= ns; i++ {
			fn(logged[i].ns)
		}
		fn(ns)
	})
	for ; i < len(logged); i++ {
		fn(logged[i].ns)
	}
}

// forEachKey is forEachReadingKey for any head and chunk bucket pair
// (readings, pressure samples).
func forEachKey(tx *bolt.Tx, headKind, chunkKind []byte, counter string, fn func(ns int64)) {
	var hc, cc *bolt.Cursor
	if b := tx.Bucket(headKind).Bucket([]byte(counter)); b != nil {
		hc = b.Cursor()
	}
	if root := tx.Bucket(chunkKind); root != nil {
		if b := root.Bucket([]byte(counter)); b != nil {
			cc = b.Cursor()
		}
	}
	var hk []byte
	if hc != nil {
		hk, _ = hc.First()
	}
	headUpTo := func(limit int64) {
		for ; hk != nil; hk, _ = hc.Next() {
			ns, ok := keyNanos(hk)
			if !ok {
				ns = -1
			}
			if ns > limit {
				return
			}
			fn(ns)
		}
	}
	if cc != nil {
		for k, v := cc.First(); k != nil; k, v = cc.Next() {
			for _, ns := range chunkTimes(k, v) {
				headUpTo(ns - 1)
				fn(ns)
			}
		}
	}
	headUpTo(1<<63 - 1)
}

// pressure is value for a pressure sample: head, or the cached chunk of
// its sensor.
func (cc *chunkCache) pressure(sensor string, key []byte) []byte {
	ns, ok := keyNanos(key)
	if !ok {
		return nil
	}
	find := func(ps []pchunkSample) []byte {
		i := sort.Search(len(ps), func(i int) bool { return ps[i].ns >= ns })
		if i < len(ps) && ps[i].ns == ns {
			return ps[i].v1Value(key)
		}
		return nil
	}
	if ps := cc.p[sensor]; len(ps) > 0 && ns >= ps[0].ns && ns <= ps[len(ps)-1].ns {
		if v := find(ps); v != nil {
			return v
		}
	}
	if b := cc.tx.Bucket(bucketPressure).Bucket([]byte(sensor)); b != nil {
		if v := b.Get(key); v != nil {
			return v
		}
	}
	root := cc.tx.Bucket(bucketPChunks)
	if root == nil {
		return nil
	}
	b := root.Bucket([]byte(sensor))
	if b == nil {
		return nil
	}
	k, v := b.Cursor().Seek(key)
	if k == nil {
		return nil
	}
	ps, _, _ := decodePChunk(sensor, k, v)
	if ps == nil {
		return nil
	}
	cc.p[sensor] = ps
	return find(ps)
}

// pchunks checks every pressure chunk as chunks does reading chunks.
func (v *verifier) pchunks(tx *bolt.Tx) {
	root := tx.Bucket(bucketPChunks)
	if root == nil {
		return
	}
	v.guarded(string(bucketPChunks), func() {
		_ = root.ForEach(func(name, val []byte) error {
			if val != nil {
				v.add("%s: entry %q is a value, not a bucket", bucketPChunks, name)
				return nil
			}
			v.guarded(fmt.Sprintf("%s/%s", bucketPChunks, name), func() { v.pchunkSeries(tx, string(name), root.Bucket(name)) })
			return nil
		})
	})
}

func (v *verifier) pchunkSeries(tx *bolt.Tx, sensor string, b *bolt.Bucket) {
	head := tx.Bucket(bucketPressure).Bucket([]byte(sensor))
	var prevLast int64 = -1
	c := b.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		if val == nil {
			v.add("%s/%s: %s is a bucket, not a value", bucketPChunks, sensor, keyString(k))
			continue
		}
		ps, tags, err := decodePChunk(sensor, k, val)
		if ps == nil {
			v.addErr(err)
			continue
		}
		if ps[0].ns <= prevLast {
			v.add("pressure chunk of sensor %q ending %s overlaps the chunk before it", sensor, keyString(k))
		}
		prevLast = ps[len(ps)-1].ns
		named := 0
		for i := range ps {
			key := nanosKey(ps[i].ns)
			if err != nil && tagOf(ps[i].v1Value(key)) != tags[i] {
				v.add("pressure of sensor %q at %s: changed after it was stored (its chunk's checksum and its own tag do not match)", sensor, keyString(key))
				named++
			}
			if head != nil && head.Get(key) != nil {
				v.add("pressure of sensor %q at %s is both in the head and in a chunk", sensor, keyString(key))
			}
		}
		if err != nil && named == 0 {
			v.addErr(err)
		}
	}
}

// lenientHead reads the head log as Verify sees it, with the problems of
// its records. A record whose checksum fails but whose layout reads still
// counts its readings as present; each that changed is named by its own
// checksum by the caller, and the record only when none is.
func lenientHead(tx *bolt.Tx) (*headView, []string) {
	hv := &headView{tx: tx}
	b := tx.Bucket(bucketHeadLog)
	if b == nil {
		return hv, nil
	}
	var problems []string
	c := b.Cursor()
	for k, val := c.First(); k != nil; k, val = c.Next() {
		if val == nil {
			problems = append(problems, fmt.Sprintf("%s: %x is a bucket, not a value", bucketHeadLog, k))
			continue
		}
		if seq, ok := keySeq(k); ok && seq > b.Sequence() {
			problems = append(problems, fmt.Sprintf("%s: record %d is beyond the log's sequence %d (written outside the store)", bucketHeadLog, seq, b.Sequence()))
		}
		r, err := decodeHeadRec(k, val, false)
		if err == nil {
			hv.recs = append(hv.recs, r)
			continue
		}
		if r = damagedHeadRec(k, val); r == nil {
			problems = append(problems, trimCorrupt(err))
			continue
		}
		hv.recs = append(hv.recs, r)
		named := false
		for name, vs := range r.by {
			for _, hvv := range vs {
				if _, rerr := decodeReading(name, nanosKey(hvv.ns), hvv.val); rerr != nil {
					named = true
				}
			}
		}
		if !named {
			problems = append(problems, trimCorrupt(err))
		}
	}
	return hv, problems
}
