package api

import (
	"context"
	"errors"
	"fmt"
	"mime"
	"net/http"
	"net/url"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/alerts/investigate"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/report"
	"cleanmon/collector"
	"cleanmon/store"
)

// RunStore records production runs (batches, wafer lots) and reads them
// back; every change is audited by the store in its own transaction.
type RunStore interface {
	CreateRuns(ctx context.Context, runs []store.Run, by string) error
	CloseRun(ctx context.Context, id string, end time.Time, by string) (store.Run, error)
	Run(id string) (store.Run, error)
	Runs(zone string, from, to time.Time) ([]store.Run, error)
}

// StateHistory reads a zone's operating-state changes, for the
// investigation of an alarm.
type StateHistory interface {
	OperatingStateHistory(zone string, fn func(store.OperatingState) error) error
}

// maxRunsBody bounds a request of runs: a shift's or a month's import is
// a few hundred lines.
const maxRunsBody = 1 << 20

// runJSON is a production run as the API answers it; End is null while
// the run goes on. Declared once, in report, which renders runs in the
// exposure report.
type runJSON = report.Run

func runObject(r store.Run) runJSON {
	out := runJSON{ID: r.ID, Zone: r.Zone, Start: r.Start, Open: r.Open(), Product: r.Product, Lot: r.Lot,
		RecordedBy: r.By, Recorded: r.Recorded}
	if !r.Open() {
		end := r.End
		out.End = &end
	}
	if out.RecordedBy == "" {
		out.RecordedBy = store.AuditActorSystem
	}
	return out
}

// runInput is one run in a request body. Times are strings so that a bad
// one is refused naming its field and element.
type runInput struct {
	ID      string `json:"id"`
	Zone    string `json:"zone"`
	Start   string `json:"start"`
	End     string `json:"end"`
	Product string `json:"product"`
	Lot     string `json:"lot"`
}

// runFields maps the store's field names to the API's.
var runFields = map[string]string{"ID": "id", "Zone": "zone", "Start": "start", "End": "end", "Product": "product", "Lot": "lot", "By": "recorded_by"}

// runsError is the 400 of the runs routes: the element (index), the
// field, and for CSV the line.
type runsError struct {
	Error string `json:"error"`
	Index *int   `json:"index,omitempty"`
	Field string `json:"field,omitempty"`
	Line  int    `json:"line,omitempty"`
}

func writeRunError(w http.ResponseWriter, index int, field, msg string) {
	httpx.WriteJSON(w, http.StatusBadRequest, runsError{Error: fmt.Sprintf("run %d: %s: %s", index, field, msg), Index: &index, Field: field})
}

// checkRunInput turns one element into a store run, or names its first
// problem.
func (s *Server) checkRunInput(in runInput) (run store.Run, field, rule, msg string) {
	r := store.Run{ID: in.ID, Zone: in.Zone, Product: in.Product, Lot: in.Lot}
	for _, f := range []struct{ name, v string }{{"id", in.ID}, {"zone", in.Zone}, {"start", in.Start}, {"product", in.Product}, {"lot", in.Lot}} {
		if f.v == "" && (f.name == "id" || f.name == "zone" || f.name == "start") {
			return r, f.name, collector.RuleRequired, "missing"
		}
		if ie := collector.CheckText(0, f.name, f.v, 200); ie != nil {
			return r, f.name, collector.RuleText, ie.Msg
		}
	}
	if _, ok := s.cfg.Zone(in.Zone); !ok {
		return r, "zone", collector.RuleUnknownID, fmt.Sprintf("%q is not a zone of the site", in.Zone)
	}
	var err error
	if r.Start, err = time.Parse(time.RFC3339Nano, in.Start); err != nil {
		return r, "start", collector.RuleTimeFormat, fmt.Sprintf("%q is not an RFC 3339 time", in.Start)
	}
	if in.End != "" {
		if r.End, err = time.Parse(time.RFC3339Nano, in.End); err != nil {
			return r, "end", collector.RuleTimeFormat, fmt.Sprintf("%q is not an RFC 3339 time", in.End)
		}
		if !r.End.After(r.Start) {
			return r, "end", collector.RuleType, fmt.Sprintf("%s is not after start %s", in.End, in.Start)
		}
	}
	if r.Start.After(s.now().Add(24 * time.Hour)) {
		return r, "start", collector.RuleTimeFuture, "more than a day ahead of the daemon's clock"
	}
	return r, "", "", ""
}

