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

// Zones is the live zone state the API shows and changes (the judge's
// zone tracker).
type Zones interface {
	Zones() []alerts.ZoneView
	Zone(id string) (alerts.ZoneView, bool)
	// SetOperatingState calls persist and, only when it succeeds, applies
	// the change.
	SetOperatingState(ch alerts.OperatingChange, persist func(alerts.OperatingChange) error) (alerts.ZoneView, error)
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

// Alarms is the judge's alarm side: the open alarms, acknowledgement, the
// operating state the rules follow, and the health of the notifiers.
type Alarms interface {
	// Active lists the alarms not cleared.
	Active() []alerts.Alarm
	Ack(ctx context.Context, id, by, comment string) (alerts.Alarm, error)
	SetOperatingState(ctx context.Context, zone, state string) error
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

// SetOperatingState has no rules to tell.
func (NoAlarms) SetOperatingState(context.Context, string, string) error { return nil }

// Notifiers is empty.
func (NoAlarms) Notifiers() []alerts.NotifierHealth { return nil }

// Signatures makes electronic signatures of people (re-checking the
// password or a fresh provider sign-in) and finds those of a record.
type Signatures interface {
	Sign(ctx context.Context, s people.Session, req people.SignRequest) (people.Signature, error)
	SignaturesFor(subject string) []people.Signature
}
