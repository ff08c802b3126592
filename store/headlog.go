package store

import (
	"encoding/binary"
	"fmt"
	"slices"
	"sort"
	"sync"

	bolt "go.etcd.io/bbolt"
)

// The readings head is a log: each AppendReadings call that stores
// anything adds one record to bucketHeadLog under the next sequence number,
// holding all the readings it stored, grouped by counter. Appending is then
// one put of a few tens of kilobytes, written as contiguous pages, rather
// than a put per reading into each counter's tree (which dirtied a page per
// counter per call, and most of a durable append's cost was writing those
// pages out). Compaction (compact.go) moves whole records into chunks and
// deletes them in the same transaction.
//
// Records are never changed once written, only deleted, so a decoded
// record is kept in memory by sequence number (headState) and shared by
// every reader whose snapshot still holds it. The writer keeps an index of
// every head reading by counter and time for its duplicate check, brought
// up to date from the records at the start of each write transaction, so a
// rolled-back transaction never leaves anything in it.
var bucketHeadLog = []byte("headlog") // sequence → batch of readings

// headVal is one reading of a head record: its time and schema-1 value.
type headVal struct {
	ns  int64
	val []byte
}

// headRec is one decoded head record.
type headRec struct {
	seq uint64
	by  map[string][]headVal // by counter, ascending time
	n   int
}

// encodeHeadRec encodes a record: version | uvarint counters, then per
// counter (in byte order) its name, uvarint readings, and per reading the
// 8-byte time and the length-prefixed schema-1 value | CRC-32C.
func encodeHeadRec(key []byte, by map[string][]headVal) []byte {
	names := make([]string, 0, len(by))
	size := 16
	for name, vs := range by {
		names = append(names, name)
		size += len(name) + 4
		for _, v := range vs {
			size += 10 + len(v.val)
		}
	}
	slices.Sort(names)
	b := make([]byte, 0, size+crcLen)
	b = append(b, codecV1)
	b = binary.AppendUvarint(b, uint64(len(names)))
	for _, name := range names {
		vs := by[name]
		sortHeadVals(vs)
		b = appendBytes(b, []byte(name))
		b = binary.AppendUvarint(b, uint64(len(vs)))
		for _, v := range vs {
			b = binary.BigEndian.AppendUint64(b, uint64(v.ns))
			b = appendBytes(b, v.val)
		}
	}
	return seal(key, b)
}

// decodeHeadRec decodes a record under key. With own set the record's
// bytes are copied first, so that it outlives the transaction; without,
// its values point into the transaction's pages. Any fault gives
// ErrCorrupt: a record is checked whole by its checksum, and each reading
// again by its own when it is read.
func decodeHeadRec(key, v []byte, own bool) (*headRec, error) {
	seq, ok := keyNanos(key)
	if !ok || seq <= 0 {
		return nil, fmt.Errorf("%w: head record key %x is not a sequence number", ErrCorrupt, key)
	}
	body, err := unseal(key, v)
	if err != nil {
		return nil, fmt.Errorf("%w: head record %d: %v", ErrCorrupt, seq, err)
	}
	return parseHeadRec(uint64(seq), body, own)
}

