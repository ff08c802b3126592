package api

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"slices"
	"time"

	"cleanmon/alerts"
	"cleanmon/alerts/investigate"
	"cleanmon/classify"
	"cleanmon/collector"
	"cleanmon/store"
)

// The record around an alarm, a run or a month, read from the store into
// the plain series that alerts/investigate computes on. Investigation,
// exposure and the month's trend share it, so the three answer from the
// same reading of the same record.

// zoneRecord is a zone's readings over a span.
type zoneRecord struct {
	Locations   []investigate.LocationSeries
	Instruments []investigate.InstrumentSeries
	// First is the earliest reading in the span; zero when there is none.
	First time.Time
	// Faulty counts readings left out of Locations because the counter
	// flagged them (with trustedOnly).
	Faulty int
}

// readZone reads the readings of every counter of zone in [from, to] at
// sizes. With trustedOnly, readings the counter flagged as faulty are left
// out of the concentrations (they say nothing of the room) but kept in
// the instrument health.
func (s *Server) readZone(ctx context.Context, zone string, sizes []float64, from, to time.Time, trustedOnly bool) (zoneRecord, error) {
	var rec zoneRecord
	for _, c := range s.zoneCounters(zone, "") {
		nominal := 0.0
		for _, k := range s.cfg.Counters {
			if k.ID == c.id {
				nominal = k.FlowLPM
			}
		}
		series := make([]investigate.LocationSeries, len(sizes))
		for i, size := range sizes {
			series[i] = investigate.LocationSeries{Location: c.location, SizeUM: size}
		}
		inst := investigate.InstrumentSeries{Counter: c.id, Location: c.location, NominalLPM: nominal}
		err := s.store.ScanReadings(c.id, from, to.Add(time.Nanosecond), func(rd store.Reading) error {
			if rec.First.IsZero() || rd.Time.Before(rec.First) {
				rec.First = rd.Time
			}
			flow := rd.FlowLPM
			if flow <= 0 {
				flow = nominal
			}
			inst.Flow = append(inst.Flow, investigate.Point{Time: rd.Time, Value: flow})
			inst.Status = append(inst.Status, investigate.StatusPoint{Time: rd.Time, Status: cmpStatus(rd.Status)})
			if trustedOnly && rd.Status == collector.StatusFault {
				rec.Faulty++
				return ctx.Err()
			}
			per := rd.PerM3()
			for i, size := range sizes {
				if j := slices.Index(rd.Sizes, size); j >= 0 {
					series[i].Points = append(series[i].Points, investigate.Point{Time: rd.Time, Value: per[j]})
				}
			}
			return ctx.Err()
		})
		if err != nil {
			return rec, err
		}
		rec.Locations = append(rec.Locations, series...)
		rec.Instruments = append(rec.Instruments, inst)
	}
	return rec, nil
}

func cmpStatus(s string) string {
	if s == "" {
		return collector.StatusOK
	}
	return s
}

// boundary lists the DP sensors with zone on either side.
func (s *Server) boundary(zone string) []collector.Sensor {
	var out []collector.Sensor
	for _, p := range s.cfg.PressureSensors {
		if p.High == zone || p.Low == zone {
			out = append(out, p)
		}
	}
	return out
}

// readPressure reads the DP of every sensor on zone's boundary in
// [from, to].
func (s *Server) readPressure(ctx context.Context, zone string, from, to time.Time) ([]investigate.PressureSeries, error) {
	var out []investigate.PressureSeries
	for _, p := range s.boundary(zone) {
		ps := investigate.PressureSeries{Sensor: p.ID, High: p.High, Low: p.Low, MinPa: p.MinPa}
		err := s.store.ScanPressure(p.ID, from, to.Add(time.Nanosecond), func(x store.Pressure) error {
			ps.Points = append(ps.Points, investigate.Point{Time: x.Time, Value: x.Pa})
			return ctx.Err()
		})
		if err != nil {
			return nil, err
		}
		out = append(out, ps)
	}
	return out, nil
}

// zoneSizes are the sizes a zone is judged at, as numbers.
func zoneSizes(z *alerts.ZoneConfig) []float64 {
	var out []float64
	for _, v := range z.Sizes {
		if f, err := classify.ParseSize(v); err == nil {
			out = append(out, f)
		}
	}
	return out
}

