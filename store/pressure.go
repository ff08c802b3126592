package store

import (
	"bytes"
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
		chunked := map[string]int64{} // newest chunked time per sensor
		for i := range prep {
			b, err := series.get(prep[i].sensor)
			if err != nil {
				return err
			}
			old := b.Get(prep[i].key)
			if old == nil {
				last, ok := chunked[prep[i].sensor]
				if !ok {
					last = lastPChunkNanos(tx, prep[i].sensor)
					chunked[prep[i].sensor] = last
				}
				if ns, _ := keyNanos(prep[i].key); ns <= last {
					if old, err = pressureValue(tx, prep[i].sensor, prep[i].key); err != nil {
						return err
					}
				}
			}
			if old != nil {
				dup++
				if !bytes.Equal(old, prep[i].val) {
					// Not stored (the first stays), but an instrument or a
					// gateway re-sent a sample with another value, or two
					// samples carry one time: someone should look.
					s.log.Warn("store: pressure sample not stored: one of this sensor at this time is stored with another value",
						"sensor", prep[i].sensor, "time", keyString(prep[i].key))
				}
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
// first, with the same rules as ScanReadings (head and chunks merged).
func (s *Store) ScanPressure(sensor string, from, to time.Time, fn func(Pressure) error) error {
	if err := s.enter(); err != nil {
		return err
	}
	defer s.exit()
	if reason := checkName(sensor); reason != "" {
		return fmt.Errorf("%w: name %q: %s", ErrInvalid, sensor, reason)
	}
	lo, hi, ok, err := keyRange(from, to)
	if err != nil || !ok {
		return err
	}
	loN, _ := keyNanos(lo)
	hiN, _ := keyNanos(hi)
	return s.view(func(tx *bolt.Tx, g *guard) error {
		it := newPressureIter(tx, sensor, loN, hiN)
		for {
			p, ok := it.next()
			if !ok {
				return it.err
			}
			if err := g.call(func() error { return fn(p) }); err != nil {
				return err
			}
		}
	})
}

// LatestPressure returns the newest sample of sensor; false if it has none.
func (s *Store) LatestPressure(sensor string) (Pressure, bool, error) {
	if err := s.enter(); err != nil {
		return Pressure{}, false, err
	}
	defer s.exit()
	if reason := checkName(sensor); reason != "" {
		return Pressure{}, false, fmt.Errorf("%w: name %q: %s", ErrInvalid, sensor, reason)
	}
	var out Pressure
	found := false
	err := s.view(func(tx *bolt.Tx, _ *guard) error {
		var err error
		out, found, err = pressureSamples.latest(tx, sensor)
		return err
	})
	if err != nil {
		return Pressure{}, false, err
	}
	return out, found, nil
}
