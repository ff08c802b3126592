package store

import (
	"bytes"
	"fmt"
	"log/slog"
	"math"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Rollup summarises the readings of one counter whose time falls in
// [Start, Start+Step): how many, and the mean and maximum of the
// cumulative concentration (particles/m³) at each size.
type Rollup struct {
	Start time.Time
	Step  time.Duration // the step asked for
	// End is the exclusive end of what the row covers: Start+Step, or
	// the end of the range when the range cuts the bucket.
	End     time.Time
	Samples int
	Sizes   []float64 // every size seen in the bucket, ascending
	Mean    []float64 // aligned with Sizes
	Max     []float64 // aligned with Sizes
	// SizeSamples counts the readings that had each size: equal to
	// Samples unless the counter's channels changed within the bucket.
	SizeSamples []int
}

// rollupAcc is the stored form: sums rather than means, so that an append
// updates a bucket without reading its readings again.
type rollupAcc struct {
	start   int64
	samples uint64
	sizes   []float64
	n       []uint64
	sum     []float64
	max     []float64
}

func (a *rollupAcc) index(i int, size float64) int {
	if i < len(a.sizes) && a.sizes[i] == size {
		return i // the usual case: same channels as the last reading
	}
	j := 0
	for j < len(a.sizes) && a.sizes[j] < size {
		j++
	}
	if j < len(a.sizes) && a.sizes[j] == size {
		return j
	}
	a.sizes = append(a.sizes[:j], append([]float64{size}, a.sizes[j:]...)...)
	a.n = append(a.n[:j], append([]uint64{0}, a.n[j:]...)...)
	a.sum = append(a.sum[:j], append([]float64{0}, a.sum[j:]...)...)
	a.max = append(a.max[:j], append([]float64{0}, a.max[j:]...)...)
	return j
}

func (a *rollupAcc) add(sizes, perM3 []float64) {
	a.samples++
	for i, size := range sizes {
		j := a.index(i, size)
		v := perM3[i]
		a.n[j]++
		a.sum[j] += v
		if a.n[j] == 1 || v > a.max[j] {
			a.max[j] = v
		}
	}
}

// check returns why a decoded accumulator cannot be right, or "".
func (a *rollupAcc) check() string {
	if a.samples == 0 {
		return "Samples: zero"
	}
	if len(a.sizes) == 0 {
		return "Sizes: none"
	}
	for i, size := range a.sizes {
		switch {
		case !finite(size) || size <= 0 || size > maxSizeUM:
			return fmt.Sprintf("Sizes[%d]: %v µm is not a channel size", i, size)
		case i > 0 && size <= a.sizes[i-1]:
			return fmt.Sprintf("Sizes[%d]: not ascending", i)
		case a.n[i] == 0 || a.n[i] > a.samples:
			return fmt.Sprintf("SizeSamples[%d]: %d of %d samples", i, a.n[i], a.samples)
		case !finite(a.sum[i]) || a.sum[i] < 0 || !finite(a.max[i]) || a.max[i] < 0:
			return fmt.Sprintf("size %v µm: sum %v, max %v are not concentrations", size, a.sum[i], a.max[i])
		case a.sum[i]/float64(a.n[i]) > a.max[i]*(1+1e-9):
			return fmt.Sprintf("size %v µm: mean %v above max %v", size, a.sum[i]/float64(a.n[i]), a.max[i])
		}
	}
	return ""
}

func (a *rollupAcc) rollup(step time.Duration) Rollup {
	r := Rollup{
		Start:       time.Unix(0, a.start).UTC(),
		Step:        step,
		End:         time.Unix(0, a.start).UTC().Add(step),
		Samples:     int(a.samples),
		Sizes:       append([]float64(nil), a.sizes...),
		Mean:        make([]float64, len(a.sizes)),
		Max:         append([]float64(nil), a.max...),
		SizeSamples: make([]int, len(a.sizes)),
	}
	for i := range a.sizes {
		r.Mean[i] = a.sum[i] / float64(a.n[i])
		r.SizeSamples[i] = int(a.n[i])
	}
	return r
}

// rollupSet gathers the rollups one transaction attempt touches, so a
// bucket hit by sixty readings is decoded and written once.
type rollupSet struct {
	log     *slog.Logger
	tx      *bolt.Tx
	buckets []*seriesBuckets // aligned with rollupSteps
	m       map[rollupKey]*rollupEntry
	order   []*rollupEntry
}

type rollupKey struct {
	counter string
	step    int
	start   int64
}

type rollupEntry struct {
	b       *bolt.Bucket
	key     []byte
	acc     *rollupAcc
	rebuilt bool
}

func newRollupSet(tx *bolt.Tx, log *slog.Logger) *rollupSet {
	rs := &rollupSet{log: log, tx: tx, m: map[rollupKey]*rollupEntry{}}
	for _, st := range rollupSteps {
		rs.buckets = append(rs.buckets, newSeriesBuckets(tx, st.bucket))
	}
	return rs
}

// add counts p, already in its chunk, into its hourly bucket.
func (rs *rollupSet) add(p *preparedReading) error {
	for si, st := range rollupSteps {
		start := p.ns - p.ns%int64(st.step)
		k := rollupKey{p.counter, si, start}
		if e := rs.m[k]; e != nil {
			if !e.rebuilt {
				e.acc.add(p.sizes, p.perM3)
			}
			continue
		}
		b, err := rs.buckets[si].get(p.counter)
		if err != nil {
			return err
		}
		e := &rollupEntry{b: b, key: nanosKey(start), acc: &rollupAcc{start: start}}
		rs.m[k] = e
		rs.order = append(rs.order, e)
		v := b.Get(e.key)
		if v == nil {
			e.acc.add(p.sizes, p.perM3)
			continue
		}
		acc, err := decodeRollup(p.counter, st.step, e.key, v)
		if err == nil {
			e.acc = acc
			e.acc.add(p.sizes, p.perM3)
			continue
		}
		// A damaged rollup must not stop compaction: rebuild it from the
		// chunks, which already include p and the rest of this pass.
		rs.log.Warn("store: rebuilding damaged rollup from raw readings", "counter", p.counter, "step", st.step, "start", time.Unix(0, start).UTC(), "error", err)
		e.acc = rebuildRollup(rs.log, rs.tx, p.counter, start, st.step)
		e.rebuilt = true // from chunks that already hold every reading this pass adds
	}
	return nil
}

func (rs *rollupSet) flush() error {
	for _, e := range rs.order {
		if err := e.b.Put(e.key, encodeRollup(e.key, e.acc)); err != nil {
			return fmt.Errorf("store: put rollup: %w", err)
		}
	}
	return nil
}

// rebuildRollup recomputes one bucket from the readings of counter.
// Readings that do not decode are left out (Verify reports them).
func rebuildRollup(log *slog.Logger, tx *bolt.Tx, counter string, start int64, step time.Duration) *rollupAcc {
	acc := &rollupAcc{start: start}
	it := newReadingIter(tx, nil, counter, start, start+int64(step)) // chunks (and legacy head): what rollups count
	for {
		cr, ok := it.next()
		if !ok {
			break
		}
		r, err := it.reading(&cr)
		if err != nil {
			log.Warn("store: damaged reading left out of rebuilt rollup", "error", err)
			continue
		}
		acc.add(r.Sizes, r.PerM3())
	}
	if it.err != nil {
		log.Warn("store: damaged readings left out of rebuilt rollup", "error", it.err)
	}
	return acc
}

// ScanRollups calls fn with the rollups of counter at step over [from,
// to), oldest first, inside one read transaction; a zero from or to is
// unbounded. step is a whole number of minutes that divides an hour (1m,
// 5m, 15m, 30m: computed from the readings) or a whole number of hours
// that divides a day (1h: kept; 2h … 24h: added up from the hours), so
// that buckets align on the hour and on UTC midnight.
//
// Every row lies inside [from, to): a bucket cut by from or to covers
// only its part inside the range, and then Start is from (not the bucket
// start) and End is to. A bucket with no readings in the range gives no
// row. Rows computed from readings and rows kept are the same figures;
// only their cost differs. The range walk seeks, so empty years cost
// nothing; see CheckRange for the bound the API puts on a query.
func (s *Store) ScanRollups(counter string, step time.Duration, from, to time.Time, fn func(Rollup) error) error {
	if err := checkStep(step); err != nil {
		return err
	}
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	loN, hiN, ok, err := seriesRange(counter, from, to)
	if err != nil || !ok {
		return err
	}
	return s.view(func(tx *bolt.Tx, g *guard) error {
		emit := func(r Rollup) error { return g.call(func() error { return fn(r) }) }
		hv := viewHead(tx, s.head)
		if step < time.Hour {
			return rawRollups(tx, hv, counter, step, loN, hiN, emit)
		}
		h := int64(time.Hour)
		first := ceilTo(loN, h)
		last := hiN - hiN%h
		if first >= last {
			return rawRollups(tx, hv, counter, step, loN, hiN, emit)
		}
		// The partial hours at either edge come from the readings; the
		// whole hours between from the kept rollups plus the head log's
		// readings (not rolled up before compaction). A bucket that spans
		// an edge gathers both before it is sent; hours go straight out.
		if step == time.Hour {
			if err := rawRollups(tx, hv, counter, step, loN, first, emit); err != nil {
				return err
			}
			if err := keptRollups(tx, hv, counter, first, last, emit); err != nil {
				return err
			}
			return rawRollups(tx, hv, counter, step, last, hiN, emit)
		}
		agg := &rollupRows{step: step, lo: loN, hi: hiN, emit: emit}
		if err := rawRollups(tx, hv, counter, time.Hour, loN, first, agg.add); err != nil {
			return err
		}
		if err := keptRollups(tx, hv, counter, first, last, agg.add); err != nil {
			return err
		}
		if err := rawRollups(tx, hv, counter, time.Hour, last, hiN, agg.add); err != nil {
			return err
		}
		return agg.flush()
	})
}

// checkStep refuses a step whose buckets would not align on hours and days.
func checkStep(step time.Duration) error {
	switch {
	case step >= time.Minute && step <= time.Hour && step%time.Minute == 0 && time.Hour%step == 0:
		return nil
	case step > time.Hour && step%time.Hour == 0 && (24*time.Hour)%step == 0:
		return nil
	}
	return fmt.Errorf("%w: rollup step %s: want whole minutes dividing an hour (1m, 5m, 15m, 30m) or whole hours dividing a day (1h, 2h, …, 24h)", ErrInvalid, step)
}

func ceilTo(ns, step int64) int64 {
	if r := ns % step; r != 0 {
		return ns - r + step
	}
	return ns
}

// rawRollups computes rollups at step from the readings in [lo, hi).
func rawRollups(tx *bolt.Tx, hv *headView, counter string, step time.Duration, lo, hi int64, emit func(Rollup) error) error {
	agg := &rollupRows{step: step, lo: lo, hi: hi, emit: emit}
	it := newReadingIter(tx, hv, counter, lo, hi)
	for {
		cr, ok := it.next()
		if !ok {
			if it.err != nil {
				return it.err
			}
			return agg.flush()
		}
		r, err := it.reading(&cr)
		if err != nil {
			return err
		}
		start := cr.ns - cr.ns%int64(step)
		if err := agg.turn(start); err != nil {
			return err
		}
		agg.cur.add(r.Sizes, r.PerM3())
	}
}

// keptRollups sends the hourly rollups with Start in [lo, hi): the kept
// ones with the head log's readings of their hour added, and the hours
// only the head log holds, in time order. The head's readings are looked
// at only for the hours its span covers, and decoded only when the walk
// reaches them: a caller that stops at the first row (to find where data
// begins) pays for nothing else.
func keptRollups(tx *bolt.Tx, hv *headView, counter string, lo, hi int64, emit func(Rollup) error) error {
	h := int64(time.Hour)
	hFirst, hLast, inHead := hv.logSpan(counter)
	pos := lo // the head's readings before pos have been sent
	// sendHead sends the head-only hours in [pos, before).
	sendHead := func(before int64) error {
		if inHead && pos <= hLast && before > hFirst {
			if vs := hv.logValues(counter, pos, before); len(vs) > 0 {
				if err := rollupHead(counter, vs, emit); err != nil {
					return err
				}
			}
		}
		pos = max(pos, before)
		return nil
	}
	if b := tx.Bucket(bucketRollup1h).Bucket([]byte(counter)); b != nil {
		end := nanosKey(hi)
		c := b.Cursor()
		for k, v := c.Seek(nanosKey(lo)); k != nil && bytes.Compare(k, end) < 0; k, v = c.Next() {
			acc, err := decodeRollup(counter, time.Hour, k, v)
			if err != nil {
				return err
			}
			if err := sendHead(acc.start); err != nil {
				return err
			}
			if inHead && acc.start <= hLast && acc.start+h > hFirst {
				for _, hvv := range hv.logValues(counter, acc.start, acc.start+h) {
					r, err := decodeReading(counter, nanosKey(hvv.ns), hvv.val)
					if err != nil {
						return err
					}
					acc.add(r.Sizes, r.PerM3())
				}
			}
			pos = acc.start + h
			if err := emit(acc.rollup(time.Hour)); err != nil {
				return err
			}
		}
	}
	return sendHead(hi)
}

// rollupHead sends the hourly rollups of head readings in time order.
func rollupHead(counter string, heads []headVal, emit func(Rollup) error) error {
	agg := &rollupRows{step: time.Hour, lo: math.MinInt64, hi: math.MaxInt64, emit: emit}
	for _, v := range heads {
		r, err := decodeReading(counter, nanosKey(v.ns), v.val)
		if err != nil {
			return err
		}
		if err := agg.turn(v.ns - v.ns%int64(time.Hour)); err != nil {
			return err
		}
		agg.cur.add(r.Sizes, r.PerM3())
	}
	return agg.flush()
}

// rollupRows gathers rollups of a finer step (or single readings) into
// rows at step, clipped to [lo, hi).
type rollupRows struct {
	step   time.Duration
	lo, hi int64
	emit   func(Rollup) error
	cur    *rollupAcc
}

// turn starts the bucket at start unless it is the current one.
func (a *rollupRows) turn(start int64) error {
	if a.cur != nil && a.cur.start == start {
		return nil
	}
	if err := a.flush(); err != nil {
		return err
	}
	a.cur = &rollupAcc{start: start}
	return nil
}

// add folds in a finer rollup.
func (a *rollupRows) add(r Rollup) error {
	ns := r.Start.UnixNano()
	if err := a.turn(ns - ns%int64(a.step)); err != nil {
		return err
	}
	c := a.cur
	c.samples += uint64(r.Samples)
	for i, size := range r.Sizes {
		j := c.index(i, size)
		n := uint64(r.SizeSamples[i])
		if c.n[j] == 0 || r.Max[i] > c.max[j] {
			c.max[j] = r.Max[i]
		}
		c.n[j] += n
		c.sum[j] += r.Mean[i] * float64(n)
	}
	return nil
}

func (a *rollupRows) flush() error {
	if a.cur == nil || a.cur.samples == 0 {
		return nil
	}
	r := a.cur.rollup(a.step)
	a.cur = nil
	start := r.Start.UnixNano()
	r.End = nsTime(min(start+int64(a.step), a.hi))
	if start < a.lo {
		r.Start = nsTime(a.lo)
	}
	return a.emit(r)
}
