package api

import (
	"fmt"
	"net/http"
	"strconv"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/httpx"
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

// sensorObject is the sensor with its latest value. Its state is
// unknown while the value is stale or missing, so that a silent sensor is
// never shown as fine.
func (s *Server) sensorObject(p collector.Sensor, now time.Time) (sensorJSON, error) {
	o := sensorJSON{ID: p.ID, High: p.High, Low: p.Low, MinPa: p.MinPa, Delay: httpx.FormatDuration(time.Duration(p.Delay)), State: "unknown"}
	if o.Delay == "0s" {
		o.Delay = httpx.FormatDuration(collector.DefaultSensorDelay)
	}
	if p.MaxPa > 0 {
		v := p.MaxPa
		o.MaxPa = &v
	}
	last, found, err := s.store.LatestPressure(p.ID)
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
func (s *Server) listSensors(w http.ResponseWriter, r *http.Request) {
	out := make([]sensorJSON, 0, len(s.cfg.PressureSensors))
	now := s.now()
	for _, p := range s.cfg.PressureSensors {
		o, err := s.sensorObject(p, now)
		if err != nil {
			Errors.Write(w, "reading the store: ", err)
			return
		}
		out = append(out, o)
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

// sensorPressure is GET /api/v1/sensors/{sensor}/pressure?from=&to=: the
// DP samples of one sensor, oldest first, streamed.
func (s *Server) sensorPressure(w http.ResponseWriter, r *http.Request) {
	id := chi.URLParam(r, "sensor")
	if _, ok := s.sensorOf(w, id); !ok {
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	rs := httpx.NewRowStream(w, Errors)
	idJSON := strconv.Quote(id)
	err := s.store.ScanPressure(id, from, to, func(p store.Pressure) error {
		return rs.Row(func(b []byte) []byte {
			b = append(b, `{"time":`...)
			b = httpx.AppendTime(b, p.Time)
			b = append(b, `,"sensor":`...)
			b = append(b, idJSON...)
			b = append(b, `,"pa":`...)
			b = httpx.AppendFloat(b, p.Pa)
			return append(b, '}')
		})
	})
	if err != nil {
		rs.Fail(err)
		return
	}
	rs.End()
}

// sensorOf finds a configured DP sensor, or answers 404 naming it.
func (s *Server) sensorOf(w http.ResponseWriter, id string) (*collector.Sensor, bool) {
	for i := range s.cfg.PressureSensors {
		if s.cfg.PressureSensors[i].ID == id {
			return &s.cfg.PressureSensors[i], true
		}
	}
	httpx.WriteError(w, http.StatusNotFound, fmt.Sprintf("unknown DP sensor %q", id))
	return nil, false
}
