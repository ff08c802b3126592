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
	LimitsState  string              `json:"limits_state"`
	State        string              `json:"state"`
	LimitsPerM3  map[string]*float64 `json:"limits_per_m3"`
	AlertPerM3   map[string]*float64 `json:"alert_levels_per_m3"`
	ActionPerM3  map[string]*float64 `json:"action_levels_per_m3"`
	Locations    []locationJSON      `json:"locations"`
	ActiveAlarms []alerts.Alarm      `json:"active_alarms"`
	Window       string              `json:"window"`
	StaleAfter   string              `json:"stale_after"`
	Notes        []string            `json:"notes"`
	EvaluatedAt  time.Time           `json:"evaluated_at"`
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
	State              string             `json:"state"`
}

func zoneObject(v alerts.ZoneView) zoneJSON {
	z := zoneJSON{
		ID: v.ID, Name: v.Name, Class: v.Class, OperatingState: v.OperatingState,
		LimitsState: v.LimitsState, State: string(v.State),
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
			MeanPerM3: l.MeanPerM3, Samples: l.Samples, Fresh: l.Fresh, State: string(l.State),
		}
		if !l.Time.IsZero() {
			t := l.Time.UTC()
			lj.Time = &t
		}
		z.Locations = append(z.Locations, lj)
	}
	return z
}

// zoneObject is the zone object with its open alarms.
func (s *Server) zoneObject(v alerts.ZoneView) zoneJSON {
	z := zoneObject(v)
	z.ActiveAlarms = zoneAlarms(s.alarms.Active(), v.ID)
	return z
}

// listZones is GET /api/v1/zones.
func (s *Server) listZones(w http.ResponseWriter, r *http.Request) {
	views := s.zones.Zones()
	out := make([]zoneJSON, len(views))
	for i, v := range views {
		out[i] = s.zoneObject(v)
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
	httpx.WriteJSON(w, http.StatusOK, s.zoneObject(v))
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
	v, err := s.zones.SetOperatingState(ch, func(ch alerts.OperatingChange) error {
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
	// The change is on record; the rules follow it (maintenance silences
	// excursions). A failure here is the rules' journal, not the change,
	// so it is logged rather than undone.
	if err := s.alarms.SetOperatingState(r.Context(), id, req.State); err != nil {
		s.log.Error("alarm rules did not take the operating state", "zone", id, "err", err)
	}
	s.log.Info("operating state changed", "zone", id, "state", req.State, "by", req.By, "reason", req.Reason, "token", httpx.IdentityOf(r).Token)
	httpx.WriteJSON(w, http.StatusOK, s.zoneObject(v))
}

// zoneAlarms are the open alarms of one zone, newest first.
func zoneAlarms(active []alerts.Alarm, zone string) []alerts.Alarm {
	out := []alerts.Alarm{}
	for _, a := range active {
		if a.Zone == zone {
			out = append(out, a)
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Since.After(out[j].Since) })
	return out
}