// findAlarm is the alarm id: open ones from the judge, the rest from the
// journal's snapshots.
func (s *Server) findAlarm(id string) (alerts.Alarm, error) {
	for _, a := range s.alarms.Active() {
		if a.ID == id {
			return a, nil
		}
	}
	var found *alerts.Alarm
	err := s.store.ScanAlarms(time.Time{}, func(aid string, _ time.Time, snap []byte, _ bool) error {
		if aid != id {
			return nil
		}
		var a alerts.Alarm
		if err := json.Unmarshal(snap, &a); err != nil {
			return fmt.Errorf("alarm %s: %w", aid, err)
		}
		found = &a
		return nil
	})
	if err != nil {
		return alerts.Alarm{}, err
	}
	if found == nil {
		return alerts.Alarm{}, fmt.Errorf("%w: %q", alerts.ErrNoAlarm, id)
	}
	return *found, nil
}

// alarmsOfZone lists the alarms of zone that were open at some time in
// [from, now]: the judge's open ones and the journal's since from.
func (s *Server) alarmsOfZone(zone string, from time.Time) ([]alerts.Alarm, error) {
	seen := map[string]bool{}
	var out []alerts.Alarm
	for _, a := range s.alarms.Active() {
		if a.Zone == zone {
			out = append(out, a)
		}
		seen[a.ID] = true
	}
	err := s.store.ScanAlarms(from, func(id string, _ time.Time, snap []byte, _ bool) error {
		if seen[id] {
			return nil
		}
		var a alerts.Alarm
		if err := json.Unmarshal(snap, &a); err != nil {
			return fmt.Errorf("alarm %s: %w", id, err)
		}
		seen[id] = true
		if a.Zone == zone {
			out = append(out, a)
		}
		return nil
	})
	slices.SortFunc(out, func(a, b alerts.Alarm) int { return a.Since.Compare(b.Since) })
	return out, err
}

// exposureAlarm is what exposure needs of an alarm: it lasts from when
// its condition was first seen (the delay included: the product was in
// the room then too) to when it cleared.
func exposureAlarm(a alerts.Alarm) investigate.Alarm {
	out := investigate.Alarm{ID: a.ID, Zone: a.Zone, Kind: a.Kind, Level: a.Level, Location: a.Location,
		Since: a.Since, Peak: a.Peak, PeakTime: a.PeakTime}
	if a.SizeUM != nil {
		out.SizeUM = *a.SizeUM
	}
	if a.ClearedAt != nil {
		out.Cleared = *a.ClearedAt
	}
	return out
}

// levelTimeline reconstructs the zone's attention level from its alarms:
// the worst level of the alarms active or acknowledged at each moment,
// "none" when none was, from the zone's first reading on (before it the
// record says nothing: unknown). The particle state between alarms is not
// in the journal; an excursion of it raises an alarm, so the alarms carry
// every level that needed a person.
func levelTimeline(alarms []alerts.Alarm, first time.Time) []investigate.LevelChange {
	if first.IsZero() {
		return nil
	}
	type span struct {
		from, to time.Time
		rank     int
	}
	var spans []span
	points := []time.Time{first}
	for _, a := range alarms {
		if a.State == alerts.StateDelayed || a.State == "pending" {
			continue // still in its delay: nobody has been called yet
		}
		from := a.Since
		if a.ActiveSince != nil {
			from = *a.ActiveSince
		}
		var to time.Time
		if a.ClearedAt != nil {
			to = *a.ClearedAt
		}
		rank := 1
		if a.Level == alerts.LevelAction {
			rank = 2
		}
		spans = append(spans, span{from, to, rank})
		points = append(points, from)
		if !to.IsZero() {
			points = append(points, to)
		}
	}
	slices.SortFunc(points, func(a, b time.Time) int { return a.Compare(b) })
	points = slices.CompactFunc(points, func(a, b time.Time) bool { return a.Equal(b) })
	words := []string{investigate.LevelNone, investigate.LevelAlert, investigate.LevelAction}
	var out []investigate.LevelChange
	for _, t := range points {
		if t.Before(first) {
			continue
		}
		worst := 0
		for _, sp := range spans {
			if !t.Before(sp.from) && (sp.to.IsZero() || t.Before(sp.to)) {
				worst = max(worst, sp.rank)
			}
		}
		if n := len(out); n == 0 || out[n-1].Level != words[worst] {
			out = append(out, investigate.LevelChange{Time: t, Level: words[worst]})
		}
	}
	return out
}

// NoIngest takes nothing: for an API built over a store no daemon holds
// (the offline month report), where nothing may be written.
type NoIngest struct{}

// PostReadings refuses.
func (NoIngest) PostReadings(context.Context, string, int64, io.Reader) (collector.Result, error) {
	return collector.Result{}, errReadOnly
}

// PostPressure refuses.
func (NoIngest) PostPressure(context.Context, string, int64, io.Reader) (collector.Result, error) {
	return collector.Result{}, errReadOnly
}

var errReadOnly = fmt.Errorf("%w: this API reads a store offline and takes no samples", collector.ErrCommit)
