package store

import (
	"context"
	"fmt"
	"time"
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
	return countOutcomes(appendSamples(ctx, s, pressureSamples, ps))
}

// AppendPressureMarked is AppendPressure that says what became of each
// sample, as AppendReadingsMarked does for readings.
func (s *Store) AppendPressureMarked(ctx context.Context, ps []Pressure) ([]Outcome, error) {
	return appendSamples(ctx, s, pressureSamples, ps)
}

// ScanPressure calls fn with each sample of sensor in [from, to), oldest
// first, with the same rules as ScanReadings (head and chunks merged).
func (s *Store) ScanPressure(sensor string, from, to time.Time, fn func(Pressure) error) error {
	return scanSamples(s, pressureSamples, sensor, from, to, fn)
}

// LatestPressure returns the newest sample of sensor; false if it has none.
func (s *Store) LatestPressure(sensor string) (Pressure, bool, error) {
	return latestSample(s, pressureSamples, sensor)
}
