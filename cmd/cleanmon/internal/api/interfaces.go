package api

import (
	"context"
	"io"
	"time"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/collector"
	"cleanmon/store"
)

// Zones is the judge as the API reads and changes it: zone reports (the
// particle state, attention, open alarms, DP sensors and counters of each
// zone), the operating state in time, and every DP sensor.
type Zones interface {
	Zones() []alerts.ZoneReport
	Zone(id string) (alerts.ZoneReport, bool)
	// SetOperatingState calls persist and, only when it succeeds, applies
	// the change; the alarm rules follow it.
	SetOperatingState(ctx context.Context, ch alerts.OperatingChange, persist func(alerts.OperatingChange) error) (alerts.ZoneReport, error)
	// OperatingAt is the operating state, and whose limits, in force in a
	// zone at a time: stored readings are classified by it.
	OperatingAt(zone string, at time.Time) alerts.StateAt
	Sensors() []alerts.SensorView
}

// Store is what the API reads from and writes to the store.
type Store interface {
	ReadingStore
	PressureStore
	AuditTrail
	AlarmJournal
	RunStore
	StateHistory
	SetOperatingState(ctx context.Context, st store.OperatingState) error
	Backup(w io.Writer) (int64, error)
}

// ReadingStore reads the stored readings and their rollups.
type ReadingStore interface {
	ScanReadings(counter string, from, to time.Time, fn func(store.Reading) error) error
	// StreamReadings lends each reading for the call only (see the store's
	// StreamReadings): the raw stream copies what it buffers.
	StreamReadings(counter string, from, to time.Time, fn func(*store.Reading) error) error
	ScanRollups(counter string, step time.Duration, from, to time.Time, fn func(store.Rollup) error) error
}

// PressureStore reads the stored DP samples.
type PressureStore interface {
	ScanPressure(sensor string, from, to time.Time, fn func(store.Pressure) error) error
	LatestPressure(sensor string) (store.Pressure, bool, error)
}

// AuditTrail reads the audit chain.
type AuditTrail interface {
	ScanAudit(from, to uint64, fn func(store.AuditEntry) error) error
	// ScanAuditSince is ScanAudit from the first entry that can have a
	// time at or after since.
	ScanAuditSince(since time.Time, fn func(store.AuditEntry) error) error
	AuditHead() (uint64, [32]byte, error)
}

// AlarmJournal reads the alarm snapshots the store keeps.
type AlarmJournal interface {
	ScanAlarms(since time.Time, fn func(id string, updated time.Time, snapshot []byte, cleared bool) error) error
}

// Ingest takes request bodies of readings and DP samples: it decodes,
// validates and commits them, and answers once they are durable.
type Ingest interface {
	PostReadings(ctx context.Context, contentType string, declaredLength int64, body io.Reader) (collector.Result, error)
	PostPressure(ctx context.Context, contentType string, declaredLength int64, body io.Reader) (collector.Result, error)
}

// Alarms is the judge's alarm side: the open alarms, acknowledgement and
// the health of the notifiers.
type Alarms interface {
	// Active lists the alarms not cleared.
	Active() []alerts.Alarm
	Ack(ctx context.Context, id, by, comment string) (alerts.Alarm, error)
	Notifiers() []alerts.NotifierHealth
}

// NoAlarms is an Alarms with no rules and no notifiers: nothing is ever
// open, and an acknowledgement finds no alarm.
type NoAlarms struct{}

// Active is empty.
func (NoAlarms) Active() []alerts.Alarm { return nil }

// Ack finds no alarm.
func (NoAlarms) Ack(context.Context, string, string, string) (alerts.Alarm, error) {
	return alerts.Alarm{}, alerts.ErrNoAlarm
}

// Notifiers is empty.
func (NoAlarms) Notifiers() []alerts.NotifierHealth { return nil }

// Signatures makes electronic signatures of people (re-checking the
// password or a fresh provider sign-in) and finds those of a record.
type Signatures interface {
	Sign(ctx context.Context, s people.Session, req people.SignRequest) (people.Signature, error)
	SignaturesFor(subject string) []people.Signature
}
