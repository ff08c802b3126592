package api

import (
	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/collector"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"sort"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"
)

// listAlarms is GET /api/v1/alarms?state=active|all[&since=RFC3339]:
// active are the alarms not cleared (from the engine); all adds what the
// journal holds since `since` (default the last 7 days).
func (s *Server) listAlarms(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	state := q.Get("state")
	switch state {
	case "", "active", "all":
	default:
		httpx.WriteFieldError(w, "state", fmt.Sprintf("%q: want active or all", state))
		return
	}
	out := []alerts.Alarm{}
	if state != "all" {
		out = append(out, s.alarms.Active()...)
	} else {
		since := s.now().Add(-7 * 24 * time.Hour)
		if v := q.Get("since"); v != "" {
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				httpx.WriteFieldError(w, "since", fmt.Sprintf("%q is not an RFC 3339 time", v))
				return
			}
			since = t
		}
		seen := map[string]bool{}
		for _, a := range s.alarms.Active() {
			out = append(out, a)
			seen[a.ID] = true
		}
		err := s.store.ScanAlarms(since, func(id string, _ time.Time, snap []byte, _ bool) error {
			if seen[id] {
				return nil
			}
			var a alerts.Alarm
			if err := json.Unmarshal(snap, &a); err != nil {
				return fmt.Errorf("alarm %s: %w", id, err)
			}
			seen[id] = true
			out = append(out, a)
			return nil
		})
		if err != nil {
			Errors.Write(w, "reading the alarm journal: ", err)
			return
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Since.After(out[j].Since) })
	httpx.WriteJSON(w, http.StatusOK, s.withSignatures(out))
}

// ackRequest is the body of POST /api/v1/alarms/{id}/ack.
type ackRequest struct {
	By        string            `json:"by"`
	Comment   string            `json:"comment"`
	Signature *signatureRequest `json:"signature"`
}

const maxAckBody = 8 << 10

// ackAlarm is POST /api/v1/alarms/{id}/ack (operator). The alarm is
// attributed to the signed-in person, who signs an action alarm's
// acknowledgement (password again, meaning "acknowledged"), or to the
// token that made the request, the free-text `by` kept beside it as a
// remark, so "who" cannot be typed in by anyone.
func (s *Server) ackAlarm(w http.ResponseWriter, r *http.Request) {
	var req ackRequest
	if !decodeBody(w, r, maxAckBody, &req, func() map[string]string {
		return map[string]string{"by": req.By, "comment": req.Comment}
	}) {
		return
	}
	id := chi.URLParam(r, "id")
	if u, err := url.PathUnescape(id); err == nil {
		id = u // an id sent with %3A for its colons names the same alarm
	}
	open, content, found := s.activeAlarm(id)
	if !found {
		// Nothing open to sign: the acknowledgement below is refused
		// (unknown or cleared alarm) and says why.
		req.Signature = nil
	}
	act, ok := s.signedActor(w, r, req.By, req.Signature, people.MeaningAcknowledged, found && open.Level == "action", alarmSubject(id), content)
	if !ok {
		return
	}
	who := act.who
	if strings.TrimSpace(who) == "" {
		fieldAnswer(w, "by", collector.RuleRequired, "missing: say who acknowledges")
		return
	}
	a, err := s.alarms.Ack(r.Context(), id, who, req.Comment)
	switch {
	case err == nil:
		s.log.Info("alarm acknowledged", "alarm", id, "by", who, "token", httpx.IdentityOf(r).Token)
		httpx.WriteJSON(w, http.StatusOK, s.withSignatures([]alerts.Alarm{a})[0])
	case errors.Is(err, alerts.ErrNoAlarm):
		httpx.WriteError(w, http.StatusNotFound, err.Error())
	case errors.Is(err, alerts.ErrAlreadyAcked), errors.Is(err, alerts.ErrAlarmCleared), errors.Is(err, alerts.ErrAlarmDelayed):
		httpx.WriteError(w, http.StatusConflict, err.Error())
	case errors.Is(err, alerts.ErrCommentRequired):
		httpx.WriteFieldError(w, "comment", "missing: an action alarm is acknowledged with what was found or done")
	case errors.Is(err, alerts.ErrAck):
		httpx.WriteError(w, http.StatusBadRequest, err.Error())
	default:
		s.log.Error("acknowledgement not recorded", "alarm", id, "err", err)
		Errors.Write(w, "acknowledgement not recorded: ", err)
	}
}

// identityOf is who a change is attributed to: the token's name, with the
// request's free-text name as a remark when it adds something; a person
// signed in on the pages as "Full Name (name)"; with neither (the open
// demo) the free text alone.
func identityOf(r *http.Request, remark string) string {
	remark = strings.TrimSpace(remark)
	id := httpx.IdentityOf(r)
	tok := id.Token
	switch {
	case tok == "" && id.User != "":
		return id.FullName + " (" + id.User + ")"
	case tok == "":
		return remark
	case remark == "" || remark == tok:
		return tok
	}
	return tok + " (" + remark + ")"
}
