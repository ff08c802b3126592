package store

import (
	"bytes"
	"context"
	"fmt"
	"math/bits"
	"time"

	bolt "go.etcd.io/bbolt"

	"cleanmon/classify"
)

// maxSizeUM bounds a channel threshold; no particle-counter channel is
// near a millimetre (common practice, no source), so larger is garbage.
const maxSizeUM = 1000

// Reading is one particle-counter sample as received, plus what is derived
// from it. Counter and Time identify it: a second reading with the same
// pair is a duplicate.
type Reading struct {
	Counter       string
	Time          time.Time // kept at nanosecond resolution, returned in UTC
	VolumeL       float64   // sampled air volume in litres, > 0
	FlowLPM       float64   // 0 = not reported
	SampleSeconds float64   // 0 = not reported
	Status        string    // "ok", "warning", "fault"; "" = not reported
	Differential  bool      // Counts are per channel as received (else cumulative)
	Sizes         []float64 // channel thresholds in µm, strictly ascending
	Counts        []uint64  // as received, aligned with Sizes
}

// Cumulative returns the count at or above each size: Counts as they are
// when cumulative, summed from the largest channel down when differential.
func (r Reading) Cumulative() []uint64 {
	if r.Differential {
		return classify.CumulativeFromDifferential(r.Counts)
	}
	return append([]uint64(nil), r.Counts...)
}

// PerM3 returns the cumulative concentration at each size in particles/m³.
func (r Reading) PerM3() []float64 {
	cum := r.Cumulative()
	out := make([]float64, len(cum))
	for i, c := range cum {
		out[i] = classify.PerCubicMetre(c, r.VolumeL)
	}
	return out
}

// checkReading returns the first bad field of r and why, or "", "".
func checkReading(r *Reading) (field, reason string) {
	if why := checkName(r.Counter); why != "" {
		return "Counter", why
	}
	if why := checkTime(r.Time); why != "" {
		return "Time", why
	}
	if !finite(r.VolumeL) || r.VolumeL <= 0 {
		return "VolumeL", fmt.Sprintf("%v litres; the sampled volume must be positive", r.VolumeL)
	}
	if !finite(r.FlowLPM) || r.FlowLPM < 0 {
		return "FlowLPM", fmt.Sprintf("%v L/min; must be positive, or 0 when not reported", r.FlowLPM)
	}
	if !finite(r.SampleSeconds) || r.SampleSeconds < 0 {
		return "SampleSeconds", fmt.Sprintf("%v s; must be positive, or 0 when not reported", r.SampleSeconds)
	}
	if _, ok := statusCode(r.Status); !ok {
		return "Status", fmt.Sprintf("%q is not one of ok, warning, fault", r.Status)
	}
	if len(r.Sizes) == 0 {
		return "Sizes", "no channels"
	}
	if len(r.Sizes) > maxChannels {
		return "Sizes", fmt.Sprintf("%d channels, more than %d", len(r.Sizes), maxChannels)
	}
	for i, sz := range r.Sizes {
		if !finite(sz) || sz <= 0 || sz > maxSizeUM {
			return fmt.Sprintf("Sizes[%d]", i), fmt.Sprintf("%v µm is not a channel size (0 < size ≤ %d µm)", sz, maxSizeUM)
		}
		if i > 0 && sz <= r.Sizes[i-1] {
			return fmt.Sprintf("Sizes[%d]", i), fmt.Sprintf("%v µm does not follow %v µm in ascending order", sz, r.Sizes[i-1])
		}
	}
	if len(r.Counts) != len(r.Sizes) {
		return "Counts", fmt.Sprintf("%d counts for %d sizes", len(r.Counts), len(r.Sizes))
	}
	if r.Differential {
		var sum uint64
		for i, c := range r.Counts {
			var carry uint64
			if sum, carry = bits.Add64(sum, c, 0); carry != 0 {
				return fmt.Sprintf("Counts[%d]", i), "channel counts overflow when summed"
			}
		}
	}
	return "", ""
}

// preparedReading is a checked reading ready for any number of
// transaction attempts.
type preparedReading struct {
	counter string
	ns      int64
	key     []byte
	val     []byte
	sizes   []float64
	perM3   []float64
}

