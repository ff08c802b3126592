package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"slices"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Compaction moves readings from the head (one value per reading, cheap
// to append and to check for duplicates) into chunks (a few bytes per
// reading). Each pass runs in write transactions of its own, each moving
// whole counters: the chunks written and the head values they replace
// change in the same transaction, so a crash at any point leaves every
// reading exactly once, in the head or in a chunk. A reader that met both
// (it cannot, but a damaged file might show it) counts the chunk's copy.
const (
	// DefaultCompactEvery is how often the daemon's background pass runs
	// when Options.CompactEvery is zero.
	DefaultCompactEvery = time.Minute
	// compactMinHead is how many legacy head readings a counter (or DP
	// sensor) gathers before a background pass moves them: fewer would
	// rewrite its last chunk for little gain. Close moves every reading
	// regardless.
	compactMinHead = 256
	// compactMinLog is how many readings the head log gathers before a
	// background pass moves it. A pass decodes and encodes each counter's
	// last chunk again to append to it; at 4 Ki (twenty readings a counter
	// at 200 counters) that was most of compaction's CPU and a sixth of
	// ingest's (BenchmarkIngestLiveShape: 79 000 → 122 000 readings/s at
	// 32 Ki, and chunks 6.4 → 5.7 bytes a reading, rewritten less often).
	// Close and an early pass move every record regardless.
	compactMinLog = 32 << 10
	// compactMaxRecords moves the log whatever its readings once it holds
	// this many records: a gateway or poller that sends one reading a call
	// makes a record of each, and every query walks the records of its
	// snapshot, so their number is kept to a few milliseconds' walk.
	compactMaxRecords = 1024
	// compactTxReadings bounds the readings one compaction transaction
	// moves, so that appends wait for it a few tens of milliseconds at most.
	compactTxReadings = 32 << 10
	// compactKick is how many readings appended since the last pass wake
	// the compactor early, whatever the timer: the head's pages are freed
	// and reused rather than growing the file, which bbolt never shrinks,
	// and the head a query merges stays a few megabytes.
	compactKick = 64 << 10
)

// CompactResult reports what a compaction pass moved.
type CompactResult struct {
	Counters int // counters, DP and environment sensors whose head records moved
	Readings int // readings, pressure and environment samples moved into chunks
	Chunks   int // chunks written (rewritten ones included)
}

// Compact moves every reading in the head into chunks. The daemon need
// not call it: a background pass does this every Options.CompactEvery
// for counters with enough head readings, and Close moves the rest. Tests,
// benchmarks and `cleanmon bench` call it to measure the store at rest.
func (s *Store) Compact(ctx context.Context) (CompactResult, error) {
	if err := s.enter(); err != nil {
		return CompactResult{}, err
	}
	defer s.exit()
	return s.compact(ctx, 1)
}

// compactHook, when set by a test, runs inside each compaction transaction
// after the chunks are written and before the head values go; an error
// from it rolls the transaction back.
var compactHook func(counter string) error

func (s *Store) compact(ctx context.Context, minHead int) (CompactResult, error) {
	var res CompactResult
	type item struct {
		pressure bool
		name     string
		env      bool // an environment sensor (echunk.go)
	}
	var pending []item
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		for _, kind := range [][]byte{bucketReadings, bucketPressure, bucketEnvironment} {
			root := tx.Bucket(kind)
			err := root.ForEachBucket(func(name []byte) error {
				c := root.Bucket(name).Cursor()
				n := 0
				for k, _ := c.First(); k != nil && n < minHead; k, _ = c.Next() {
					n++
				}
				if n >= minHead && n > 0 {
					pending = append(pending, item{bytes.Equal(kind, bucketPressure), string(name), bytes.Equal(kind, bucketEnvironment)})
				}
				return nil
			})
			if err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return res, err
	}
	if err := s.compactLog(ctx, minHead, &res); err != nil {
		return res, err
	}
	for len(pending) > 0 {
		if err := ctx.Err(); err != nil {
			return res, err
		}
		var part CompactResult
		done := 0
		err := s.update(func(tx *bolt.Tx) error {
			part, done = CompactResult{}, 0
			for _, it := range pending {
				if part.Readings >= compactTxReadings {
					break
				}
				counter := it.name
				move := compactCounter
				if it.pressure {
					move = compactSensor
				}
				if it.env {
					move = compactEnvSensor
				}
				moved, chunks, err := move(tx, counter)
				if errors.Is(err, ErrCorrupt) || errors.Is(err, errChunkOverlap) {
					// Found before anything of this counter changed: its
					// readings stay in the head (Verify names the damage),
					// and the other counters go on.
					s.log.Error("store: compaction passes over a damaged counter", "counter", counter, "error", err.Error())
					done++
					continue
				}
				if err != nil {
					return err
				}
				done++
				if moved > 0 {
					part.Counters++
					part.Readings += moved
					part.Chunks += chunks
				}
			}
			return nil
		})
		if err != nil {
			return res, err
		}
		pending = pending[done:]
		res.Counters += part.Counters
		res.Readings += part.Readings
		res.Chunks += part.Chunks
	}
	return res, nil
}

// compactCounter merges the head readings of counter with its last chunk
// (when not full) and with any chunk they overlap, writes the result as
// full chunks, and deletes the head values and the chunks replaced.
func compactCounter(tx *bolt.Tx, counter string) (moved, chunks int, err error) {
	head := tx.Bucket(bucketReadings).Bucket([]byte(counter))
	if head == nil {
		return 0, 0, nil
	}
	var fresh []chunkReading
	var headKeys [][]byte
	c := head.Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		ns, ok := keyNanos(k)
		if !ok {
			return 0, 0, fmt.Errorf("%w: readings of counter %q: key %x is not an 8-byte time", ErrCorrupt, counter, k)
		}
		shape, counts, err := splitV1(k, v)
		if err != nil {
			if _, derr := decodeReading(counter, k, v); derr != nil {
				return 0, 0, derr
			}
			return 0, 0, fmt.Errorf("%w: reading of counter %q at %s: %v", ErrCorrupt, counter, keyString(k), err)
		}
		// Copies: the values live in pages this transaction rewrites.
		fresh = append(fresh, chunkReading{ns: ns, shape: append([]byte(nil), shape...), counts: counts, tag: tagOf(v), hasTag: true})
		headKeys = append(headKeys, append([]byte(nil), k...))
	}
	if len(fresh) == 0 {
		return 0, 0, nil
	}
	chunks, err = mergeIntoChunks(tx, counter, fresh)
	if err != nil {
		return 0, 0, err
	}
	if err := dropMovedHead(tx.Bucket(bucketReadings), head, counter, headKeys); err != nil {
		return 0, 0, err
	}
	return len(fresh), chunks, nil
}

