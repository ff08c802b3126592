package api

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"cleanmon/alerts"
	"cleanmon/collector"
	"cleanmon/store"

	"github.com/go-chi/chi/v5"
)

// Every refusal of the ingest path reaches the client with its status and
// the element at fault, through the one error table.
func TestIngestAnswers(t *testing.T) {
	cases := []struct {
		name   string
		err    error
		status int
		index  any
		field  any
	}{
		{"accepted", nil, http.StatusOK, nil, nil},
		{"bad reading", &collector.InputError{Index: 3, Field: "volume_l", Msg: "must be > 0"}, http.StatusBadRequest, 3.0, "volume_l"},
		{"content type", collector.ErrContentType, http.StatusUnsupportedMediaType, nil, nil},
		{"too large", fmt.Errorf("%w: the limit is 8 bytes", collector.ErrTooLarge), http.StatusRequestEntityTooLarge, nil, nil},
		{"store failed", fmt.Errorf("%w: disk full", collector.ErrCommit), http.StatusServiceUnavailable, nil, nil},
	}
	for _, c := range cases {
		for _, path := range []string{"/api/v1/readings", "/api/v1/pressure"} {
			t.Run(c.name+" "+path, func(t *testing.T) {
				var gotKind string
				h := newTestAPI(t, Options{Ingest: fakeIngest{post: func(kind, _ string, body io.Reader) (collector.Result, error) {
					gotKind = kind
					if c.err != nil {
						return collector.Result{}, c.err
					}
					return collector.Result{Accepted: 1}, nil
				}}})
				status, body := call(t, h, "POST", path, "application/json", `{}`)
				if status != c.status {
					t.Fatalf("status %d, want %d (%v)", status, c.status, body)
				}
				if want := path[len("/api/v1/"):]; gotKind != want {
					t.Errorf("routed to %s, want %s", gotKind, want)
				}
				if c.err == nil {
					if body["accepted"] != 1.0 {
						t.Errorf("answer %v", body)
					}
					return
				}
				if body["error"] == "" || body["index"] != c.index || body["field"] != c.field {
					t.Errorf("answer %v, want index %v field %v", body, c.index, c.field)
				}
			})
		}
	}
}

// An unknown {zone} is refused once, by the middleware, on every zone
// route; the store is never asked.
func TestUnknownZoneEveryRoute(t *testing.T) {
	asked := false
	h := newTestAPI(t, Options{Store: fakeStore{
		scanReadings: func(string, time.Time, time.Time, func(store.Reading) error) error { asked = true; return nil },
		setState:     func(context.Context, store.OperatingState) error { asked = true; return nil },
	}})
	for _, r := range []struct{ method, path, body string }{
		{"GET", "/api/v1/zones/lab", ""},
		{"GET", "/api/v1/zones/lab/readings", ""},
		{"GET", "/api/v1/zones/lab/classification", ""},
		{"GET", "/api/v1/zones/lab/levels", ""},
		{"PUT", "/api/v1/zones/lab/state", `{"state":"at-rest","by":"j.marsh"}`},
	} {
		status, body := call(t, h, r.method, r.path, "application/json", r.body)
		if status != http.StatusNotFound || body["error"] != `unknown zone "lab"` {
			t.Errorf("%s %s: %d %v", r.method, r.path, status, body)
		}
	}
	if asked {
		t.Error("the store was asked about an unknown zone")
	}
	// A known zone passes the middleware and reaches the handler.
	if status, body := call(t, h, "GET", "/api/v1/zones/hood/readings?location=nowhere", "", ""); status != http.StatusBadRequest || body["field"] != "location" {
		t.Errorf("known zone, bad location: %d %v", status, body)
	}
}

