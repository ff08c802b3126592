package store

import (
	"log/slog"
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
	quiet := slog.New(slog.DiscardHandler) // damaged readings are reported by walk
	_ = rollups.ForEachBucket(func(name []byte) error {
		c := rollups.Bucket(name).Cursor()
		for k, val := c.First(); k != nil; k, val = c.Next() {
			start, ok := keyNanos(k)
			if !ok || start < v.sweptBefore {
				continue
			}
			got, err := decodeRollup(string(name), step, k, val)
			if err != nil {
				continue // reported by walk
			}
			want := rebuildRollup(quiet, tx, string(name), start, step)
			if want.samples != got.samples {
				continue // reported by rollupCounts
			}
			if why := rollupDiffers(got, want); why != "" {
				v.add("%s rollup of counter %q at %s does not match its readings: %s", step, name, keyString(k), why)
			}
		}
		return nil
	})
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