// postRuns is POST /api/v1/runs: a JSON object or array of runs, or a CSV
// file (Content-Type text/csv) with the columns id, zone, start, end,
// product, lot. All or nothing: the first bad run is a 400 naming its
// index (and line for CSV) and field, and nothing is stored; an ID already
// recorded is a 409. The runs are recorded as the request's token (an
// operator, or the ingest token of an execution system).
func (s *Server) postRuns(w http.ResponseWriter, r *http.Request) {
	body := http.MaxBytesReader(w, r.Body, maxRunsBody)
	ct, _, _ := mime.ParseMediaType(r.Header.Get("Content-Type"))
	var runs []store.Run
	switch ct {
	case "text/csv":
		got, err := investigate.ReadRunsCSV(body, "body")
		var ce *investigate.CSVError
		if errors.As(err, &ce) {
			httpx.WriteJSON(w, http.StatusBadRequest, runsError{Error: ce.Error(), Field: ce.Field, Line: ce.Line})
			return
		} else if err != nil {
			Errors.Write(w, "reading the runs: ", err)
			return
		}
		for i, g := range got {
			in := runInput{ID: g.ID, Zone: g.Zone, Start: g.Start.Format(time.RFC3339Nano), Product: g.Product, Lot: g.Lot}
			if !g.End.IsZero() {
				in.End = g.End.Format(time.RFC3339Nano)
			}
			run, field, _, msg := s.checkRunInput(in)
			if field != "" {
				writeRunError(w, i, field, msg)
				return
			}
			runs = append(runs, run)
		}
	case "", "application/json":
		_, err := collector.DecodeElements(body, false, maxRunsBody, func(i int, in *runInput) *collector.InputError {
			run, field, rule, msg := s.checkRunInput(*in)
			if field != "" {
				return collector.NewInputError(i, field, rule, "%s", msg)
			}
			runs = append(runs, run)
			return nil
		})
		var ie *collector.InputError
		if errors.As(err, &ie) {
			httpx.WriteJSON(w, http.StatusBadRequest, runsError{Error: ie.Error(), Index: &ie.Index, Field: ie.Field})
			return
		} else if err != nil {
			Errors.Write(w, "reading the runs: ", err)
			return
		}
	default:
		httpx.WriteError(w, http.StatusUnsupportedMediaType, fmt.Sprintf("Content-Type %q: send application/json or text/csv", ct))
		return
	}
	if len(runs) == 0 {
		httpx.WriteFieldError(w, "body", "no run in the request")
		return
	}
	by := identityOf(r, "")
	if err := s.store.CreateRuns(r.Context(), runs, by); err != nil {
		var re *store.RecordError
		if errors.As(err, &re) {
			status := http.StatusBadRequest
			if errors.Is(err, store.ErrRunExists) {
				status = http.StatusConflict
			}
			i := re.Index
			httpx.WriteJSON(w, status, runsError{Error: fmt.Sprintf("run %d: %s: %s", i, runFields[re.Field], re.Reason), Index: &i, Field: runFields[re.Field]})
			return
		}
		Errors.Write(w, "runs not recorded: ", err)
		return
	}
	s.log.Info("runs recorded", "runs", len(runs), "by", by)
	out := make([]runJSON, len(runs))
	for i, run := range runs {
		run.By = by
		if stored, err := s.store.Run(run.ID); err == nil {
			run = stored
		}
		out[i] = runObject(run)
	}
	httpx.WriteJSON(w, http.StatusOK, map[string]any{"recorded": len(out), "runs": out})
}

// closeRequest is the body of POST /api/v1/runs/{id}/close; an empty end
// is now.
type closeRequest struct {
	End string `json:"end"`
}

// closeRun is POST /api/v1/runs/{id}/close: the open run gets its end.
func (s *Server) closeRun(w http.ResponseWriter, r *http.Request) {
	var req closeRequest
	if r.ContentLength != 0 && !decodeBody(w, r, 4<<10, &req, func() map[string]string { return map[string]string{"end": req.End} }) {
		return
	}
	end := s.now().UTC()
	if req.End != "" {
		t, err := time.Parse(time.RFC3339Nano, req.End)
		if err != nil {
			httpx.WriteFieldError(w, "end", fmt.Sprintf("%q is not an RFC 3339 time", req.End))
			return
		}
		end = t
	}
	run, err := s.store.CloseRun(r.Context(), pathID(r), end, identityOf(r, ""))
	var re *store.RecordError
	switch {
	case errors.As(err, &re):
		httpx.WriteFieldError(w, runFields[re.Field], re.Reason)
	case err != nil:
		Errors.Write(w, "run not closed: ", err)
	default:
		httpx.WriteJSON(w, http.StatusOK, runObject(run))
	}
}

