package store

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"time"

	bolt "go.etcd.io/bbolt"
)

// sweepChunk bounds the deletions of one Sweep transaction, so that a
// year of expiry neither holds the writer lock for long nor builds a huge
// transaction; appends run between chunks.
const sweepChunk = 20000

// minSweepChunk is the smallest chunk Sweep falls back to on a full file.
const minSweepChunk = 64

// SweepResult reports what a Sweep deleted.
type SweepResult struct {
	Before                      time.Time
	Readings, Pressure, Rollups int
	// Environment counts the environment samples deleted.
	Environment int
	// Alarms counts the snapshots of cleared alarms removed.
	Alarms int
}

// Sweep deletes the readings and pressure samples with Time strictly
// before before, the rollups whose whole bucket lies before it
// (Start+Step ≤ before), and the snapshots of cleared alarms whose last
// transition is before it; a bucket that straddles before is kept, and
// Verify stops comparing it with its readings. Kept whatever their age,
// as the audit record: operating-state history, the alarm journal, the
// snapshots of alarms not cleared, and the outbox (undelivered
// notifications). Sweep commits in chunks, each with an AuditSweep entry
// naming the horizon and what the chunk deleted; when ctx ends it returns
// what went so far with ctx's error.
func (s *Store) Sweep(ctx context.Context, before time.Time) (SweepResult, error) {
	if err := s.enter(); err != nil {
		return SweepResult{}, err
	}
	defer s.exit()
	if before.IsZero() {
		return SweepResult{}, fmt.Errorf("%w: sweep before a zero time", ErrInvalid)
	}
	res := SweepResult{Before: before.UTC()}
	if !before.After(minTime) {
		return res, nil
	}
	limit := int64(math.MaxInt64)
	if before.Before(maxTime) {
		limit = before.UnixNano()
	}
	size, first := sweepChunk, true
	for {
		if err := ctx.Err(); err != nil {
			return res, err
		}
		var readings, pressure, rollups, alarms, env int
		budget := size
		err := s.update(func(tx *bolt.Tx) error {
			readings, pressure, rollups, alarms, env, budget = 0, 0, 0, 0, 0, size
			if first {
				meta := tx.Bucket(bucketMeta)
				if old, ok := keyNanos(meta.Get(metaSweptBefore)); !ok || old < limit {
					if err := meta.Put(metaSweptBefore, nanosKey(limit)); err != nil {
						return err
					}
				}
			}
			var err error
			if readings, err = sweepKind(tx.Bucket(bucketReadings), limit, &budget); err != nil {
				return err
			}
			logged, err := sweepLog(tx, s.head, limit, &budget)
			if err != nil {
				return err
			}
			readings += logged
			chunked, err := sweepChunks(tx.Bucket(bucketChunks), limit, &budget)
			if err != nil {
				return err
			}
			readings += chunked
			if pressure, err = sweepKind(tx.Bucket(bucketPressure), limit, &budget); err != nil {
				return err
			}
			pchunked, err := sweepPChunks(tx.Bucket(bucketPChunks), limit, &budget)
			if err != nil {
				return err
			}
			pressure += pchunked
			if env, err = sweepKind(tx.Bucket(bucketEnvironment), limit, &budget); err != nil {
				return err
			}
			echunked, err := sweepEChunks(tx.Bucket(bucketEChunks), limit, &budget)
			if err != nil {
				return err
			}
			env += echunked
			for _, st := range rollupSteps {
				lim := limit - int64(st.step) + 1 // Start+Step ≤ before
				if lim <= 0 {
					continue
				}
				n, err := sweepKind(tx.Bucket(st.bucket), lim, &budget)
				if err != nil {
					return err
				}
				rollups += n
			}
			if alarms, err = s.sweepAlarms(tx, limit, &budget); err != nil {
				return err
			}
			return auditSweep(tx, limit, readings, pressure, rollups, alarms, env)
		})
		if errors.Is(err, ErrDiskFull) && size > minSweepChunk {
			// A full file has no room for the pages a large chunk
			// rewrites; smaller chunks free space step by step.
			size /= 4
			continue
		}
		if err != nil {
			return res, err
		}
		first = false
		res.Readings += readings
		res.Pressure += pressure
		res.Rollups += rollups
		res.Alarms += alarms
		res.Environment += env
		if budget > 0 {
			return res, nil
		}
	}
}