// dropMovedHead deletes the head values of name that compaction moved
// into chunks, and name's head bucket once it is empty. compactHook runs
// first, so a test can fail the transaction between the two writes.
func dropMovedHead(root, head *bolt.Bucket, name string, keys [][]byte) error {
	if compactHook != nil {
		if err := compactHook(name); err != nil {
			return err
		}
	}
	for _, k := range keys {
		if err := head.Delete(k); err != nil {
			return err
		}
	}
	if k, _ := head.Cursor().First(); k == nil {
		// An empty nested bucket still takes a page; the next append
		// creates it again.
		return root.DeleteBucket([]byte(name))
	}
	return nil
}

// chunksFrom decodes the chunks a compaction from time ns rewrites: every
// chunk ending at or after ns, and the last chunk when it is not full.
func chunksFrom(cb *bolt.Bucket, counter string, ns int64) ([]chunkReading, [][]byte, error) {
	c := cb.Cursor()
	k, v := c.Seek(nanosKey(ns))
	if k == nil {
		k, v = c.Last()
		if k == nil {
			return nil, nil, nil
		}
		if n, _, ok := chunkHeader(v); ok && n >= maxChunkReadings {
			return nil, nil, nil
		}
	}
	var out []chunkReading
	var keys [][]byte
	for ; k != nil; k, v = c.Next() {
		rs, tags, err := decodeChunk(counter, k, v)
		if err != nil {
			return nil, nil, err
		}
		// The checksum held, so the stored tags are the readings' own.
		for i := range rs {
			rs[i].shape = append([]byte(nil), rs[i].shape...)
			rs[i].tag, rs[i].hasTag = tags[i], true
		}
		out = append(out, rs...)
		keys = append(keys, append([]byte(nil), k...))
	}
	return out, keys, nil
}

