package store

import (
	"context"
	"fmt"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Pressure is one differential-pressure sample in pascals; negative values
// (a flow reversal) are valid data.
type Pressure struct {
	Sensor string
	Time   time.Time
	Pa     float64
}

func checkPressure(p *Pressure) (field, reason string) {
	if why := checkName(p.Sensor); why != "" {
		return "Sensor", why
	}
	if why := checkTime(p.Time); why != "" {
		return "Time", why
	}
	if !finite(p.Pa) {
		return "Pa", fmt.Sprintf("%v is not a pressure", p.Pa)
	}
	return "", ""
}

// AppendPressure stores ps in one durable transaction, with the same rules
// as AppendReadings: all or nothing, a repeated sensor and time is a
// duplicate, and an AuditPressure entry covers what it stored.
func (s *Store) AppendPressure(ctx context.Context, ps []Pressure) (accepted, duplicates int, err error) {
	if err := s.enter(); err != nil {
		return 0, 0, err
	}
	defer s.exit()
	if len(ps) == 0 {
		return 0, 0, ctx.Err()
	}
	type prepared struct {
		sensor   string
		key, val []byte
	}
	prep := make([]prepared, len(ps))
	for i := range ps {
		p := &ps[i]
		if field, reason := checkPressure(p); field != "" {
			return 0, 0, &RecordError{Kind: "pressure", Index: i, Field: field, Reason: reason}
		}
		key := timeKey(p.Time)
		prep[i] = prepared{sensor: p.Sensor, key: key, val: encodePressure(key, p)}
	}
	var acc, dup int
	err = s.submit(ctx, len(prep), func(tx *bolt.Tx) error {
		acc, dup = 0, 0
		series := newSeriesBuckets(tx, bucketPressure)
		cov := newCoverage(coverPressure)
		for i := range prep {
			b, err := series.get(prep[i].sensor)
			if err != nil {
				return err
			}
			if b.Get(prep[i].key) != nil {
				dup++
				continue
			}
			if err := b.Put(prep[i].key, prep[i].val); err != nil {
				return fmt.Errorf("store: put pressure of %q: %w", prep[i].sensor, err)
			}
			acc++
			cov.add(prep[i].sensor, prep[i].key, prep[i].val)
		}
		return auditBatch(tx, cov, AuditPressure, "pressure samples")
	})
	if err != nil {
		return 0, 0, err
	}
	return acc, dup, nil
}

// ScanPressure calls fn with each sample of sensor in [from, to), oldest
// first, with the same rules as ScanReadings.
func (s *Store) ScanPressure(sensor string, from, to time.Time, fn func(Pressure) error) error {
	return scanSeries(s, bucketPressure, sensor, from, to, decodePressure, fn)
}

// LatestPressure returns the newest sample of sensor; false if it has none.
func (s *Store) LatestPressure(sensor string) (Pressure, bool, error) {
	return latestSeries(s, bucketPressure, sensor, decodePressure)
}
