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
	return appendSamples(ctx, s, pressureSamples, ps)
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
