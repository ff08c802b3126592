package api

import (
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/go-chi/chi/v5"
	"github.com/prometheus/client_golang/prometheus"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
	"cleanmon/store"
)

// The fakes of the API's own interfaces: each method calls its function
// field when set and otherwise does nothing, so a test states only the
// behaviour it is about.

type fakeZones struct {
	zones    func() []alerts.ZoneReport
	zone     func(id string) (alerts.ZoneReport, bool)
	setState func(alerts.OperatingChange, func(alerts.OperatingChange) error) (alerts.ZoneReport, error)
	opAt     func(zone string, at time.Time) alerts.StateAt
	sensors  func() []alerts.SensorView
}

func (f fakeZones) Zones() []alerts.ZoneReport {
	if f.zones == nil {
		return nil
	}
	return f.zones()
}

func (f fakeZones) Zone(id string) (alerts.ZoneReport, bool) {
	if f.zone == nil {
		return alerts.ZoneReport{ZoneView: alerts.ZoneView{ID: id}}, true
	}
	return f.zone(id)
}

func (f fakeZones) SetOperatingState(_ context.Context, ch alerts.OperatingChange, persist func(alerts.OperatingChange) error) (alerts.ZoneReport, error) {
	if f.setState == nil {
		return alerts.ZoneReport{ZoneView: alerts.ZoneView{ID: ch.Zone, OperatingState: ch.State}}, persist(ch)
	}
	return f.setState(ch, persist)
}

func (f fakeZones) OperatingAt(zone string, at time.Time) alerts.StateAt {
	if f.opAt == nil {
		return alerts.StateAt{Operating: alerts.InOperation, Limits: alerts.InOperation, Judged: true}
	}
	return f.opAt(zone, at)
}

func (f fakeZones) Sensors() []alerts.SensorView {
	if f.sensors == nil {
		return nil
	}
	return f.sensors()
}

type fakeStore struct {
	scanReadings func(counter string, from, to time.Time, fn func(store.Reading) error) error
	scanRollups  func(counter string, step time.Duration, from, to time.Time, fn func(store.Rollup) error) error
	latestDP     func(sensor string) (store.Pressure, bool, error)
	setState     func(context.Context, store.OperatingState) error
}

func (f fakeStore) ScanReadings(counter string, from, to time.Time, fn func(store.Reading) error) error {
	if f.scanReadings == nil {
		return nil
	}
	return f.scanReadings(counter, from, to, fn)
}

// StreamReadings lends each reading of scanReadings as the store does:
// the pointed-to reading is overwritten by the next one, so a caller that
// keeps it without copying sees the wrong values.
func (f fakeStore) StreamReadings(counter string, from, to time.Time, fn func(*store.Reading) error) error {
	if f.scanReadings == nil {
		return nil
	}
	var lent store.Reading
	return f.scanReadings(counter, from, to, func(rd store.Reading) error {
		lent = rd
		lent.Counts = append(lent.Counts[:0:0], rd.Counts...)
		err := fn(&lent)
		for i := range lent.Counts {
			lent.Counts[i] = 1<<64 - 1
		}
		return err
	})
}

func (f fakeStore) ScanRollups(counter string, step time.Duration, from, to time.Time, fn func(store.Rollup) error) error {
	if f.scanRollups == nil {
		return nil
	}
	return f.scanRollups(counter, step, from, to, fn)
}
func (fakeStore) ScanPressure(string, time.Time, time.Time, func(store.Pressure) error) error {
	return nil
}
func (f fakeStore) LatestPressure(sensor string) (store.Pressure, bool, error) {
	if f.latestDP == nil {
		return store.Pressure{}, false, nil
	}
	return f.latestDP(sensor)
}
func (fakeStore) ScanAudit(uint64, uint64, func(store.AuditEntry) error) error            { return nil }
func (fakeStore) ScanAuditSince(time.Time, func(store.AuditEntry) error) error            { return nil }
func (fakeStore) AuditHead() (uint64, [32]byte, error)                                    { return 0, [32]byte{}, nil }
func (fakeStore) Backup(io.Writer) (int64, error)                                         { return 0, nil }
func (fakeStore) ScanAlarms(time.Time, func(string, time.Time, []byte, bool) error) error { return nil }

func (f fakeStore) SetOperatingState(ctx context.Context, st store.OperatingState) error {
	if f.setState == nil {
		return nil
	}
	return f.setState(ctx, st)
}

type fakeIngest struct {
	post func(kind, contentType string, body io.Reader) (collector.Result, error)
}