// parseHeadRec reads the body of a record (version byte and checksum
// taken off).
func parseHeadRec(seq uint64, body []byte, own bool) (*headRec, error) {
	if own {
		body = slices.Clone(body)
	}
	d := decoder{b: body}
	nc := d.uvarint("counters")
	if d.err == nil && nc > uint64(len(d.b)) {
		d.fail("counters: %d, more than the record holds", nc)
	}
	rec := &headRec{seq: seq, by: make(map[string][]headVal, nc)}
	prevName := ""
	for i := uint64(0); i < nc && d.err == nil; i++ {
		name := d.str("counter", maxNameLen)
		if d.err != nil {
			break
		}
		if why := checkName(name); why != "" {
			d.fail("counter %q: %s", name, why)
			break
		}
		if i > 0 && name <= prevName {
			d.fail("counter %q does not follow %q in byte order", name, prevName)
			break
		}
		prevName = name
		n := d.uvarint("readings")
		if d.err == nil && n > uint64(len(d.b))/9 {
			d.fail("readings of %q: %d, more than the record holds", name, n)
			break
		}
		vs := make([]headVal, 0, n)
		for j := uint64(0); j < n && d.err == nil; j++ {
			if len(d.b) < 8 {
				d.fail("time: record ends early")
				break
			}
			ns := int64(binary.BigEndian.Uint64(d.b))
			d.b = d.b[8:]
			if j > 0 && ns <= vs[len(vs)-1].ns {
				d.fail("reading of %q at %s does not follow the one before it", name, keyString(nanosKey(ns)))
				break
			}
			ln := d.uvarint("value length")
			if d.err == nil && ln > uint64(len(d.b)) {
				d.fail("value of %q at %s: %d bytes, more than the record holds", name, keyString(nanosKey(ns)), ln)
				break
			}
			if d.err != nil {
				break
			}
			vs = append(vs, headVal{ns: ns, val: d.b[:ln:ln]})
			d.b = d.b[ln:]
		}
		rec.by[name] = vs
		rec.n += len(vs)
	}
	d.end()
	if d.err != nil {
		return nil, fmt.Errorf("%w: head record %d: %v", ErrCorrupt, seq, d.err)
	}
	return rec, nil
}

// headState is the store's memory of the head log.
type headState struct {
	mu    sync.Mutex
	recs  map[uint64]*headRec // decoded records, shared by every reader
	floor uint64              // records below it were compacted away: never cached again

	// Used only inside write transactions, which bbolt runs one at a time.
	idx    map[string]map[int64][]byte // every reading of the records up to synced
	synced uint64
	dtx    *bolt.Tx
	delta  map[string]map[int64][]byte // readings put by dtx, not committed yet
}

func newHeadState() *headState {
	return &headState{recs: map[uint64]*headRec{}, idx: map[string]map[int64][]byte{}}
}

// rec returns the decoded record under key, decoding it from v (of tx)
// and keeping it when it is not known yet.
func (h *headState) rec(key, v []byte) (*headRec, error) {
	seq, _ := keyNanos(key)
	if h == nil {
		return decodeHeadRec(key, v, false)
	}
	h.mu.Lock()
	r := h.recs[uint64(seq)]
	h.mu.Unlock()
	if r != nil {
		return r, nil
	}
	r, err := decodeHeadRec(key, v, true)
	if err != nil {
		return nil, err
	}
	h.mu.Lock()
	if r.seq >= h.floor {
		if have := h.recs[r.seq]; have != nil {
			r = have
		} else {
			h.recs[r.seq] = r
		}
	}
	h.mu.Unlock()
	return r, nil
}

// begin prepares the writer's index for tx: records committed since the
// last write transaction are added, records compacted away are dropped,
// and a fresh delta collects what tx puts. Damaged records are left out
// (Verify names them; their readings cannot be compared anyway).
func (h *headState) begin(tx *bolt.Tx) {
	if h.dtx == tx {
		return
	}
	h.dtx, h.delta = tx, map[string]map[int64][]byte{}
	b := tx.Bucket(bucketHeadLog)
	if b == nil {
		return
	}
	c := b.Cursor()
	first, _ := c.First()
	firstSeq := b.Sequence() + 1
	if ns, ok := keyNanos(first); ok {
		firstSeq = uint64(ns)
	}
	if firstSeq > h.floor {
		h.mu.Lock()
		h.floor = firstSeq
		var gone []*headRec
		for seq, r := range h.recs {
			if seq < firstSeq {
				gone = append(gone, r)
				delete(h.recs, seq)
			}
		}
		h.mu.Unlock()
		for _, r := range gone {
			if r.seq > h.synced {
				continue // never indexed
			}
			for name, vs := range r.by {
				m := h.idx[name]
				for _, v := range vs {
					delete(m, v.ns)
				}
				if len(m) == 0 {
					delete(h.idx, name)
				}
			}
		}
	}
	if b.Sequence() <= h.synced {
		return
	}
	for k, v := c.Seek(seqKey(h.synced + 1)); k != nil; k, v = c.Next() {
		r, err := h.rec(k, v)
		if err != nil {
			continue
		}
		for name, vs := range r.by {
			m := h.idx[name]
			if m == nil {
				m = make(map[int64][]byte, len(vs))
				h.idx[name] = m
			}
			for _, v := range vs {
				m[v.ns] = v.val
			}
		}
	}
	h.synced = b.Sequence()
}