func prepareReadings(rs []Reading) ([]preparedReading, error) {
	out := make([]preparedReading, len(rs))
	for i := range rs {
		r := &rs[i]
		if field, reason := checkReading(r); field != "" {
			return nil, &RecordError{Kind: "reading", Index: i, Field: field, Reason: reason}
		}
		key := timeKey(r.Time)
		per := r.PerM3()
		for j, v := range per {
			if !finite(v) {
				return nil, &RecordError{Kind: "reading", Index: i, Field: fmt.Sprintf("Counts[%d]", j), Reason: "concentration is not finite"}
			}
		}
		out[i] = preparedReading{
			counter: r.Counter,
			ns:      r.Time.UnixNano(),
			key:     key,
			val:     encodeReading(key, r),
			sizes:   append([]float64(nil), r.Sizes...),
			perM3:   per,
		}
	}
	return out, nil
}

// AppendReadings stores rs in one durable transaction, as one record of
// the head log, with an AuditReadings entry covering the readings it
// stored (compaction later moves them into chunks and hourly rollups). A reading whose counter and time are
// already stored, or repeated within rs, is counted in duplicates and not
// stored again; its content is not compared. Any invalid reading fails
// the call with a *RecordError and nothing is stored.
func (s *Store) AppendReadings(ctx context.Context, rs []Reading) (accepted, duplicates int, err error) {
	acc, dup, _, err := s.appendReadings(ctx, rs, false)
	return acc, dup, err
}

// Outcome is what AppendReadingsMarked did with one reading.
type Outcome uint8

// Outcomes of a reading: stored by this call; a duplicate of a stored one
// (same counter, time and content); or a conflict: same counter and time
// as a stored reading but different content. A conflict is not stored
// either (the first reading stays, readings are never overwritten), but it
// says something an auditor should hear of: an instrument or gateway
// re-sent a sample with other values, or two samples carry one time.
const (
	Stored Outcome = iota + 1
	Duplicate
	Conflict
)

// AppendReadingsMarked is AppendReadings that also says what happened to
// each reading. Callers that act on new readings only (alarm rules,
// per-counter metrics) need that per reading, not as a count.
func (s *Store) AppendReadingsMarked(ctx context.Context, rs []Reading) (outcomes []Outcome, err error) {
	_, _, outcomes, err = s.appendReadings(ctx, rs, true)
	return outcomes, err
}

func (s *Store) appendReadings(ctx context.Context, rs []Reading, mark bool) (accepted, duplicates int, stored []Outcome, err error) {
	if err := s.enter(); err != nil {
		return 0, 0, nil, err
	}
	defer s.exit()
	if len(rs) == 0 {
		return 0, 0, nil, ctx.Err()
	}
	prep, err := prepareReadings(rs)
	if err != nil {
		return 0, 0, nil, err
	}
	var acc, dup int
	if mark {
		stored = make([]Outcome, len(rs))
	}
	err = s.submit(ctx, len(prep), func(tx *bolt.Tx) error {
		acc, dup = 0, 0
		clear(stored) // the group may run the call again after another member failed
		return s.putReadings(tx, prep, &acc, &dup, stored)
	})
	if err != nil {
		return 0, 0, nil, err
	}
	s.noteAppended(acc)
	return acc, dup, stored, nil
}

func (s *Store) putReadings(tx *bolt.Tx, prep []preparedReading, acc, dup *int, stored []Outcome) error {
	h := s.head
	h.begin(tx)
	legacy := tx.Bucket(bucketReadings)
	cov := newCoverage(coverReadings)
	chunked := map[string]int64{} // newest chunked time per counter
	legacyOf := map[string]*bolt.Bucket{}
	batch := map[string][]headVal{}
	for i := range prep {
		p := &prep[i]
		old := h.lookup(p.counter, p.ns)
		if old == nil {
			b, seen := legacyOf[p.counter]
			if !seen {
				b = legacy.Bucket([]byte(p.counter)) // nil once compaction emptied it, as it nearly always is
				legacyOf[p.counter] = b
			}
			if b != nil {
				old = b.Get(p.key)
			}
		}
		if old == nil {
			last, ok := chunked[p.counter]
			if !ok {
				last = lastChunkNanos(tx, p.counter)
				chunked[p.counter] = last
			}
			if p.ns <= last {
				var err error
				if old, err = storedValue(tx, p.counter, p.key); err != nil {
					return err
				}
			}
		}
		if old != nil {
			*dup++
			if stored != nil {
				// The encoding is deterministic: equal content, equal bytes.
				stored[i] = Duplicate
				if !bytes.Equal(old, p.val) {
					stored[i] = Conflict
				}
			}
			continue
		}
		h.put(p.counter, p.ns, p.val)
		batch[p.counter] = append(batch[p.counter], headVal{ns: p.ns, val: p.val})
		*acc++
		if stored != nil {
			stored[i] = Stored
		}
		cov.add(p.counter, p.key, p.val)
	}
	if len(batch) > 0 {
		log := tx.Bucket(bucketHeadLog)
		seq, err := log.NextSequence()
		if err != nil {
			return fmt.Errorf("store: head record: %w", err)
		}
		key := seqKey(seq)
		if err := log.Put(key, encodeHeadRec(key, batch)); err != nil {
			return fmt.Errorf("store: put head record: %w", err)
		}
	}
	return auditBatch(tx, cov, AuditReadings, "readings")
}

