package web

import (
	"cmp"
	"fmt"
	"math"
	"net/http"
	"strconv"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
	"cleanmon/store"
)

// The JSON routes below serve only the pages, with what the API does not
// say in one answer: the pressure cascade, DP history reduced to a
// chart's worth of points, who the page's token is. They carry the API's
// permissions.

// uiSession is GET /ui/session (behind the read permission, so that it
// is rate-limited and refuses as the API does: 401 without a valid token
// unless reads are open, 403 for a token that may not read): what the
// request's token may do, or what an anonymous visitor may.
func (s *Server) uiSession(w http.ResponseWriter, r *http.Request) {
	out, err := s.auth.Session(r)
	if err != nil {
		w.Header().Set("WWW-Authenticate", `Bearer realm="cleanmon"`)
		httpx.WriteError(w, http.StatusUnauthorized, err.Error())
		return
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

// uiAreaJSON is a zone or an unclassified area on the pressure cascade.
type uiAreaJSON struct {
	ID   string `json:"id"`
	Name string `json:"name"`
	Zone bool   `json:"zone"` // false: an area named only as a sensor's side
	// Level is the area's step on the cascade: 0 for an area that is on
	// no sensor's high side, else one above the highest of its low sides.
	Level int `json:"level"`
}

// uiSiteJSON is the answer of GET /ui/site: the layout of the overview.
// The sensors' values come from GET /api/v1/sensors.
type uiSiteJSON struct {
	Site  string       `json:"site"`
	Areas []uiAreaJSON `json:"areas"`
	// TimeZone is the site's IANA zone, in which the pages show every time;
	// Shifts the configured start times; Shift and LastShift the shift
	// running at Now and the one before, cut on the site's clock.
	TimeZone  string      `json:"time_zone"`
	Shifts    []string    `json:"shifts"`
	Now       time.Time   `json:"now"`
	Shift     uiShiftJSON `json:"shift"`
	LastShift uiShiftJSON `json:"last_shift"`
}

// uiShiftJSON is one shift, [start, end).
type uiShiftJSON struct {
	Start time.Time `json:"start"`
	End   time.Time `json:"end"`
}

// uiSite is GET /ui/site: the zones and areas with their cascade levels,
// and the site's clock.
func (s *Server) uiSite(w http.ResponseWriter, r *http.Request) {
	now := s.now()
	cur, prev := s.cfg.ShiftAt(now)
	shifts := s.cfg.Shifts
	if shifts == nil {
		shifts = []string{}
	}
	httpx.WriteJSON(w, http.StatusOK, uiSiteJSON{
		Site: s.cfg.Site, Areas: siteAreas(s.cfg.Zones, s.cfg.PressureSensors),
		TimeZone: s.cfg.TimeZoneName(), Shifts: shifts, Now: now.UTC(),
		Shift:     uiShiftJSON{Start: cur.Start.UTC(), End: cur.End.UTC()},
		LastShift: uiShiftJSON{Start: prev.Start.UTC(), End: prev.End.UTC()},
	})
}

// siteAreas lists the zones in configuration order, then the low-side
// areas that are not zones, each with its level on the cascade. A cycle
// of sensors (which the configuration should not hold) is cut where it
// closes rather than looping.
func siteAreas(zones []alerts.ZoneConfig, sensors []collector.Sensor) []uiAreaJSON {
	var out []uiAreaJSON
	index := map[string]int{}
	add := func(id, name string, zone bool) {
		if _, seen := index[id]; !seen {
			index[id] = len(out)
			out = append(out, uiAreaJSON{ID: id, Name: name, Zone: zone})
		}
	}
	for _, z := range zones {
		add(z.ID, cmp.Or(z.Name, z.ID), true)
	}
	lows := map[string][]string{}
	for _, p := range sensors {
		add(p.High, p.High, false)
		add(p.Low, p.Low, false)
		lows[p.High] = append(lows[p.High], p.Low)
	}
	const (
		unvisited = iota
		visiting
		done
	)
	mark := map[string]int{}
	level := map[string]int{}
	var visit func(id string) int
	visit = func(id string) int {
		switch mark[id] {
		case done:
			return level[id]
		case visiting:
			return -1 // a cycle: the edge that closes it is left out
		}
		mark[id] = visiting
		l := 0
		for _, low := range lows[id] {
			l = max(l, visit(low)+1)
		}
		mark[id], level[id] = done, l
		return l
	}
	for i := range out {
		out[i].Level = visit(out[i].ID)
	}
	return out
}

// DPPoint is one bucket of DP history.
type DPPoint struct {
	Time time.Time `json:"time"`
	N    int       `json:"n"`
	Min  float64   `json:"min"`
	Mean float64   `json:"mean"`
	Max  float64   `json:"max"`
}

// DPHistory is the answer of GET /ui/pressure/{sensor}.
type DPHistory struct {
	Sensor string    `json:"sensor"`
	High   string    `json:"high"`
	Low    string    `json:"low"`
	MinPa  float64   `json:"min_pa"`
	MaxPa  *float64  `json:"max_pa"`
	From   time.Time `json:"from"`
	To     time.Time `json:"to"`
	Bucket string    `json:"bucket"`
	Points []DPPoint `json:"points"`
}

// DP history is reduced on the server: a sensor reporting every 10 s
// gives three million samples a year, which no chart can draw and no
// browser should download. The store keeps no DP rollups, so a long range
// is a full scan of the sensor's samples.
const (
	defaultDPPoints = 600
	maxDPPoints     = 5000
)

// uiPressure is GET /ui/pressure/{sensor}?from=&to=&points=: the sensor's
// samples in [from, to) as at most `points` buckets of equal length, each
// with its count, minimum, mean and maximum; empty buckets are left out.
func (s *Server) uiPressure(w http.ResponseWriter, r *http.Request) {
	id := chi.URLParam(r, "sensor")
	sensor, ok := s.cfg.Sensor(id)
	if !ok {
		httpx.WriteError(w, http.StatusNotFound, fmt.Sprintf("unknown DP sensor %q", id))
		return
	}
	points := defaultDPPoints
	if v := r.URL.Query().Get("points"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 || n > maxDPPoints {
			httpx.WriteFieldError(w, "points", fmt.Sprintf("%q: want a whole number 1–%d", v, maxDPPoints))
			return
		}
		points = n
	}
	from, to, ok := httpx.QueryRange(w, r, s.now())
	if !ok {
		return
	}
	width := to.Sub(from) / time.Duration(points)
	if width < time.Second {
		width = time.Second
	}
	type acc struct {
		n             int
		min, max, sum float64
	}
	buckets := make([]acc, int(to.Sub(from)/width)+1)
	err := s.store.ScanPressure(id, from, to, func(p store.Pressure) error {
		b := &buckets[int(p.Time.Sub(from)/width)]
		if b.n == 0 {
			b.min, b.max = p.Pa, p.Pa
		}
		b.n++
		b.sum += p.Pa
		b.min, b.max = math.Min(b.min, p.Pa), math.Max(b.max, p.Pa)
		if b.n%4096 == 0 {
			return r.Context().Err()
		}
		return nil
	})
	if err != nil {
		s.errs.Write(w, "reading the store: ", err)
		return
	}
	out := DPHistory{Sensor: id, High: sensor.High, Low: sensor.Low, MinPa: sensor.MinPa, From: from, To: to,
		Bucket: httpx.FormatDuration(width), Points: []DPPoint{}}
	if sensor.MaxPa > 0 {
		m := sensor.MaxPa
		out.MaxPa = &m
	}
	for i, b := range buckets {
		if b.n > 0 {
			out.Points = append(out.Points, DPPoint{Time: from.Add(time.Duration(i) * width), N: b.n, Min: b.min, Mean: b.sum / float64(b.n), Max: b.max})
		}
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}