// lookup returns the head value of counter at ns as the writer's
// transaction sees it, or nil.
func (h *headState) lookup(counter string, ns int64) []byte {
	if v := h.delta[counter][ns]; v != nil {
		return v
	}
	return h.idx[counter][ns]
}

// put notes a reading the writer's transaction stored.
func (h *headState) put(counter string, ns int64, val []byte) {
	m := h.delta[counter]
	if m == nil {
		m = map[int64][]byte{}
		h.delta[counter] = m
	}
	m[ns] = val
}

// damagedHeadRec is a record whose checksum fails, read as far as its
// layout allows, for Verify to name the readings in it that changed (each
// has its own checksum); nil when even the layout is broken.
func damagedHeadRec(key, v []byte) *headRec {
	seq, ok := keySeq(key)
	if !ok || len(v) < 1+crcLen || v[0] != codecV1 {
		return nil
	}
	r, err := parseHeadRec(seq, v[1:len(v)-crcLen], false)
	if err != nil {
		return nil
	}
	return r
}

// headView is the head as one transaction sees it: the records of its
// snapshot (legacy per-reading head values are read from their bucket).
type headView struct {
	tx   *bolt.Tx
	recs []*headRec
	bad  []error // records that do not decode
}

// viewHead collects the head records of tx, decoded once per store.
func viewHead(tx *bolt.Tx, h *headState) *headView {
	hv := &headView{tx: tx}
	b := tx.Bucket(bucketHeadLog)
	if b == nil {
		return hv
	}
	c := b.Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		r, err := h.rec(k, v)
		if err != nil {
			hv.bad = append(hv.bad, err)
			continue
		}
		hv.recs = append(hv.recs, r)
	}
	return hv
}

// values returns counter's head readings in [lo, hi), in time order: the
// records' and, from a file written before the head log, the legacy
// bucket's. A nil view gives the legacy ones only (what the hourly
// rollups already count).
func (hv *headView) values(tx *bolt.Tx, counter string, lo, hi int64) []headVal {
	var out []headVal
	if b := tx.Bucket(bucketReadings).Bucket([]byte(counter)); b != nil {
		c := b.Cursor()
		end := nanosKey(hi)
		for k, v := c.Seek(nanosKey(lo)); k != nil && string(k) < string(end); k, v = c.Next() {
			ns, ok := keyNanos(k)
			if !ok {
				continue
			}
			out = append(out, headVal{ns: ns, val: v})
		}
	}
	lv := hv.logValues(counter, lo, hi)
	if len(out) == 0 {
		return lv
	}
	out = append(out, lv...)
	sortHeadVals(out)
	return out
}

func sortHeadVals(vs []headVal) {
	slices.SortStableFunc(vs, func(a, b headVal) int {
		switch {
		case a.ns < b.ns:
			return -1
		case a.ns > b.ns:
			return 1
		}
		return 0
	})
}

// logValues is values without the legacy bucket: the head log's readings
// of counter in [lo, hi), in time order.
func (hv *headView) logValues(counter string, lo, hi int64) []headVal {
	if hv == nil {
		return nil
	}
	var out []headVal
	sorted := true
	for _, r := range hv.recs {
		vs := r.by[counter]
		if len(vs) == 0 {
			continue
		}
		i := sort.Search(len(vs), func(i int) bool { return vs[i].ns >= lo })
		j := sort.Search(len(vs), func(i int) bool { return vs[i].ns >= hi })
		if i == j {
			continue
		}
		if len(out) > 0 && vs[i].ns <= out[len(out)-1].ns {
			sorted = false
		}
		out = append(out, vs[i:j]...)
	}
	if !sorted {
		sortHeadVals(out)
	}
	return out
}