// ScanReadings calls fn with each reading of counter in [from, to), oldest
// first, inside one read transaction; a zero from or to is unbounded. An
// error from fn stops the scan and is returned. fn must not write to the
// store (a write may wait on this transaction) nor Close it (Close waits
// for the scan).
func (s *Store) ScanReadings(counter string, from, to time.Time, fn func(Reading) error) error {
	return s.scanReadings(counter, from, to, func(it *readingIter, cr *chunkReading) error {
		r, err := it.reading(cr)
		if err != nil {
			return err
		}
		return fn(r)
	})
}

// StreamReadings is ScanReadings for encoders that write each reading out
// at once (the API's JSON and CSV rows): fn gets a pointer to a reading
// that is valid only until it returns, and whose Sizes slice is shared
// with the other readings of the scan that have the same channels, so it
// must not be modified or kept; copy what is kept. It saves the copies
// ScanReadings makes for each reading, which is most of its cost on a
// year of one location.
func (s *Store) StreamReadings(counter string, from, to time.Time, fn func(*Reading) error) error {
	return s.scanReadings(counter, from, to, func(it *readingIter, cr *chunkReading) error {
		r, err := it.shared(cr)
		if err != nil {
			return err
		}
		return fn(&r)
	})
}

// scanReadings walks counter's readings in [from, to) in one read
// transaction, head and chunks merged; fn runs under the guard, so its
// own panics keep their stack.
func (s *Store) scanReadings(counter string, from, to time.Time, fn func(*readingIter, *chunkReading) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	loN, hiN, ok, err := seriesRange(counter, from, to)
	if err != nil || !ok {
		return err
	}
	return s.view(func(tx *bolt.Tx, g *guard) error {
		it := newReadingIter(tx, viewHead(tx, s.head), counter, loN, hiN)
		for {
			cr, ok := it.next()
			if !ok {
				return it.err
			}
			if err := g.call(func() error { return fn(it, &cr) }); err != nil {
				return err
			}
		}
	})
}

// LatestReading returns the newest reading of counter; false if it has none.
func (s *Store) LatestReading(counter string) (Reading, bool, error) {
	if err := s.enter(); err != nil {
		return Reading{}, false, err
	}
	defer s.exit()
	if reason := checkName(counter); reason != "" {
		return Reading{}, false, fmt.Errorf("%w: name %q: %s", ErrInvalid, counter, reason)
	}
	var out Reading
	found := false
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		var headNs int64 = -1
		if b := tx.Bucket(bucketReadings).Bucket([]byte(counter)); b != nil {
			if k, v := b.Cursor().Last(); k != nil {
				r, err := decodeReading(counter, k, v)
				if err != nil {
					return err
				}
				out, found, headNs = r, true, r.Time.UnixNano()
			}
		}
		for _, rec := range viewHead(tx, s.head).recs {
			vs := rec.by[counter]
			if len(vs) == 0 || vs[len(vs)-1].ns <= headNs {
				continue
			}
			last := vs[len(vs)-1]
			r, err := decodeReading(counter, nanosKey(last.ns), last.val)
			if err != nil {
				return err
			}
			out, found, headNs = r, true, last.ns
		}
		last := lastChunkNanos(tx, counter)
		if last <= headNs {
			return nil
		}
		v, err := storedValue(tx, counter, nanosKey(last))
		if err != nil || v == nil {
			return err
		}
		r, err := decodeReading(counter, nanosKey(last), v)
		if err != nil {
			return err
		}
		out, found = r, true
		return nil
	})
	if err != nil {
		return Reading{}, false, err
	}
	return out, found, nil
}
