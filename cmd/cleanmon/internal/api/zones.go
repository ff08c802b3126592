package api

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"sort"
	"strings"
	"time"

	"cleanmon/alerts"
	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/collector"
	"cleanmon/store"
)

// zoneJSON is the zone object of the API.
type zoneJSON struct {
	ID             string           `json:"id"`
	Name           string           `json:"name"`
	Class          *float64         `json:"class"`
	Grade          *string          `json:"grade"`
	Edition        *string          `json:"edition"`
	OperatingState string           `json:"operating_state"`
	StateChange    *stateChangeJSON `json:"operating_state_change"`
	// LimitsState is the operating state whose limits apply (in
	// maintenance, the state the zone ran in before).
	LimitsState string `json:"limits_state"`
	// CleanUpUntil is set while the clean-up period after a switch to
	// at-rest runs: until then the zone is judged by its previous limits.
	CleanUpUntil *time.Time `json:"clean_up_until"`
	State        string     `json:"state"`
	// Attention is the worst of State, the open alarms, the DP sensors on
	// the zone's boundary and its counters; the reasons say what.
	Attention        string              `json:"attention"`
	AttentionReasons []string            `json:"attention_reasons"`
	LimitsPerM3      map[string]*float64 `json:"limits_per_m3"`
	AlertPerM3       map[string]*float64 `json:"alert_levels_per_m3"`
	ActionPerM3      map[string]*float64 `json:"action_levels_per_m3"`
	Locations        []locationJSON      `json:"locations"`
	ActiveAlarms     []alerts.Alarm      `json:"active_alarms"`
	Sensors          []zoneSensorJSON    `json:"sensors"`
	Instruments      []instrumentJSON    `json:"instruments"`
	Window           string              `json:"window"`
	StaleAfter       string              `json:"stale_after"`
	Notes            []string            `json:"notes"`
	EvaluatedAt      time.Time           `json:"evaluated_at"`
}

type stateChangeJSON struct {
	By     string    `json:"by"`
	Reason string    `json:"reason"`
	Since  time.Time `json:"since"`
}

type locationJSON struct {
	ID                 string             `json:"id"`
	Name               string             `json:"name,omitempty"`
	Counter            string             `json:"counter"`
	ConcentrationPerM3 map[string]float64 `json:"concentration_per_m3"`
	Time               *time.Time         `json:"time"`
	Status             string             `json:"status,omitempty"`
	MeanPerM3          map[string]float64 `json:"mean_per_m3"`
	Samples            int                `json:"samples"`
	Fresh              bool               `json:"fresh"`
	// Trusted is false while the newest reading cannot be trusted (over
	// the counter's range, a fault, a flow off nominal); Untrusted says
	// why, and the location is unknown until a trusted reading follows.
	Trusted   bool   `json:"trusted"`
	Untrusted string `json:"untrusted,omitempty"`
	State     string `json:"state"`
}

// zoneSensorJSON is a DP sensor on a zone's boundary as the judge sees it:
// no number while it is silent.
type zoneSensorJSON struct {
	ID           string     `json:"id"`
	High         string     `json:"high"`
	Low          string     `json:"low"`
	MinPa        float64    `json:"min_pa"`
	Pa           *float64   `json:"pa"`
	Time         *time.Time `json:"time"`
	Status       string     `json:"status"`
	DoorOpenings uint64     `json:"door_openings"`
}

// instrumentJSON is a counter of the zone as the judge sees it.
type instrumentJSON struct {
	Counter   string     `json:"counter"`
	Location  string     `json:"location"`
	Time      *time.Time `json:"time"`
	Status    string     `json:"status"`
	Untrusted string     `json:"untrusted,omitempty"`
}

func optTime(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	u := t.UTC()
	return &u
}

// sensorView is a DP sensor of the judge in JSON.
func sensorView(v alerts.SensorView) zoneSensorJSON {
	o := zoneSensorJSON{ID: v.Sensor, High: v.High, Low: v.Low, MinPa: v.MinPa, Time: optTime(v.Time), Status: v.Status, DoorOpenings: v.DoorOpenings}
	if v.Status != alerts.SensorSilent {
		pa := v.Pa
		o.Pa = &pa
	}
	return o
}