// An operating-state change is on record in the store before the zone
// shows it; a store that fails leaves the zone as it was and answers 503.
func TestPutZoneStateRecordsFirst(t *testing.T) {
	for _, c := range []struct {
		name   string
		err    error
		status int
	}{
		{"recorded", nil, http.StatusOK},
		{"store failed", errors.New("disk full"), http.StatusServiceUnavailable},
		{"store refused", store.ErrInvalid, http.StatusBadRequest},
	} {
		t.Run(c.name, func(t *testing.T) {
			var recorded []store.OperatingState
			applied := false
			h := newTestAPI(t, Options{
				Store: fakeStore{setState: func(_ context.Context, st store.OperatingState) error {
					recorded = append(recorded, st)
					return c.err
				}},
				Zones: fakeZones{setState: func(ch alerts.OperatingChange, persist func(alerts.OperatingChange) error) (alerts.ZoneReport, error) {
					if err := persist(ch); err != nil {
						return alerts.ZoneReport{}, err
					}
					applied = true
					return alerts.ZoneReport{ZoneView: alerts.ZoneView{ID: ch.Zone, OperatingState: ch.State}}, nil
				}},
			})
			status, body := call(t, h, "PUT", "/api/v1/zones/hood/state", "application/json", `{"state":"in-operation","by":"j.marsh","reason":"shift start"}`)
			if status != c.status {
				t.Fatalf("status %d, want %d: %v", status, c.status, body)
			}
			if len(recorded) != 1 || recorded[0].Zone != "hood" || recorded[0].State != "in-operation" || recorded[0].By != "j.marsh" || !recorded[0].Time.Equal(testNow) {
				t.Errorf("recorded %+v", recorded)
			}
			if applied != (c.err == nil) {
				t.Errorf("applied %v with store error %v", applied, c.err)
			}
		})
	}
}

// Acknowledgement refusals of the judge map to their statuses through the
// table: unknown 404, already acknowledged or cleared 409, bad 400.
func TestAckAnswers(t *testing.T) {
	for _, c := range []struct {
		err    error
		status int
	}{
		{nil, http.StatusOK},
		{alerts.ErrNoAlarm, http.StatusNotFound},
		{alerts.ErrAlreadyAcked, http.StatusConflict},
		{alerts.ErrAlarmCleared, http.StatusConflict},
		{alerts.ErrAlarmDelayed, http.StatusConflict},
		{alerts.ErrAck, http.StatusBadRequest},
		{fmt.Errorf("%w: %w", alerts.ErrAck, alerts.ErrCommentRequired), http.StatusBadRequest},
		{errors.New("journal down"), http.StatusServiceUnavailable},
	} {
		var gotID, gotBy string
		h := newTestAPI(t, Options{Alarms: fakeAlarms{ack: func(id, by, _ string) (alerts.Alarm, error) {
			gotID, gotBy = id, by
			return alerts.Alarm{ID: id}, c.err
		}}})
		status, body := call(t, h, "POST", "/api/v1/alarms/hood%3Aexcursion/ack", "application/json", `{"by":"j.marsh","comment":"checked"}`)
		if status != c.status {
			t.Errorf("%v: status %d, want %d: %v", c.err, status, c.status, body)
		}
		if gotID != "hood:excursion" || gotBy != "j.marsh" {
			t.Errorf("%v: ack of %q by %q", c.err, gotID, gotBy)
		}
		// The refusal of an action alarm's acknowledgement without a
		// comment names the field to fill in.
		if errors.Is(c.err, alerts.ErrCommentRequired) && body["field"] != "comment" {
			t.Errorf("%v: field %v, want comment", c.err, body["field"])
		}
	}
}

// readyz shows a failing notifier without turning unready; healthz always
// answers.
func TestReadyz(t *testing.T) {
	h := newTestAPI(t, Options{Alarms: fakeAlarms{notifiers: func() []alerts.NotifierHealth {
		return []alerts.NotifierHealth{{Notifier: "webhook", Up: false, ConsecutiveFailures: 3}}
	}}})
	if status, body := call(t, h, "GET", "/healthz", "", ""); status != http.StatusOK || body["status"] != "ok" {
		t.Errorf("healthz %d %v", status, body)
	}
	status, body := call(t, h, "GET", "/readyz", "", "")
	if status != http.StatusOK || body["status"] != "ready, notifier failing" {
		t.Errorf("readyz %d %v", status, body)
	}
}

// While writes are refused or failing the daemon is not ready, and says
// why; when they succeed again it is.
func TestReadyzWhileWritesFail(t *testing.T) {
	s := newTestServer(t, Options{})
	r := chi.NewRouter()
	s.Register(r)
	s.SetReady(true)
	s.SetWriteProblem("the disk is full")
	status, body := call(t, r, "GET", "/readyz", "", "")
	if status != http.StatusServiceUnavailable || !strings.Contains(fmt.Sprint(body["error"]), "the disk is full") {
		t.Errorf("readyz with a full disk: %d %v", status, body)
	}
	s.SetWriteProblem("")
	if status, body := call(t, r, "GET", "/readyz", "", ""); status != http.StatusOK {
		t.Errorf("readyz after recovery: %d %v", status, body)
	}
}