func (f fakeIngest) PostReadings(_ context.Context, ct string, _ int64, body io.Reader) (collector.Result, error) {
	return f.post("readings", ct, body)
}

func (f fakeIngest) PostPressure(_ context.Context, ct string, _ int64, body io.Reader) (collector.Result, error) {
	return f.post("pressure", ct, body)
}

type fakeAlarms struct {
	NoAlarms
	ack       func(id, by, comment string) (alerts.Alarm, error)
	notifiers func() []alerts.NotifierHealth
}

func (f fakeAlarms) Ack(_ context.Context, id, by, comment string) (alerts.Alarm, error) {
	if f.ack == nil {
		return f.NoAlarms.Ack(context.Background(), id, by, comment)
	}
	return f.ack(id, by, comment)
}

func (f fakeAlarms) Notifiers() []alerts.NotifierHealth {
	if f.notifiers == nil {
		return nil
	}
	return f.notifiers()
}

// noSignatures refuses every signature and finds none: the handler tests
// run without people (the daemon's tests sign for real).
type noSignatures struct{}

func (noSignatures) Sign(context.Context, people.Session, people.SignRequest) (people.Signature, error) {
	return people.Signature{}, people.ErrReauth
}

func (noSignatures) SignaturesFor(string) []people.Signature { return nil }

var (
	_ Signatures = noSignatures{}
	_ Zones      = fakeZones{}
	_ Store      = fakeStore{}
	_ Ingest     = fakeIngest{}
	_ Alarms     = fakeAlarms{}
)

// testSite is a small site of the invented demo company: one ISO 5 hood.
const testSite = `site: "Veldmark Photonics, building C"
zones:
  - {id: hood, class: 5, area_m2: 2, sizes: ["0.5"], locations: [{id: h-1}]}
counters:
  - {id: pc-hood, zone: hood, location: h-1, sizes: ["0.5"]}
pressure_sensors:
  - {id: dp-hood, high: hood, low: corridor, min_pa: 10, interval: 10s}
`

// testNow is the one clock of this package's tests.
var testNow = time.Date(2026, 3, 2, 12, 0, 0, 0, time.UTC)

// newTestAPI is the API over o's collaborators (fakes filling the rest),
// with reads, operating and ingest open (the demo's access), mounted on a
// router as the daemon mounts it.
func newTestAPI(t *testing.T, o Options) http.Handler {
	t.Helper()
	return mountTestServer(newTestServer(t, o))
}

// mountTestServer mounts s's routes as the daemon does.
func mountTestServer(s *Server) http.Handler {
	r := chi.NewRouter()
	s.Register(r)
	return r
}

// newTestServer is the Server newTestAPI mounts.
func newTestServer(t *testing.T, o Options) *Server {
	t.Helper()
	return newTestServerSite(t, testSite, o)
}

// newTestServerSite is newTestServer over another site configuration.
func newTestServerSite(t *testing.T, siteYAML string, o Options) *Server {
	t.Helper()
	cfg, err := site.Load("site.yaml", []byte(siteYAML))
	if err != nil {
		t.Fatal(err)
	}
	auth, err := access.NewAuthorizer(cfg.Access, true)
	if err != nil {
		t.Fatal(err)
	}
	o.Site, o.Access = cfg, auth
	if o.Zones == nil {
		o.Zones = fakeZones{}
	}
	if o.Store == nil {
		o.Store = fakeStore{}
	}
	if o.Ingest == nil {
		o.Ingest = fakeIngest{post: func(string, string, io.Reader) (collector.Result, error) { return collector.Result{}, nil }}
	}
	if o.Alarms == nil {
		o.Alarms = fakeAlarms{}
	}
	if o.Signatures == nil {
		o.Signatures = noSignatures{}
	}
	o.Metrics = prometheus.NewRegistry()
	o.Log = slog.New(slog.NewTextHandler(io.Discard, nil))
	o.Now = func() time.Time { return testNow }
	s := New(o)
	s.SetReady(true)
	return s
}

// call runs one request through h and decodes a JSON answer.
func call(t *testing.T, h http.Handler, method, path, ctype, body string) (int, map[string]any) {
	t.Helper()
	req := httptest.NewRequest(method, path, strings.NewReader(body))
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, req)
	var out map[string]any
	if strings.HasPrefix(rec.Body.String(), "{") {
		if err := json.Unmarshal(rec.Body.Bytes(), &out); err != nil {
			t.Fatalf("%s %s: answer is not JSON: %q", method, path, rec.Body.String())
		}
	}
	return rec.Code, out
}