func zoneObject(r alerts.ZoneReport) zoneJSON {
	v := r.ZoneView
	z := zoneJSON{
		ID: v.ID, Name: v.Name, Class: v.Class, OperatingState: v.OperatingState,
		LimitsState: v.LimitsState, State: string(v.State), CleanUpUntil: optTime(v.CleanUpUntil),
		Attention: string(r.Attention), AttentionReasons: append([]string{}, r.AttentionReasons...),
		Sensors: []zoneSensorJSON{}, Instruments: []instrumentJSON{},
		LimitsPerM3: map[string]*float64{}, AlertPerM3: map[string]*float64{}, ActionPerM3: map[string]*float64{},
		Locations: []locationJSON{}, ActiveAlarms: []alerts.Alarm{},
		Window: httpx.FormatDuration(v.Window), StaleAfter: httpx.FormatDuration(v.StaleAfter),
		Notes: v.Notes, EvaluatedAt: v.At.UTC(),
	}
	if z.Notes == nil {
		z.Notes = []string{}
	}
	if v.Grade != "" {
		g := v.Grade
		z.Grade = &g
	}
	if v.Edition != "" {
		e := v.Edition
		z.Edition = &e
	}
	if !v.StateSince.IsZero() {
		z.StateChange = &stateChangeJSON{By: v.StateBy, Reason: v.StateReason, Since: v.StateSince.UTC()}
	}
	for _, l := range v.Limits {
		k := classify.FormatSize(l.SizeUM)
		z.LimitsPerM3[k], z.AlertPerM3[k], z.ActionPerM3[k] = l.Limit, l.Alert, l.Action
	}
	for _, l := range v.Locations {
		lj := locationJSON{
			ID: l.ID, Name: l.Name, Counter: l.Counter, ConcentrationPerM3: l.PerM3, Status: l.Status,
			MeanPerM3: l.MeanPerM3, Samples: l.Samples, Fresh: l.Fresh, Trusted: l.Trusted, Untrusted: l.Untrusted, State: string(l.State),
		}
		if !l.Time.IsZero() {
			t := l.Time.UTC()
			lj.Time = &t
		}
		z.Locations = append(z.Locations, lj)
	}
	for _, sv := range r.Sensors {
		z.Sensors = append(z.Sensors, sensorView(sv))
	}
	for _, c := range r.Instruments {
		z.Instruments = append(z.Instruments, instrumentJSON{Counter: c.Counter, Location: c.Location, Time: optTime(c.Time), Status: c.Status, Untrusted: c.Untrusted})
	}
	// Every open alarm of the zone, latched ones included, newest first.
	z.ActiveAlarms = append(z.ActiveAlarms, r.ActiveAlarms...)
	sort.SliceStable(z.ActiveAlarms, func(i, j int) bool { return z.ActiveAlarms[i].Since.After(z.ActiveAlarms[j].Since) })
	return z
}

// listZones is GET /api/v1/zones.
func (s *Server) listZones(w http.ResponseWriter, r *http.Request) {
	views := s.zones.Zones()
	out := make([]zoneJSON, len(views))
	for i, v := range views {
		out[i] = zoneObject(v)
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

// getZone is GET /api/v1/zones/{zone}.
func (s *Server) getZone(w http.ResponseWriter, r *http.Request) {
	v, ok := s.zones.Zone(zoneOf(r).ID)
	if !ok {
		httpx.WriteError(w, http.StatusNotFound, fmt.Sprintf("unknown zone %q", zoneOf(r).ID))
		return
	}
	httpx.WriteJSON(w, http.StatusOK, zoneObject(v))
}

// stateRequest is the body of PUT /api/v1/zones/{zone}/state.
type stateRequest struct {
	State     string            `json:"state"`
	By        string            `json:"by"`
	Reason    string            `json:"reason"`
	Signature *signatureRequest `json:"signature"`
}

// maxStateBody bounds the body of a state change.
const maxStateBody = 64 << 10

// putZoneState is PUT /api/v1/zones/{zone}/state: the change is on record
// in the store before the zone shows it.
func (s *Server) putZoneState(w http.ResponseWriter, r *http.Request) {
	id := zoneOf(r).ID
	var req stateRequest
	if !decodeBody(w, r, maxStateBody, &req, func() map[string]string {
		return map[string]string{"state": req.State, "by": req.By, "reason": req.Reason}
	}) {
		return
	}
	if _, err := alerts.ParseOperatingState(req.State); err != nil {
		fieldAnswer(w, "state", collector.RuleEnum, "%q: want at-rest, in-operation or maintenance", req.State)
		return
	}
	now := s.now().UTC()
	// A person signs the change; a token is recorded by its name, the
	// free-text by kept as a remark.
	content, _ := json.Marshal(map[string]string{"zone": id, "state": req.State, "reason": req.Reason, "time": now.Format(time.RFC3339Nano)})
	act, ok := s.signedActor(w, r, req.By, req.Signature, people.MeaningPerformed, true, "operating state "+id+" "+req.State+" "+now.Format(time.RFC3339), content)
	if !ok {
		return
	}
	if strings.TrimSpace(act.who) == "" {
		fieldAnswer(w, "by", collector.RuleRequired, "missing: say who makes the change (it is kept for the audit trail)")
		return
	}
	ch := alerts.OperatingChange{Zone: id, State: req.State, By: act.who, Reason: req.Reason, Time: now}
	v, err := s.zones.SetOperatingState(r.Context(), ch, func(ch alerts.OperatingChange) error {
		return s.store.SetOperatingState(r.Context(), store.OperatingState{Zone: ch.Zone, State: ch.State, By: ch.By, Reason: ch.Reason, Time: ch.Time})
	})
	if err != nil {
		var re *store.RecordError
		switch {
		case errors.As(err, &re):
			fieldAnswer(w, strings.ToLower(re.Field), collector.RuleType, "%s", re.Reason)
		case errors.Is(err, alerts.ErrOperatingState):
			httpx.WriteError(w, http.StatusBadRequest, err.Error())
		default:
			s.log.Error("operating state not recorded", "zone", id, "err", err)
			Errors.Write(w, "operating state not recorded: ", err)
		}
		return
	}
	s.log.Info("operating state changed", "zone", id, "state", req.State, "by", req.By, "reason", req.Reason, "token", httpx.IdentityOf(r).Token)
	httpx.WriteJSON(w, http.StatusOK, zoneObject(v))
}
