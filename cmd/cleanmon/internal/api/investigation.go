package api

import (
	"context"
	"fmt"
	"net/http"
	"slices"
	"time"

	"cleanmon/alerts"
	"cleanmon/alerts/investigate"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// maxInvestigationSpan bounds before and after: a day either way is more
// than an excursion needs, and bounds the readings one request reads.
const maxInvestigationSpan = 24 * time.Hour

// Caution is the sentence every answer that could steer a decision on
// product or people carries.
const Caution = "cleanmon supports, and does not replace, the site's qualified people, its procedures and the applicable standards and regulations."

// rankingNote says in a line how events are ranked; the README has the
// paragraph.
const rankingNote = "each series against its own baseline (median and MAD of the window's first part); score = ln(1+z) × lead-time weight × plausibility of the kind as a cause; a suggestion where to look first, not a verdict"

// investigationJSON is the answer of GET /api/v1/alarms/{id}/investigation.
type investigationJSON struct {
	Alarm        alerts.Alarm `json:"alarm"`
	From         time.Time    `json:"from"`
	To           time.Time    `json:"to"`
	Rise         time.Time    `json:"rise"`
	RiseFound    bool         `json:"rise_found"`
	RiseLocation string       `json:"rise_location"`
	Events       []eventJSON  `json:"events"`
	Doors        []doorJSON   `json:"doors"`
	Unknown      []string     `json:"unknown"`
	Runs         []runJSON    `json:"runs"`
	Series       []seriesJSON `json:"series"`
	States       []stateJSON  `json:"states"`
	Method       string       `json:"method"`
	Caution      string       `json:"caution"`
}

type eventJSON struct {
	Rank      int        `json:"rank"`
	Kind      string     `json:"kind"`
	Subjects  []string   `json:"subjects"`
	Start     time.Time  `json:"start"`
	End       *time.Time `json:"end"`
	LeadS     float64    `json:"lead_s"`
	Deviation float64    `json:"deviation"`
	Weight    float64    `json:"weight"`
	Plausible float64    `json:"plausible"`
	Score     float64    `json:"score"`
	Evidence  string     `json:"evidence"`
}

type doorJSON struct {
	Sensor   string        `json:"sensor"`
	MinPa    float64       `json:"min_pa"`
	Count    int           `json:"count"`
	Openings []openingJSON `json:"openings"`
}

type openingJSON struct {
	Start     time.Time  `json:"start"`
	End       *time.Time `json:"end"`
	DurationS float64    `json:"duration_s"`
	LowPa     float64    `json:"low_pa"`
}

// seriesJSON is one series for the charts: points as [Unix ms, value].
type seriesJSON struct {
	Group  string       `json:"group"` // "location", "pressure", "neighbour", "flow"
	Name   string       `json:"name"`
	SizeUM float64      `json:"size_um,omitempty"`
	Unit   string       `json:"unit"`
	MinPa  *float64     `json:"min_pa,omitempty"`
	Points [][2]float64 `json:"points"`
}

type stateJSON struct {
	Time time.Time `json:"time"`
	From string    `json:"from"`
	To   string    `json:"to"`
	By   string    `json:"by"`
}

func points(ps []investigate.Point) [][2]float64 {
	out := make([][2]float64, len(ps))
	for i, p := range ps {
		out[i] = [2]float64{float64(p.Time.UnixMilli()), p.Value}
	}
	return out
}

// spanParam reads a duration parameter (before, after) within
// (0, maxInvestigationSpan].
func spanParam(w http.ResponseWriter, r *http.Request, name string, def time.Duration) (time.Duration, bool) {
	v := r.URL.Query().Get(name)
	if v == "" {
		return def, true
	}
	d, err := time.ParseDuration(v)
	if err != nil || d <= 0 || d > maxInvestigationSpan {
		httpx.WriteFieldError(w, name, fmt.Sprintf("%q: want a duration such as 60m, more than 0 and at most %s", v, httpx.FormatDuration(maxInvestigationSpan)))
		return 0, false
	}
	return d, true
}

// alarmInvestigation is GET /api/v1/alarms/{id}/investigation?before=60m&after=30m:
// everything recorded around the alarm, the door openings per DP sensor,
// and the coincident events ranked (see the package doc of
// alerts/investigate and the README).
func (s *Server) alarmInvestigation(w http.ResponseWriter, r *http.Request) {
	before, ok := spanParam(w, r, "before", investigate.DefaultBefore)
	if !ok {
		return
	}
	after, ok := spanParam(w, r, "after", investigate.DefaultAfter)
	if !ok {
		return
	}
	a, err := s.findAlarm(pathID(r))
	if err != nil {
		Errors.Write(w, "", err)
		return
	}
	out, err := s.investigate(r.Context(), a, before, after)
	if err != nil {
		Errors.Write(w, "investigating the alarm: ", err)
		return
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

// investigate reads the record around a and ranks its coincident events.
func (s *Server) investigate(ctx context.Context, a alerts.Alarm, before, after time.Duration) (investigationJSON, error) {
	in, err := s.investigationInput(ctx, a, before, after)
	if err != nil {
		return investigationJSON{}, err
	}
	res, err := investigate.Investigate(in, investigate.Options{})
	if err != nil {
		return investigationJSON{}, err
	}
	out := investigationJSON{Alarm: a, From: in.From, To: in.To, Rise: res.Rise, RiseFound: res.RiseFound, RiseLocation: res.RiseLocation,
		Events: []eventJSON{}, Doors: []doorJSON{}, Unknown: append([]string{}, res.Unknown...), Runs: []runJSON{}, Series: []seriesJSON{},
		States: []stateJSON{}, Method: rankingNote, Caution: Caution}
	for i, e := range res.Events {
		ej := eventJSON{Rank: i + 1, Kind: string(e.Kind), Subjects: e.Subjects, Start: e.Start, LeadS: e.Lead.Seconds(),
			Deviation: e.Deviation, Weight: e.Weight, Plausible: e.Plausible, Score: e.Score, Evidence: e.Evidence}
		if !e.End.IsZero() {
			end := e.End
			ej.End = &end
		}
		out.Events = append(out.Events, ej)
	}
	for _, d := range res.Doors {
		dj := doorJSON{Sensor: d.Sensor, MinPa: d.MinPa, Count: len(d.Openings), Openings: []openingJSON{}}
		for _, o := range d.Openings {
			oj := openingJSON{Start: o.Start, DurationS: o.Duration(in.To).Seconds(), LowPa: o.LowPa}
			if !o.End.IsZero() {
				end := o.End
				oj.End = &end
			}
			dj.Openings = append(dj.Openings, oj)
		}
		out.Doors = append(out.Doors, dj)
	}
	if len(in.Environment) == 0 {
		out.Unknown = append(out.Unknown, "environment (temperature, humidity, airflow): no samples of this zone are stored, so they could not be judged")
	}
	out.Series = chartSeries(&in)
	for _, st := range in.States {
		out.States = append(out.States, stateJSON{Time: st.Time, From: st.From, To: st.To, By: st.By})
	}
	runs, err := s.store.Runs(a.Zone, time.Time{}, time.Time{})
	if err != nil {
		return out, err
	}
	for _, run := range runs {
		if len(investigate.AlarmRuns(exposureAlarm(a), s.now(), investigateRuns([]store.Run{run}))) > 0 {
			out.Runs = append(out.Runs, runObject(run))
		}
	}
	return out, nil
}

// investigationInput builds the input of an investigation from the store:
// the zone's locations at its sizes, the DP of its boundary, the
// neighbours on the cascade, its operating-state changes and its
// counters' health.
func (s *Server) investigationInput(ctx context.Context, a alerts.Alarm, before, after time.Duration) (investigate.Input, error) {
	z, ok := s.cfg.Zone(a.Zone)
	if !ok {
		return investigate.Input{}, fmt.Errorf("%w: alarm %s names zone %q, which the site no longer has", alerts.ErrNoAlarm, a.ID, a.Zone)
	}
	sizes := zoneSizes(z)
	in := investigate.Input{Zone: a.Zone, AlarmTime: a.Since, AlarmLocation: a.Location, From: a.Since.Add(-before), To: a.Since.Add(after)}
	if a.SizeUM != nil {
		in.SizeUM = *a.SizeUM
	} else if len(sizes) > 0 {
		in.SizeUM = sizes[0]
	}
	if now := s.now(); in.To.After(now) {
		in.To = now
	}
	rec, err := s.readZone(ctx, a.Zone, sizes, in.From, in.To, false)
	if err != nil {
		return in, err
	}
	in.Locations, in.Instruments = rec.Locations, rec.Instruments
	if in.Pressure, err = s.readPressure(ctx, a.Zone, in.From, in.To); err != nil {
		return in, err
	}
	for _, p := range s.boundary(a.Zone) {
		other, lower := p.Low, true
		if p.Low == a.Zone {
			other, lower = p.High, false
		}
		oz, ok := s.cfg.Zone(other)
		if !ok || len(oz.Locations) == 0 {
			continue
		}
		size := in.SizeUM
		if os := zoneSizes(oz); !slices.Contains(os, size) && len(os) > 0 {
			size = os[0]
		}
		nrec, err := s.readZone(ctx, other, []float64{size}, in.From, in.To, true)
		if err != nil {
			return in, err
		}
		for _, l := range nrec.Locations {
			in.Neighbours = append(in.Neighbours, investigate.NeighbourSeries{Zone: other, Location: l.Location, SizeUM: l.SizeUM, Lower: lower, Points: l.Points})
		}
	}
	prev := z.OperatingState
	if prev == "" {
		prev = alerts.InOperation
	}
	err = s.store.OperatingStateHistory(a.Zone, func(st store.OperatingState) error {
		if !st.Time.Before(in.From) && !st.Time.After(in.To) {
			in.States = append(in.States, investigate.StateChange{Time: st.Time, From: prev, To: st.State, By: st.By})
		}
		prev = st.State
		return ctx.Err()
	})
	return in, err
}

// chartSeries is what the investigation page draws.
func chartSeries(in *investigate.Input) []seriesJSON {
	var out []seriesJSON
	for _, l := range in.Locations {
		out = append(out, seriesJSON{Group: "location", Name: l.Location, SizeUM: l.SizeUM, Unit: "/m³", Points: points(l.Points)})
	}
	for _, p := range in.Pressure {
		m := p.MinPa
		out = append(out, seriesJSON{Group: "pressure", Name: p.Sensor + " (" + p.High + " → " + p.Low + ")", Unit: "Pa", MinPa: &m, Points: points(p.Points)})
	}
	for _, n := range in.Neighbours {
		out = append(out, seriesJSON{Group: "neighbour", Name: n.Zone + " · " + n.Location, SizeUM: n.SizeUM, Unit: "/m³", Points: points(n.Points)})
	}
	for _, i := range in.Instruments {
		out = append(out, seriesJSON{Group: "flow", Name: i.Counter + " at " + i.Location, Unit: "L/min", Points: points(i.Flow)})
	}
	return out
}