// sweepKind deletes keys below limit from every series of root, at most
// *budget of them, and drops series left empty.
func sweepKind(root *bolt.Bucket, limit int64, budget *int) (int, error) {
	var names [][]byte
	if err := root.ForEachBucket(func(name []byte) error {
		names = append(names, append([]byte(nil), name...))
		return nil
	}); err != nil {
		return 0, err
	}
	deleted := 0
	for _, name := range names {
		if *budget <= 0 {
			break
		}
		b := root.Bucket(name)
		var keys [][]byte
		c := b.Cursor()
		for k, _ := c.First(); k != nil && len(keys) < *budget; k, _ = c.Next() {
			ns, ok := keyNanos(k)
			if !ok || ns >= limit {
				break
			}
			keys = append(keys, append([]byte(nil), k...))
		}
		for _, k := range keys {
			if err := b.Delete(k); err != nil {
				return deleted, err
			}
		}
		deleted += len(keys)
		*budget -= len(keys)
		if k, _ := b.Cursor().First(); k == nil {
			if err := root.DeleteBucket(name); err != nil {
				return deleted, err
			}
		}
	}
	return deleted, nil
}

// sweepAlarms deletes the snapshots of cleared alarms last updated before
// limit, at most *budget of them, walking the updated-time index from its
// oldest entry. Open alarms are passed over; a snapshot that cannot be
// read is left for Verify to report.
func (s *Store) sweepAlarms(tx *bolt.Tx, limit int64, budget *int) (int, error) {
	alarms, idx := tx.Bucket(bucketAlarms), tx.Bucket(bucketAlarmsAt)
	var gone [][]byte // index keys
	c := idx.Cursor()
	for k, _ := c.First(); k != nil && len(gone) < *budget; k, _ = c.Next() {
		ns, id, ok := splitPairKey(k)
		if !ok || ns >= limit {
			break
		}
		raw := alarms.Get(id)
		if raw == nil {
			continue
		}
		a, err := decodeSnapshot(id, raw)
		if err != nil {
			s.log.Error("store: sweep passes over a damaged alarm snapshot", "alarm", string(id), "error", err.Error())
			continue
		}
		if a.cleared && a.ns == ns {
			gone = append(gone, bytes.Clone(k))
		}
	}
	for _, k := range gone {
		if err := alarms.Delete(k[8:]); err != nil {
			return 0, err
		}
		if err := idx.Delete(k); err != nil {
			return 0, err
		}
	}
	*budget -= len(gone)
	return len(gone), nil
}

// auditSweep chains the entry of one Sweep chunk. Detail:
//
//	8-byte horizon (Unix ns) | uvarint readings, pressure, rollups, alarms, environment samples
func auditSweep(tx *bolt.Tx, limit int64, readings, pressure, rollups, alarms, env int) error {
	d := binary.BigEndian.AppendUint64(nil, uint64(limit))
	for _, n := range []int{readings, pressure, rollups, alarms, env} {
		d = binary.AppendUvarint(d, uint64(n))
	}
	_, _, err := appendAudit(tx, &AuditEntry{
		Time: time.Now().UTC(), Actor: AuditActorSystem, Action: AuditSweep,
		Subject: "before " + nsTime(limit).Format(time.RFC3339Nano),
		Reason: fmt.Sprintf("retention: %d readings, %d pressure samples, %d rollups, %d cleared alarms deleted%s",
			readings, pressure, rollups, alarms, envNote(env)),
		Detail: d,
	})
	return err
}

// envNote adds environment samples to a sweep's reason when there were
// any, so that the wording of older entries stays as it was.
func envNote(n int) string {
	if n == 0 {
		return ""
	}
	return fmt.Sprintf(", %d environment samples deleted", n)
}
