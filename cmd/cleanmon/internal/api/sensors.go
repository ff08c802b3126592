package api

import (
	"cleanmon/alerts"
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
	// "unknown" (silent: no sample yet, or none within its allowed
	// silence; Pa is then null, Time the last one heard), as the judge
	// sees it; DoorOpenings the dips shorter than the delay.
	State        string `json:"state"`
	DoorOpenings uint64 `json:"door_openings"`
}

// sensorObject is the configured sensor with the judge's view of it. A
// silent sensor shows no number and the state unknown, never fine.
func sensorObject(p collector.Sensor, v alerts.SensorView) sensorJSON {
	o := sensorJSON{ID: p.ID, High: p.High, Low: p.Low, MinPa: p.MinPa, Delay: httpx.FormatDuration(time.Duration(p.Delay)), State: "unknown"}
	if o.Delay == "0s" {
		o.Delay = httpx.FormatDuration(collector.DefaultSensorDelay)
	}
	if p.MaxPa > 0 {
		v := p.MaxPa
		o.MaxPa = &v
	}
	j := sensorView(v)
	o.Pa, o.Time, o.DoorOpenings = j.Pa, j.Time, v.DoorOpenings
	if v.Status != alerts.SensorSilent && v.Sensor == p.ID {
		o.State = v.Status
	}
	return o
}

// listSensors is GET /api/v1/sensors: every DP sensor with its latest
// value against its minimum, in configuration order.
func (s *Server) listSensors(w http.ResponseWriter, r *http.Request) {
	views := map[string]alerts.SensorView{}
	for _, v := range s.zones.Sensors() {
		views[v.Sensor] = v
	}
	out := make([]sensorJSON, 0, len(s.cfg.PressureSensors))
	for _, p := range s.cfg.PressureSensors {
		out = append(out, sensorObject(p, views[p.ID]))
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