// errChunkOverlap: a head reading has the time of a chunked one. Appends
// check both, so only a damaged or hand-edited file gets here; the
// counter is left as it is for Verify to report.
var errChunkOverlap = errors.New("store: a head reading repeats a chunked one")

func mergeChunkReadings(counter string, a, b []chunkReading) ([]chunkReading, error) {
	out := make([]chunkReading, 0, len(a)+len(b))
	i, j := 0, 0
	for i < len(a) || j < len(b) {
		switch {
		case j == len(b) || (i < len(a) && a[i].ns < b[j].ns):
			out = append(out, a[i])
			i++
		case i == len(a) || b[j].ns < a[i].ns:
			out = append(out, b[j])
			j++
		default:
			return nil, fmt.Errorf("%w: counter %q at %s", errChunkOverlap, counter, keyString(nanosKey(a[i].ns)))
		}
	}
	return out, nil
}

// compactor runs background passes until stop is closed.
func (s *Store) compactor(every time.Duration, stop <-chan struct{}, done chan<- struct{}) {
	defer close(done)
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		minHead := compactMinHead
		select {
		case <-stop:
			return
		case <-t.C:
		case <-s.kick:
			minHead = 1
		}
		s.sinceCompact.Store(0)
		if _, err := s.compact(context.Background(), minHead); err != nil {
			s.log.Error("store: background compaction failed; readings stay in the head", "error", err.Error())
		}
	}
}

// noteAppended counts stored readings towards the next early pass.
func (s *Store) noteAppended(n int) {
	if s.kick == nil || n == 0 {
		return
	}
	if s.sinceCompact.Add(int64(n)) >= compactKick {
		select {
		case s.kick <- struct{}{}:
		default:
		}
	}
}

// sweepChunks deletes the chunked readings with time before limit: whole
// chunks that end before it, and the older part of the one that straddles
// it (rewritten). Each chunk touched takes one from *budget.
func sweepChunks(root *bolt.Bucket, limit int64, budget *int) (int, error) {
	return sweepChunked(root, limit, budget, func(name string, k, v []byte, limit int64) ([]byte, int, error) {
		rs, _, err := decodeChunk(name, k, v)
		if err != nil {
			return nil, 0, err
		}
		i := 0
		for i < len(rs) && rs[i].ns < limit {
			i++
		}
		for j := range rs {
			rs[j].shape = append([]byte(nil), rs[j].shape...)
		}
		return encodeChunk(k, rs[i:]), i, nil
	})
}

// sweepPChunks is sweepChunks for pressure chunks.
func sweepPChunks(root *bolt.Bucket, limit int64, budget *int) (int, error) {
	return sweepChunked(root, limit, budget, func(name string, k, v []byte, limit int64) ([]byte, int, error) {
		ps, _, err := decodePChunk(name, k, v)
		if err != nil {
			return nil, 0, err
		}
		i := 0
		for i < len(ps) && ps[i].ns < limit {
			i++
		}
		return encodePChunk(k, ps[i:]), i, nil
	})
}