// A zone without a class or grade cannot be certified, and the pages get
// the same answer, byte for byte, as the API route.
func TestCertifyStoredMatchesRoute(t *testing.T) {
	for _, zone := range []alerts.ZoneReport{{ZoneView: alerts.ZoneView{ID: "hood"}}} {
		s := newTestServer(t, Options{Zones: fakeZones{zone: func(string) (alerts.ZoneReport, bool) { return zone, true }}})
		status, body, rep := s.CertifyStored(context.Background(), "hood", "2026-03-01T00:00:00Z", "2026-03-02T00:00:00Z")
		if status != http.StatusBadRequest || rep != nil || !strings.Contains(string(body), "unclassified") {
			t.Errorf("CertifyStored: %d %s %v", status, body, rep)
		}
		r := chi.NewRouter()
		s.Register(r)
		req := httptest.NewRequest("GET", "/api/v1/zones/hood/classification?from=2026-03-01T00:00:00Z&to=2026-03-02T00:00:00Z", nil)
		rec := httptest.NewRecorder()
		r.ServeHTTP(rec, req)
		if rec.Code != status || rec.Body.String() != string(body) {
			t.Errorf("route answers %d %q, CertifyStored %d %q", rec.Code, rec.Body.String(), status, body)
		}
	}
	s := newTestServer(t, Options{})
	if status, body, _ := s.CertifyStored(context.Background(), "lab", "2026-03-01T00:00:00Z", "2026-03-02T00:00:00Z"); status != http.StatusNotFound {
		t.Errorf("unknown zone: %d %s", status, body)
	}
	if status, body, _ := s.CertifyStored(context.Background(), "hood", "yesterday", "2026-03-02T00:00:00Z"); status != http.StatusBadRequest || !strings.Contains(string(body), `"field":"from"`) {
		t.Errorf("bad from: %d %s", status, body)
	}
}

// GET /api/v1/sensors shows the judge's status of each sensor: a silent
// one (no sample within its allowed silence, or none at all) is
// "unknown" with no number, never fine.
func TestSensorStates(t *testing.T) {
	for _, c := range []struct {
		name   string
		status string
		pa     float64
		heard  bool
		want   string
	}{
		{"ok", alerts.SensorOK, 12.5, true, "ok"},
		{"low", alerts.SensorLow, 6, true, "low"},
		{"reversed", alerts.SensorReversed, -1.5, true, "reversed"},
		{"silent after a sample", alerts.SensorSilent, 0, true, "unknown"},
		{"never reported", alerts.SensorSilent, 0, false, "unknown"},
	} {
		t.Run(c.name, func(t *testing.T) {
			v := alerts.SensorView{SensorDP: alerts.SensorDP{Sensor: "dp-hood", High: "hood", Low: "corridor", MinPa: 10, Pa: c.pa}, Status: c.status, DoorOpenings: 3}
			if c.heard {
				v.Time = testNow.Add(-time.Minute)
			}
			h := newTestAPI(t, Options{Zones: fakeZones{sensors: func() []alerts.SensorView { return []alerts.SensorView{v} }}})
			req := httptest.NewRequest("GET", "/api/v1/sensors", nil)
			rec := httptest.NewRecorder()
			h.ServeHTTP(rec, req)
			var out []map[string]any
			if err := json.Unmarshal(rec.Body.Bytes(), &out); err != nil || rec.Code != http.StatusOK || len(out) != 1 {
				t.Fatalf("%d %s", rec.Code, rec.Body.String())
			}
			if out[0]["state"] != c.want || out[0]["id"] != "dp-hood" || out[0]["door_openings"] != 3.0 {
				t.Errorf("%v, want state %s", out[0], c.want)
			}
			if (out[0]["pa"] != nil) != (c.status != alerts.SensorSilent) {
				t.Errorf("pa %v with status %s", out[0]["pa"], c.status)
			}
			if (out[0]["time"] != nil) != c.heard {
				t.Errorf("time %v, heard %v", out[0]["time"], c.heard)
			}
		})
	}
	// A sensor the judge does not know is unknown too.
	h := newTestAPI(t, Options{})
	if status, body := callList(t, h, "/api/v1/sensors"); status != http.StatusOK || len(body) != 1 || body[0]["state"] != "unknown" {
		t.Errorf("no view: %d %v", status, body)
	}
}

func callList(t *testing.T, h http.Handler, path string) (int, []map[string]any) {
	t.Helper()
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest("GET", path, nil))
	var out []map[string]any
	json.Unmarshal(rec.Body.Bytes(), &out)
	return rec.Code, out
}