// get returns counter's head value at ns from the records, or nil.
func (hv *headView) get(counter string, ns int64) []byte {
	if hv == nil {
		return nil
	}
	for _, r := range hv.recs {
		vs := r.by[counter]
		i := sort.Search(len(vs), func(i int) bool { return vs[i].ns >= ns })
		if i < len(vs) && vs[i].ns == ns {
			return vs[i].val
		}
	}
	return nil
}

// counters lists the counters with readings in the records.
func (hv *headView) counters() []string {
	seen := map[string]bool{}
	var out []string
	for _, r := range hv.recs {
		for name := range r.by {
			if !seen[name] {
				seen[name] = true
				out = append(out, name)
			}
		}
	}
	slices.Sort(out)
	return out
}

// size is how many readings the records hold.
func (hv *headView) size() int {
	n := 0
	for _, r := range hv.recs {
		n += r.n
	}
	return n
}

// sweepLog deletes the head log's readings with time before limit: a
// record holding any is deleted and what it has left goes into a new
// record (records are never changed). Each record touched takes one from
// *budget. The writer's index is rebuilt from the log at its next
// transaction, whether this one commits or not.
func sweepLog(tx *bolt.Tx, h *headState, limit int64, budget *int) (int, error) {
	b := tx.Bucket(bucketHeadLog)
	if b == nil {
		return 0, nil
	}
	var keys [][]byte
	left := map[string][]headVal{}
	deleted := 0
	c := b.Cursor()
	for k, v := c.First(); k != nil && *budget > 0; k, v = c.Next() {
		r, err := decodeHeadRec(k, v, false)
		if err != nil {
			continue // left for Verify to name
		}
		hit := false
		for _, vs := range r.by {
			if len(vs) > 0 && vs[0].ns < limit {
				hit = true
			}
		}
		if !hit {
			continue
		}
		*budget--
		keys = append(keys, slices.Clone(k))
		for name, vs := range r.by {
			for _, hv := range vs {
				if hv.ns < limit {
					deleted++
					continue
				}
				left[name] = append(left[name], headVal{ns: hv.ns, val: slices.Clone(hv.val)})
			}
		}
	}
	if len(keys) == 0 {
		return 0, nil
	}
	for _, k := range keys {
		if err := b.Delete(k); err != nil {
			return 0, err
		}
	}
	if len(left) > 0 {
		seq, err := b.NextSequence()
		if err != nil {
			return 0, err
		}
		key := seqKey(seq)
		if err := b.Put(key, encodeHeadRec(key, left)); err != nil {
			return 0, err
		}
	}
	if h != nil {
		h.reset()
	}
	return deleted, nil
}

// reset empties the writer's index; the next write transaction reads it
// again from the log. Called inside a write transaction.
func (h *headState) reset() {
	h.idx, h.synced, h.dtx, h.delta = map[string]map[int64][]byte{}, 0, nil, nil
	h.mu.Lock()
	h.recs, h.floor = map[uint64]*headRec{}, 0
	h.mu.Unlock()
}

// logSpan is the time of counter's first and last reading in the
// records; ok is false when they hold none of its readings.
func (hv *headView) logSpan(counter string) (first, last int64, ok bool) {
	if hv == nil {
		return 0, 0, false
	}
	for _, r := range hv.recs {
		vs := r.by[counter]
		if len(vs) == 0 {
			continue
		}
		if !ok || vs[0].ns < first {
			first = vs[0].ns
		}
		if !ok || vs[len(vs)-1].ns > last {
			last = vs[len(vs)-1].ns
		}
		ok = true
	}
	return first, last, ok
}
