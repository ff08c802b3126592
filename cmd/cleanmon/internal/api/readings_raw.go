package api

import (
	"errors"
	"net/http"
	"slices"
	"time"

	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// rawBatch is how many readings of one counter a raw stream reads from the
// store at a time. The zone's counters are merged row by row from these
// buffers, so memory is bounded by counters × rawBatch whatever the range,
// each store read is one short transaction, and a read seeks to the next
// stored reading: an empty stretch of the range costs nothing.
const rawBatch = 2048

// errBatchFull stops a store scan once a buffer is full.
var errBatchFull = errors.New("batch full")

// rowSink is where a readings answer goes: a JSON array or CSV rows.
type rowSink interface {
	Row(appendRow func([]byte) []byte) error
	Rows() int
	End()
	Fail(err error)
}

// rawSource is one counter's readings in a raw stream, read ahead in
// batches.
type rawSource struct {
	ref    *counterRef
	keys   httpx.SizeKeys
	buf    []store.Reading
	counts []uint64 // backing of the buffered readings' Counts
	sizes  []float64
	pos    int
	next   time.Time // where the next batch starts
	done   bool      // the store has nothing more in range
}

// fill reads the counter's next batch; the readings are copied because
// StreamReadings lends them only for the call.
func (src *rawSource) fill(st ReadingStore, to time.Time) error {
	src.buf, src.counts, src.pos = src.buf[:0], src.counts[:0], 0
	err := st.StreamReadings(src.ref.id, src.next, to, func(rd *store.Reading) error {
		if len(src.buf) == rawBatch {
			return errBatchFull
		}
		if !slices.Equal(src.sizes, rd.Sizes) {
			src.sizes = slices.Clone(rd.Sizes)
		}
		cp := *rd
		cp.Sizes = src.sizes
		cp.Counts = nil
		src.buf = append(src.buf, cp)
		src.counts = append(src.counts, rd.Counts...)
		return nil
	})
	full := errors.Is(err, errBatchFull)
	if err != nil && !full {
		return err
	}
	off := 0
	for i := range src.buf {
		n := len(src.buf[i].Sizes)
		src.buf[i].Counts = src.counts[off : off+n : off+n]
		off += n
	}
	src.done = !full
	if n := len(src.buf); n > 0 {
		src.next = src.buf[n-1].Time.Add(time.Nanosecond)
	}
	return nil
}

// head is the source's next reading, reading ahead when its buffer is
// spent; nil when the counter has no more.
func (src *rawSource) head(st ReadingStore, to time.Time) (*store.Reading, error) {
	if src.pos == len(src.buf) {
		if src.done {
			return nil, nil
		}
		if err := src.fill(st, to); err != nil {
			return nil, err
		}
		if len(src.buf) == 0 {
			return nil, nil
		}
	}
	return &src.buf[src.pos], nil
}

// rawRow renders one reading of a raw stream.
type rawRow func(b []byte, rd *store.Reading, c *counterRef, keys [][]byte) []byte

// streamRaw writes the zone's readings in [from, to) in time order, ties
// by counter, merging the counters' batches.
func (s *Server) streamRaw(r *http.Request, rs rowSink, counters []counterRef, from, to time.Time, row rawRow) error {
	srcs := make([]rawSource, len(counters))
	for i := range counters {
		srcs[i] = rawSource{ref: &counters[i], next: from}
	}
	for n := 0; ; n++ {
		var best *rawSource
		var bestRd *store.Reading
		for i := range srcs {
			rd, err := srcs[i].head(s.store, to)
			if err != nil {
				return err
			}
			if rd != nil && (bestRd == nil || rd.Time.Before(bestRd.Time) ||
				(rd.Time.Equal(bestRd.Time) && rd.Counter < bestRd.Counter)) {
				best, bestRd = &srcs[i], rd
			}
		}
		if best == nil {
			return nil
		}
		k := best.keys.Get(bestRd.Sizes)
		if err := rs.Row(func(b []byte) []byte { return row(b, bestRd, best.ref, k) }); err != nil {
			return err
		}
		best.pos++
		if n%rawBatch == 0 && r.Context().Err() != nil {
			return errStreamCancelled
		}
	}
}

// firstRollup is the start of the first rollup of any of counters in
// [from, to) at source step, so a walk can jump over an empty stretch.
func (s *Server) firstRollup(counters []counterRef, source time.Duration, from, to time.Time) (time.Time, bool, error) {
	var first time.Time
	found := false
	for i := range counters {
		err := s.store.ScanRollups(counters[i].id, source, from, to, func(ru store.Rollup) error {
			if !found || ru.Start.Before(first) {
				first, found = ru.Start, true
			}
			return errBatchFull
		})
		if err != nil && !errors.Is(err, errBatchFull) {
			return first, false, err
		}
	}
	return first, found, nil
}