// sweepChunked deletes whole chunks before limit and has cut rewrite the
// one that straddles it, returning its new value and how many it dropped.
func sweepChunked(root *bolt.Bucket, limit int64, budget *int, cut func(name string, k, v []byte, limit int64) ([]byte, int, error)) (int, error) {
	var names [][]byte
	if err := root.ForEachBucket(func(name []byte) error {
		names = append(names, append([]byte(nil), name...))
		return nil
	}); err != nil {
		return 0, err
	}
	deleted := 0
	for _, name := range names {
		b := root.Bucket(name)
		c := b.Cursor()
		var gone [][]byte
		var straddle []byte
		for k, v := c.First(); k != nil && *budget > 0; k, v = c.Next() {
			_, first, ok := chunkHeader(v)
			if !ok || first >= limit {
				break
			}
			*budget--
			if last, _ := keyNanos(k); last < limit {
				n, _, _ := chunkHeader(v)
				deleted += n
				gone = append(gone, append([]byte(nil), k...))
				continue
			}
			straddle = append([]byte(nil), k...)
			break
		}
		for _, k := range gone {
			if err := b.Delete(k); err != nil {
				return deleted, err
			}
		}
		if straddle != nil {
			nv, n, err := cut(string(name), straddle, b.Get(straddle), limit)
			if err != nil {
				return deleted, err
			}
			if err := b.Put(straddle, nv); err != nil {
				return deleted, err
			}
			deleted += n
		}
		if k, _ := b.Cursor().First(); k == nil {
			if err := root.DeleteBucket(name); err != nil {
				return deleted, err
			}
		}
		if *budget <= 0 {
			break
		}
	}
	return deleted, nil
}

// compactLog moves the head log into chunks, whole records at a time, up
// to compactTxReadings a transaction: per counter, the readings of the
// records taken are merged into its chunks (as compactCounter does), added
// to the hourly rollups, and the records deleted, all in one transaction.
// A background pass (minHead above 1) leaves a log of fewer than
// compactMinLog readings in fewer than compactMaxRecords records alone. A
// record that does not decode stays where it is (Verify names it) and the
// others go on.
func (s *Store) compactLog(ctx context.Context, minHead int, res *CompactResult) error {
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		var part CompactResult
		more := false
		err := s.update(func(tx *bolt.Tx) error {
			part, more = CompactResult{}, false
			log := tx.Bucket(bucketHeadLog)
			if log == nil {
				return nil
			}
			hv := viewHead(tx, s.head)
			for _, bad := range hv.bad {
				s.log.Error("store: compaction passes over a damaged head record", "error", bad.Error())
			}
			total := hv.size()
			if total == 0 || (minHead > 1 && total < compactMinLog && len(hv.recs) < compactMaxRecords) {
				return nil
			}
			var take []*headRec
			n := 0
			for _, r := range hv.recs {
				if n >= compactTxReadings {
					more = true
					break
				}
				take = append(take, r)
				n += r.n
			}
			fresh := map[string][]headVal{}
			for _, r := range take {
				for name, vs := range r.by {
					fresh[name] = append(fresh[name], vs...)
				}
			}
			names := make([]string, 0, len(fresh))
			for name := range fresh {
				names = append(names, name)
			}
			slices.Sort(names)
			rollups := newRollupSet(tx, s.log)
			kept := map[string][]headVal{} // damaged counters' readings: they stay in the head
			for _, name := range names {
				moved, chunks, err := s.compactLogCounter(tx, rollups, name, fresh[name])
				if errors.Is(err, ErrCorrupt) || errors.Is(err, errChunkOverlap) {
					// Found before anything of this counter changed: its
					// readings stay in the head (Verify names the damage),
					// and the other counters go on.
					s.log.Error("store: compaction passes over a damaged counter", "counter", name, "error", err.Error())
					kept[name] = fresh[name]
					continue
				}
				if err != nil {
					return err
				}
				part.Counters++
				part.Readings += moved
				part.Chunks += chunks
				if compactHook != nil {
					if err := compactHook(name); err != nil {
						return err
					}
				}
			}
			if err := rollups.flush(); err != nil {
				return err
			}
			for _, r := range take {
				if err := log.Delete(seqKey(r.seq)); err != nil {
					return err
				}
			}
			if len(kept) > 0 {
				// Records are never changed: what stays goes into a new one.
				seq, err := log.NextSequence()
				if err != nil {
					return err
				}
				key := seqKey(seq)
				if err := log.Put(key, encodeHeadRec(key, kept)); err != nil {
					return err
				}
				more = false // the kept record would be taken again at once
			}
			return nil
		})
		if err != nil {
			return err
		}
		res.Counters += part.Counters
		res.Readings += part.Readings
		res.Chunks += part.Chunks
		if !more {
			return nil
		}
	}
}

