package store

import (
	"math"
	"time"

	bolt "go.etcd.io/bbolt"

	"cleanmon/classify"
)

// rollupValues recomputes every rollup from the readings of its bucket
// and compares sizes, counts, means and maxima: a rollup is what the
// pages and the reports show for a long range, so one edited behind the
// store's back (its checksum recomputed) must show, not only one whose
// sample count is off (rollupCounts).
func (v *verifier) rollupValues(tx *bolt.Tx, kind []byte, step time.Duration) {
	rollups := tx.Bucket(kind)
	if tx.Bucket(bucketReadings) == nil || rollups == nil {
		return
	}
	_ = rollups.ForEachBucket(func(name []byte) error {
		v.rollupSeriesValues(tx, rollups.Bucket(name), string(name), step)
		return nil
	})
}

// rollupSeriesValues walks counter's rolled-up readings once (chunks and
// legacy head, from the sweep horizon) and compares each bucket they fill
// with its stored rollup. One walk, not one per rollup: a chunk holds
// some thirty hours, and decoding it for each would cost most of Verify.
// A reading that does not decode is left out, as when a rollup is rebuilt;
// the walk of the readings reports it.
func (v *verifier) rollupSeriesValues(tx *bolt.Tx, rb *bolt.Bucket, counter string, step time.Duration) {
	var cur *rollupAcc
	flush := func() {
		if cur == nil || cur.start < v.sweptBefore {
			return
		}
		k := nanosKey(cur.start)
		val := rb.Get(k)
		if val == nil {
			return // reported by rollupCounts
		}
		got, err := decodeRollup(counter, step, k, val)
		if err != nil || got.samples != cur.samples {
			return // reported by walk, or by rollupCounts
		}
		if why := rollupDiffers(got, cur); why != "" {
			v.add("%s rollup of counter %q at %s does not match its readings: %s", step, counter, keyString(k), why)
		}
	}
	it := newReadingIter(tx, nil, counter, max(v.sweptBefore-v.sweptBefore%int64(step), math.MinInt64), math.MaxInt64)
	for {
		cr, ok := it.next()
		if !ok {
			break
		}
		r, err := it.reading(&cr)
		if err != nil {
			continue
		}
		if start := cr.ns - cr.ns%int64(step); cur == nil || cur.start != start {
			flush()
			cur = &rollupAcc{start: start}
		}
		cur.add(r.Sizes, r.PerM3())
	}
	flush()
}

// rollupDiffers says how a stored rollup differs from the one its
// readings give ("" when it does not). Sums may differ in the last bits:
// readings added out of time order sum in another order.
func rollupDiffers(got, want *rollupAcc) string {
	if len(got.sizes) != len(want.sizes) {
		return "its sizes differ"
	}
	near := func(a, b float64) bool { return math.Abs(a-b) <= 1e-9*math.Max(math.Abs(a), math.Abs(b)) }
	for i := range got.sizes {
		switch {
		case got.sizes[i] != want.sizes[i]:
			return "its sizes differ"
		case got.n[i] != want.n[i]:
			return "its samples per size differ"
		case !near(got.sum[i], want.sum[i]):
			return "its mean at " + classify.FormatSize(got.sizes[i]) + " µm differs"
		case !near(got.max[i], want.max[i]):
			return "its maximum at " + classify.FormatSize(got.sizes[i]) + " µm differs"
		}
	}
	return ""
}
