package store

import (
	"bytes"
	"fmt"
	"log/slog"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Rollup summarises the readings of one counter whose time falls in
// [Start, Start+Step): how many, and the mean and maximum of the
// cumulative concentration (particles/m³) at each size.
type Rollup struct {
	Start   time.Time
	Step    time.Duration // time.Minute or time.Hour
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
	b   *bolt.Bucket
	key []byte
	acc *rollupAcc
}

func newRollupSet(tx *bolt.Tx, log *slog.Logger) *rollupSet {
	rs := &rollupSet{log: log, m: map[rollupKey]*rollupEntry{}}
	for _, st := range rollupSteps {
		rs.buckets = append(rs.buckets, newSeriesBuckets(tx, st.bucket))
	}
	return rs
}

// add counts p, already put in readings, into its minute and hour buckets.
func (rs *rollupSet) add(readings *bolt.Bucket, p *preparedReading) error {
	for si, st := range rollupSteps {
		start := p.ns - p.ns%int64(st.step)
		k := rollupKey{p.counter, si, start}
		if e := rs.m[k]; e != nil {
			e.acc.add(p.sizes, p.perM3)
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
		// A damaged rollup must not stop ingestion: rebuild it from the
		// raw readings, which already include p.
		rs.log.Warn("store: rebuilding damaged rollup from raw readings", "counter", p.counter, "step", st.step, "start", time.Unix(0, start).UTC(), "error", err)
		e.acc = rebuildRollup(rs.log, readings, p.counter, start, st.step)
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
func rebuildRollup(log *slog.Logger, readings *bolt.Bucket, counter string, start int64, step time.Duration) *rollupAcc {
	acc := &rollupAcc{start: start}
	hi := nanosKey(start + int64(step))
	c := readings.Cursor()
	for k, v := c.Seek(nanosKey(start)); k != nil && bytes.Compare(k, hi) < 0; k, v = c.Next() {
		r, err := decodeReading(counter, k, v)
		if err != nil {
			log.Warn("store: damaged reading left out of rebuilt rollup", "error", err)
			continue
		}
		acc.add(r.Sizes, r.PerM3())
	}
	return acc
}

// ScanRollups calls fn with each rollup of counter at step (time.Minute or
// time.Hour) whose Start lies in [from, to), oldest first, with the same
// rules as ScanReadings.
func (s *Store) ScanRollups(counter string, step time.Duration, from, to time.Time, fn func(Rollup) error) error {
	kind := rollupBucket(step)
	if kind == nil {
		return fmt.Errorf("%w: rollup step %s (kept: 1m, 1h)", ErrInvalid, step)
	}
	decode := func(name string, k, v []byte) (Rollup, error) {
		acc, err := decodeRollup(name, step, k, v)
		if err != nil {
			return Rollup{}, err
		}
		return acc.rollup(step), nil
	}
	return scanSeries(s, kind, counter, from, to, decode, fn)
}
