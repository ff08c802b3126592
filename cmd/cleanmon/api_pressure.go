package main

import (
	"fmt"
	"net/http"
	"strconv"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/collector"
	"cleanmon/store"
)

// sensorJSON is one DP sensor of GET /api/v1/sensors: where it sits in
// the cascade (high side, low side), its limits and its latest sample.
type sensorJSON struct {
	ID    string     `json:"id"`
	High  string     `json:"high"`
	Low   string     `json:"low"`
	MinPa float64    `json:"min_pa"`
	MaxPa *float64   `json:"max_pa"`
	Delay string     `json:"delay"`
	Pa    *float64   `json:"pa"`
	Time  *time.Time `json:"time"`
	// State is "ok", "low" (below the minimum), "reversed" (below zero) or
	// "unknown" (no sample yet, or none within three sample periods).
	State string `json:"state"`
}

// pressureReader is what the DP routes need from the store.
type pressureReader interface {
	ScanPressure(sensor string, from, to time.Time, fn func(store.Pressure) error) error
	LatestPressure(sensor string) (store.Pressure, bool, error)
}

func (s *server) sensorObject(p collector.Sensor, now time.Time) (sensorJSON, error) {
	o := sensorJSON{ID: p.ID, High: p.High, Low: p.Low, MinPa: p.MinPa, Delay: formatDuration(time.Duration(p.Delay)), State: "unknown"}
	if o.Delay == "0s" {
		o.Delay = formatDuration(collector.DefaultSensorDelay)
	}
	if p.MaxPa > 0 {
		v := p.MaxPa
		o.MaxPa = &v
	}
	pr, ok := s.store.(pressureReader)
	if !ok {
		return o, nil
	}
	last, found, err := pr.LatestPressure(p.ID)
	if err != nil || !found {
		return o, err
	}
	pa, t := last.Pa, last.Time.UTC()
	o.Pa, o.Time = &pa, &t
	every := time.Duration(p.Interval)
	if every <= 0 {
		every = collector.DefaultSensorInterval
	}
	switch {
	case now.Sub(t) > 3*every:
		// A stale value is shown, but the state says it cannot be trusted.
	case pa < 0:
		o.State = "reversed"
	case pa < p.MinPa:
		o.State = "low"
	default:
		o.State = "ok"
	}
	return o, nil
}

// listSensors is GET /api/v1/sensors: every DP sensor with its latest
// value against its minimum, in configuration order.
func (s *server) listSensors(w http.ResponseWriter, r *http.Request) {
	out := make([]sensorJSON, 0, len(s.cfg.PressureSensors))
	now := s.now()
	for _, p := range s.cfg.PressureSensors {
		o, err := s.sensorObject(p, now)
		if err != nil {
			writeError(w, errorStatus(err), "reading the store: "+err.Error())
			return
		}
		out = append(out, o)
	}
	writeJSON(w, http.StatusOK, out)
}

// sensorPressure is GET /api/v1/sensors/{sensor}/pressure?from=&to=: the
// DP samples of one sensor, oldest first, streamed.
func (s *server) sensorPressure(w http.ResponseWriter, r *http.Request) {
	id := chi.URLParam(r, "sensor")
	if _, ok := s.sensorOf(w, id); !ok {
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	pr, ok := s.store.(pressureReader)
	if !ok {
		writeError(w, http.StatusServiceUnavailable, "no pressure store")
		return
	}
	rs := newRowStream(w)
	idJSON := strconv.Quote(id)
	err := pr.ScanPressure(id, from, to, func(p store.Pressure) error {
		return rs.row(func(b []byte) []byte {
			b = append(b, `{"time":`...)
			b = appendJSONTime(b, p.Time)
			b = append(b, `,"sensor":`...)
			b = append(b, idJSON...)
			b = append(b, `,"pa":`...)
			b = appendJSONFloat(b, p.Pa)
			return append(b, '}')
		})
	})
	if err != nil {
		rs.fail(err)
		return
	}
	rs.end()
}

// sensorOf finds a configured DP sensor, or answers 404 naming it.
func (s *server) sensorOf(w http.ResponseWriter, id string) (*collector.Sensor, bool) {
	for i := range s.cfg.PressureSensors {
		if s.cfg.PressureSensors[i].ID == id {
			return &s.cfg.PressureSensors[i], true
		}
	}
	writeError(w, http.StatusNotFound, fmt.Sprintf("unknown DP sensor %q", id))
	return nil, false
}