// compactLogCounter merges vs, counter's readings from head records, into
// its chunks and its hourly rollups.
func (s *Store) compactLogCounter(tx *bolt.Tx, rollups *rollupSet, counter string, vs []headVal) (moved, chunks int, err error) {
	sortHeadVals(vs)
	fresh := make([]chunkReading, 0, len(vs))
	preps := make([]preparedReading, 0, len(vs))
	for i, v := range vs {
		if i > 0 && v.ns == vs[i-1].ns {
			// Two records hold one reading: only a damaged file gets here
			// (appends check the head); the first counts, as scans do.
			continue
		}
		key := nanosKey(v.ns)
		r, err := decodeReading(counter, key, v.val)
		if err != nil {
			return 0, 0, err
		}
		shape, counts, err := splitV1(key, v.val)
		if err != nil {
			return 0, 0, fmt.Errorf("%w: reading of counter %q at %s: %v", ErrCorrupt, counter, keyString(key), err)
		}
		fresh = append(fresh, chunkReading{ns: v.ns, shape: slices.Clone(shape), counts: counts, tag: tagOf(v.val), hasTag: true})
		preps = append(preps, preparedReading{counter: counter, ns: v.ns, sizes: r.Sizes, perM3: r.PerM3()})
	}
	chunks, err = mergeIntoChunks(tx, counter, fresh)
	if err != nil {
		return 0, 0, err
	}
	// The chunks now hold the readings: a damaged rollup rebuilt from
	// them already counts them.
	for i := range preps {
		if err := rollups.add(&preps[i]); err != nil {
			return 0, 0, err
		}
	}
	return len(fresh), chunks, nil
}

// mergeIntoChunks merges fresh readings (ascending, not yet chunked) into
// counter's chunks: the last chunk while not full and every chunk they
// overlap are rewritten together with them as full chunks. It returns how
// many chunks it wrote.
func mergeIntoChunks(tx *bolt.Tx, counter string, fresh []chunkReading) (int, error) {
	cb, err := tx.Bucket(bucketChunks).CreateBucketIfNotExists([]byte(counter))
	if err != nil {
		return 0, fmt.Errorf("store: chunks of %q: %w", counter, err)
	}
	cb.FillPercent = fillPercent
	old, oldKeys, err := chunksFrom(cb, counter, fresh[0].ns)
	if err != nil {
		return 0, err
	}
	merged, err := mergeChunkReadings(counter, old, fresh)
	if err != nil {
		return 0, err
	}
	for _, k := range oldKeys {
		if err := cb.Delete(k); err != nil {
			return 0, err
		}
	}
	chunks := 0
	for i := 0; i < len(merged); i += maxChunkReadings {
		part := merged[i:min(i+maxChunkReadings, len(merged))]
		key := nanosKey(part[len(part)-1].ns)
		if err := cb.Put(key, encodeChunk(key, part)); err != nil {
			return chunks, fmt.Errorf("store: put chunk of %q: %w", counter, err)
		}
		chunks++
	}
	return chunks, nil
}
