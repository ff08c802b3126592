package store

import (
	"log/slog"
	"math"
	"slices"

	bolt "go.etcd.io/bbolt"
)

// headEdit edits one counter's readings in the head log the way someone
// with the file and this package's encoders could: the record holding a
// reading is rewritten with its checksum recomputed. Tests use it to
// change, remove or add head readings behind the store's back.
type headEdit struct {
	tx      *bolt.Tx
	counter string
}

func headOf(tx *bolt.Tx, counter string) *headEdit { return &headEdit{tx, counter} }

// find returns the key and decoded copy of the record holding ns, or nil.
func (h *headEdit) find(ns int64) ([]byte, *headRec) {
	c := h.tx.Bucket(bucketHeadLog).Cursor()
	for k, v := c.First(); k != nil; k, v = c.Next() {
		r, err := decodeHeadRec(k, v, true)
		if err != nil {
			panic(err)
		}
		for _, hv := range r.by[h.counter] {
			if hv.ns == ns {
				return slices.Clone(k), r
			}
		}
	}
	return nil, nil
}

func (h *headEdit) rewrite(key []byte, r *headRec) error {
	n := 0
	for _, vs := range r.by {
		n += len(vs)
	}
	b := h.tx.Bucket(bucketHeadLog)
	if n == 0 {
		return b.Delete(key)
	}
	return b.Put(key, encodeHeadRec(key, r.by))
}

// Get returns the head value at k, or nil.
func (h *headEdit) Get(k []byte) []byte {
	ns, _ := keyNanos(k)
	_, r := h.find(ns)
	if r == nil {
		return nil
	}
	for _, hv := range r.by[h.counter] {
		if hv.ns == ns {
			return hv.val
		}
	}
	return nil
}

// Put replaces the value at k in its record, or adds it to the newest
// record.
func (h *headEdit) Put(k, v []byte) error {
	ns, _ := keyNanos(k)
	key, r := h.find(ns)
	if r == nil {
		lk, lv := h.tx.Bucket(bucketHeadLog).Cursor().Last()
		if lk == nil {
			panic("no head record to add to")
		}
		var err error
		if r, err = decodeHeadRec(lk, lv, true); err != nil {
			panic(err)
		}
		key = slices.Clone(lk)
		r.by[h.counter] = append(r.by[h.counter], headVal{ns: ns, val: v})
		return h.rewrite(key, r)
	}
	vs := r.by[h.counter]
	for i := range vs {
		if vs[i].ns == ns {
			vs[i].val = v
		}
	}
	return h.rewrite(key, r)
}

// Delete removes the reading at k from its record.
func (h *headEdit) Delete(k []byte) error {
	ns, _ := keyNanos(k)
	key, r := h.find(ns)
	if r == nil {
		return nil
	}
	r.by[h.counter] = slices.DeleteFunc(r.by[h.counter], func(hv headVal) bool { return hv.ns == ns })
	if len(r.by[h.counter]) == 0 {
		delete(r.by, h.counter)
	}
	return h.rewrite(key, r)
}

// First returns the earliest head reading of the counter.
func (h *headEdit) First() (k, v []byte) {
	vs := viewHead(h.tx, nil).logValues(h.counter, math.MinInt64, math.MaxInt64)
	if len(vs) == 0 {
		return nil, nil
	}
	return nanosKey(vs[0].ns), vs[0].val
}

// logToLegacy moves every head-log reading into the legacy head (one
// value per reading under readings/<counter>/<time>), which is how a file
// written before the head log holds them.
func logToLegacy(tx *bolt.Tx) error {
	hv := viewHead(tx, nil)
	rollups := newRollupSet(tx, slog.New(slog.DiscardHandler))
	for _, name := range hv.counters() {
		b, err := tx.Bucket(bucketReadings).CreateBucketIfNotExists([]byte(name))
		if err != nil {
			return err
		}
		for _, v := range hv.logValues(name, math.MinInt64, math.MaxInt64) {
			if err := b.Put(nanosKey(v.ns), slices.Clone(v.val)); err != nil {
				return err
			}
			// Such a file rolled each reading up as it was stored.
			r, err := decodeReading(name, nanosKey(v.ns), v.val)
			if err != nil {
				return err
			}
			p := preparedReading{counter: name, ns: v.ns, sizes: r.Sizes, perM3: r.PerM3()}
			if err := rollups.add(&p); err != nil {
				return err
			}
		}
	}
	if err := rollups.flush(); err != nil {
		return err
	}
	for _, r := range hv.recs {
		if err := tx.Bucket(bucketHeadLog).Delete(seqKey(r.seq)); err != nil {
			return err
		}
	}
	return nil
}