// pathID is {id} of the route, unescaped (alarm ids hold colons, which a
// client may send as %3A).
func pathID(r *http.Request) string {
	id := chi.URLParam(r, "id")
	if u, err := url.PathUnescape(id); err == nil {
		return u
	}
	return id
}

// listRuns is GET /api/v1/runs?zone=&from=&to=: the runs that overlap
// [from, to] (edges included; either end may be left out), oldest first.
func (s *Server) listRuns(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	zone := q.Get("zone")
	if _, ok := s.cfg.Zone(zone); zone != "" && !ok {
		httpx.WriteError(w, http.StatusNotFound, fmt.Sprintf("unknown zone %q", zone))
		return
	}
	var from, to time.Time
	for _, p := range []struct {
		name string
		dst  *time.Time
	}{{"from", &from}, {"to", &to}} {
		if v := q.Get(p.name); v != "" {
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				httpx.WriteFieldError(w, p.name, fmt.Sprintf("%q is not an RFC 3339 time", v))
				return
			}
			*p.dst = t
		}
	}
	runs, err := s.store.Runs(zone, from, to)
	if err != nil {
		Errors.Write(w, "reading the runs: ", err)
		return
	}
	out := make([]runJSON, len(runs))
	for i, run := range runs {
		out[i] = runObject(run)
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

// getRun is GET /api/v1/runs/{id}.
func (s *Server) getRun(w http.ResponseWriter, r *http.Request) {
	run, err := s.store.Run(pathID(r))
	if err != nil {
		Errors.Write(w, "", err)
		return
	}
	httpx.WriteJSON(w, http.StatusOK, runObject(run))
}

// alarmRuns is GET /api/v1/alarms/{id}/runs: the runs of the alarm's zone
// that it overlapped, edges included, for the impact assessment.
func (s *Server) alarmRuns(w http.ResponseWriter, r *http.Request) {
	a, err := s.findAlarm(pathID(r))
	if err != nil {
		Errors.Write(w, "", err)
		return
	}
	runs, err := s.store.Runs(a.Zone, time.Time{}, time.Time{})
	if err != nil {
		Errors.Write(w, "reading the runs: ", err)
		return
	}
	now := s.now()
	ia := exposureAlarm(a)
	over := investigate.AlarmRuns(ia, now, investigateRuns(runs))
	out := make([]runJSON, 0, len(over))
	byID := map[string]store.Run{}
	for _, run := range runs {
		byID[run.ID] = run
	}
	for _, o := range over {
		out = append(out, runObject(byID[o.ID]))
	}
	httpx.WriteJSON(w, http.StatusOK, map[string]any{"alarm": a.ID, "zone": a.Zone, "runs": out})
}

func investigateRuns(rs []store.Run) []investigate.Run {
	out := make([]investigate.Run, len(rs))
	for i, r := range rs {
		out[i] = investigate.Run{ID: r.ID, Zone: r.Zone, Start: r.Start, End: r.End, Product: r.Product, Lot: r.Lot}
	}
	return out
}

// registerRecords mounts the routes of production runs, the
// investigation of an alarm, the exposure of a run and a zone's month.
func (s *Server) registerRecords(r chi.Router, read, short, long func(http.Handler) http.Handler) {
	record := s.auth.Require(access.PermRecordRuns)
	r.With(short, record).Post("/runs", s.postRuns)
	r.With(short, record).Post("/runs/{id}/close", s.closeRun)
	r.With(short, read).Get("/runs", s.listRuns)
	r.With(short, read).Get("/runs/{id}", s.getRun)
	r.With(long, read).Get("/runs/{id}/exposure", s.runExposure)
	r.With(short, read).Get("/alarms/{id}/runs", s.alarmRuns)
	r.With(long, read).Get("/alarms/{id}/investigation", s.alarmInvestigation)
	r.With(long, read, s.zone).Get("/zones/{zone}/trend", s.zoneTrend)
}
