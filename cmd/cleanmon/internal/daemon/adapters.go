package daemon

import (
	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/api"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/collector"
	"cleanmon/store"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// storeSink commits the collector's readings to the store: the collector
// acknowledges a sender only once this returns.
type storeSink struct {
	st  *store.Store
	m   *alerts.IngestMetrics // nil: no metrics
	log *slog.Logger          // nil: conflicts are not logged
	// gate refuses writes after an integrity fault and learns of a full
	// disk (trust.go); nil: always open.
	gate *writeGate
}

// CommitReadings implements collector.Sink, and counts every
// reading in cleanmon_readings_total as accepted, duplicate or conflict,
// per counter. A conflict (the time of a stored reading, other values) is
// answered as a duplicate, as the API promises, but logged: the stored
// reading stays, and someone must look at the instrument.
func (s storeSink) CommitReadings(ctx context.Context, rs []collector.Reading) ([]bool, error) {
	out := make([]store.Reading, len(rs))
	for i := range rs {
		r := &rs[i]
		out[i] = store.Reading{
			Counter: r.Counter, Time: r.Time, VolumeL: r.VolumeL, FlowLPM: r.FlowLPM,
			SampleSeconds: r.SampleSeconds, Status: r.Status, Differential: r.Differential,
			Sizes: r.Sizes, Counts: r.Counts,
		}
	}
	if err := s.gate.check(); err != nil {
		return nil, err
	}
	outcomes, err := s.st.AppendReadingsMarked(ctx, out)
	s.gate.committed(err)
	if err != nil {
		return nil, err
	}
	stored := make([]bool, len(rs))
	for i, o := range outcomes {
		stored[i] = o == store.Stored
		if o == store.Conflict && s.log != nil {
			s.log.Warn("reading not stored: a reading of this counter at this time is stored with other values",
				"counter", rs[i].Counter, "time", rs[i].Time)
		}
		if s.m == nil {
			continue
		}
		switch o {
		case store.Stored:
			s.m.Count(rs[i].Counter, alerts.IngestAccepted, 1)
			s.m.Observe(rs[i].Counter, rs[i].Time, rs[i].FlowLPM)
		case store.Conflict:
			s.m.Count(rs[i].Counter, alerts.IngestConflict, 1)
		default:
			s.m.Count(rs[i].Counter, alerts.IngestDuplicate, 1)
		}
	}
	return stored, nil
}

// CommitPressure implements collector.Sink. A conflict is logged by the
// store and answered as a duplicate.
func (s storeSink) CommitPressure(ctx context.Context, ps []collector.Pressure) ([]bool, error) {
	out := make([]store.Pressure, len(ps))
	for i, p := range ps {
		out[i] = store.Pressure{Sensor: p.Sensor, Time: p.Time, Pa: p.Pa}
	}
	if err := s.gate.check(); err != nil {
		return nil, err
	}
	outcomes, err := s.st.AppendPressureMarked(ctx, out)
	s.gate.committed(err)
	return storedMarks(outcomes), err
}

// storedMarks says per sample whether the store stored it.
func storedMarks(os []store.Outcome) []bool {
	if os == nil {
		return nil
	}
	stored := make([]bool, len(os))
	for i, o := range os {
		stored[i] = o == store.Stored
	}
	return stored
}

// observation turns a committed reading into what the zone state takes.
func observation(r *collector.Reading) alerts.Observation {
	return alerts.Observation{Counter: r.Counter, Time: r.Time, VolumeL: r.VolumeL, Status: r.Status, Sizes: r.Sizes, PerM3: r.PerM3}
}

// storedObservation does the same for a reading read back from the store.
func storedObservation(r store.Reading) alerts.Observation {
	return alerts.Observation{Counter: r.Counter, Time: r.Time, VolumeL: r.VolumeL, Status: r.Status, Sizes: r.Sizes, PerM3: r.PerM3()}
}

// snapshots travel as JSON, which the store keeps as opaque bytes.
type alarmStore struct{ st *store.Store }

// RecordTransitions implements alerts.Journal.
func (a alarmStore) RecordTransitions(ctx context.Context, ts []alerts.Transition, notifiers []string) error {
	recs := make([]store.AlarmRecord, len(ts))
	for i := range ts {
		snap, err := json.Marshal(ts[i].Alarm)
		if err != nil {
			return err
		}
		entry, err := json.Marshal(ts[i])
		if err != nil {
			return err
		}
		recs[i] = store.AlarmRecord{AlarmID: ts[i].AlarmID, Time: ts[i].Time, Cleared: ts[i].To == alerts.StateCleared,
			Snapshot: snap, Entry: entry, By: ts[i].By, Reason: ts[i].Comment}
	}
	_, err := a.st.RecordAlarms(ctx, recs, notifiers)
	return err
}

// OpenAlarms implements alerts.Journal.
func (a alarmStore) OpenAlarms(ctx context.Context) ([]alerts.Alarm, error) {
	var out []alerts.Alarm
	err := a.st.OpenAlarms(func(id string, snap []byte) error {
		var al alerts.Alarm
		if err := json.Unmarshal(snap, &al); err != nil {
			return fmt.Errorf("alarm %s: %w", id, err)
		}
		out = append(out, al)
		return ctx.Err()
	})
	return out, err
}

// Due implements alerts.Outbox.
func (a alarmStore) Due(ctx context.Context, notifier string, now time.Time, limit int) ([]alerts.Delivery, error) {
	items, err := a.st.OutboxDue(notifier, now, limit)
	if err != nil {
		return nil, err
	}
	out := make([]alerts.Delivery, 0, len(items))
	for _, it := range items {
		d := alerts.Delivery{ID: it.ID, Notifier: it.Notifier, Attempts: it.Attempts, NextAttempt: it.NextAttempt, LastError: it.LastError}
		if err := json.Unmarshal(it.Payload, &d.Transition); err != nil {
			return nil, fmt.Errorf("outbox item %d: %w", it.ID, err)
		}
		out = append(out, d)
	}
	return out, nil
}

// Done implements alerts.Outbox.
func (a alarmStore) Done(ctx context.Context, id uint64) error { return a.st.OutboxDone(ctx, id) }

// Retry implements alerts.Outbox.
func (a alarmStore) Retry(ctx context.Context, id uint64, attempts int, next time.Time, lastErr string) error {
	return a.st.OutboxRetry(ctx, id, attempts, next, lastErr)
}

// Pending lets the notifier metrics show queue lengths without reading
// the queue.
func (a alarmStore) Pending(ctx context.Context, notifier string) (int, error) {
	return a.st.OutboxLen(notifier)
}

// auditCollector exports the chain's length, so that a scrape history
// shows the trail only ever growing.
type auditCollector struct{ st *store.Store }

var descAuditSeq = prometheus.NewDesc("cleanmon_audit_entries", "Entries in the audit chain (its head's sequence number).", nil, nil)

// Describe implements prometheus.Collector.
func (c auditCollector) Describe(ch chan<- *prometheus.Desc) { ch <- descAuditSeq }

// Collect implements prometheus.Collector.
func (c auditCollector) Collect(ch chan<- prometheus.Metric) {
	if seq, _, err := c.st.AuditHead(); err == nil {
		ch <- prometheus.MustNewConstMetric(descAuditSeq, prometheus.GaugeValue, float64(seq))
	}
}

// Active implements api.Alarms: the alarms not cleared, with an
// integrity alarm the damaged store could not take (trust.go).
func (s *alarmService) Active() []alerts.Alarm { return s.withUnjournaled(s.judge.Alarms(false)) }

// Alarms implements alerts.AlarmLister for the alarm metrics, the same way.
func (s *alarmService) Alarms(all bool) []alerts.Alarm { return s.withUnjournaled(s.judge.Alarms(all)) }

// Ack implements api.Alarms.
func (s *alarmService) Ack(ctx context.Context, id, by, comment string) (alerts.Alarm, error) {
	return s.judge.Ack(ctx, id, by, comment)
}

// Notifiers implements api.Alarms: the health of every notifier.
func (s *alarmService) Notifiers() []alerts.NotifierHealth { return s.disp.HealthList() }

// envSink commits the collector's environment samples to the store,
// behind the same write gate as readings.
type envSink struct {
	st   *store.Store
	gate *writeGate
}

// CommitEnvironment implements collector.EnvironmentSink.
func (s envSink) CommitEnvironment(ctx context.Context, es []collector.Environment) ([]bool, error) {
	if err := s.gate.check(); err != nil {
		return nil, err
	}
	outcomes, err := s.st.AppendEnvironmentMarked(ctx, envSamples(es))
	s.gate.committed(err)
	return storedMarks(outcomes), err
}

// envSamples turns validated environment samples into stored ones.
func envSamples(es []collector.Environment) []store.EnvSample {
	out := make([]store.EnvSample, len(es))
	for i, e := range es {
		out[i] = store.EnvSample{Sensor: e.Sensor, Time: e.Time, TemperatureC: e.TemperatureC, HumidityPct: e.HumidityPct, VelocityMS: e.VelocityMS}
		if e.HasTemperature {
			out[i].Has |= store.EnvTemperature
		}
		if e.HasHumidity {
			out[i].Has |= store.EnvHumidity
		}
		if e.HasVelocity {
			out[i].Has |= store.EnvVelocity
		}
	}
	return out
}

// envObservation turns a committed environment sample into what the
// judge and the metrics take.
func envObservation(e *collector.Environment) alerts.EnvironmentObservation {
	o := alerts.EnvironmentObservation{Sensor: e.Sensor, Time: e.Time, Values: map[string]float64{}}
	for _, ch := range []string{collector.ChanTemperature, collector.ChanHumidity, collector.ChanVelocity} {
		if v, ok := e.Value(ch); ok {
			o.Values[ch] = v
		}
	}
	return o
}

// storedEnvObservation does the same for a sample read back from the
// store.
func storedEnvObservation(e store.EnvSample) alerts.EnvironmentObservation {
	o := alerts.EnvironmentObservation{Sensor: e.Sensor, Time: e.Time, Values: map[string]float64{}}
	if e.Has&store.EnvTemperature != 0 {
		o.Values[alerts.ChanTemperature] = e.TemperatureC
	}
	if e.Has&store.EnvHumidity != 0 {
		o.Values[alerts.ChanHumidity] = e.HumidityPct
	}
	if e.Has&store.EnvVelocity != 0 {
		o.Values[alerts.ChanVelocity] = e.VelocityMS
	}
	return o
}

// The adapters satisfy what their consumers define.
var (
	_ collector.Sink            = storeSink{}
	_ alerts.Journal            = alarmStore{}
	_ alerts.Outbox             = alarmStore{}
	_ api.Alarms                = (*alarmService)(nil)
	_ api.Zones                 = (*alerts.Judge)(nil)
	_ collector.DeviceEvents    = (*alarmService)(nil)
	_ prometheus.Collector      = auditCollector{}
	_ collector.EnvironmentSink = envSink{}
	_ api.EnvironmentStore      = (*store.Store)(nil)
	_ api.EnvironmentIngest     = (*collector.EnvironmentIngest)(nil)
	_ collector.MQTTSink        = collector.Ingests{}
)

// accountStore keeps people's accounts in the store for the people
// package; the two Account types match field for field.
type accountStore struct{ st *store.Store }

var _ people.AccountStore = accountStore{}

// peopleErr maps the store's account errors onto the people package's.
func peopleErr(err error) error {
	switch {
	case errors.Is(err, store.ErrAccountExists):
		return fmt.Errorf("%w: %w", people.ErrExists, err)
	case errors.Is(err, store.ErrNoAccount):
		return fmt.Errorf("%w: %w", people.ErrNotFound, err)
	}
	return err
}

// CreateAccount implements people.AccountStore.
func (a accountStore) CreateAccount(ctx context.Context, acc people.Account, c people.Change) error {
	return peopleErr(a.st.CreateAccount(ctx, store.Account(acc), store.AccountChange(c)))
}

// UpdateAccount implements people.AccountStore.
func (a accountStore) UpdateAccount(ctx context.Context, name string, c people.Change, fn func(*people.Account) error) error {
	return peopleErr(a.st.UpdateAccount(ctx, name, store.AccountChange(c), func(x *store.Account) error {
		return fn((*people.Account)(x))
	}))
}

// GetAccount implements people.AccountStore.
func (a accountStore) GetAccount(name string) (people.Account, error) {
	x, err := a.st.GetAccount(name)
	return people.Account(x), peopleErr(err)
}

// peopleAudit writes the people package's events (sign-ins, signatures)
// into the store's audit chain.
type peopleAudit struct{ st *store.Store }

var _ people.AuditSink = peopleAudit{}

// Record implements people.AuditSink.
func (a peopleAudit) Record(ctx context.Context, e people.Event) (uint64, error) {
	actor := e.Actor
	if actor == "" {
		actor = store.AuditActorSystem
	}
	seq, _, err := a.st.AppendAudit(ctx, store.AuditEntry{Time: e.Time, Actor: actor, Action: e.Action,
		Subject: e.Subject, Reason: e.Reason, Detail: []byte(e.Detail)})
	return seq, err
}
