package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"runtime/debug"
	"strings"
	"sync/atomic"
	"time"

	"github.com/go-chi/chi/v5"
	"github.com/go-chi/chi/v5/middleware"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"cleanmon/alerts"
	"cleanmon/collector"
	"cleanmon/store"
)

// Time limits of the HTTP side. Streams (readings, backup) extend their
// own write deadline, so WriteTimeout only bounds ordinary answers.
const (
	readHeaderTimeout = 5 * time.Second
	readTimeout       = time.Minute
	writeTimeout      = time.Minute
	idleTimeout       = 2 * time.Minute
	requestTimeout    = 30 * time.Second
	streamTimeout     = 10 * time.Minute
	backupTimeout     = time.Hour
	maxStateBody      = 64 << 10
)

// dataStore is what the HTTP API needs from the store.
type dataStore interface {
	ScanReadings(counter string, from, to time.Time, fn func(store.Reading) error) error
	ScanRollups(counter string, step time.Duration, from, to time.Time, fn func(store.Rollup) error) error
	SetOperatingState(ctx context.Context, st store.OperatingState) error
	Backup(w io.Writer) (int64, error)
}

// alarmReader reads the alarm snapshots the store keeps.
type alarmReader interface {
	ScanAlarms(since time.Time, fn func(id string, updated time.Time, snapshot []byte, cleared bool) error) error
}

// ingestHandlers are the collector's HTTP entry points.
type ingestHandlers interface {
	Readings(w http.ResponseWriter, r *http.Request)
	Pressure(w http.ResponseWriter, r *http.Request)
}

// server is the HTTP API of the daemon: thin handlers over the store, the
// live zone state and the collector's ingest path.
type server struct {
	cfg     *siteConfig
	store   dataStore
	zones   *alerts.ZoneTracker
	ingest  ingestHandlers
	auth    *authorizer
	log     *slog.Logger
	metrics *prometheus.Registry
	now     func() time.Time
	// alarms is the alarm engine and its notifiers (nil in tests that do
	// not need them); alarmLog reads the alarm journal.
	alarms   *alarmService
	alarmLog alarmReader

	// ready is set once the store is open and ingest runs, and cleared
	// when shutdown begins, so a balancer stops sending work first.
	ready atomic.Bool
}

// newMetricsRegistry is the daemon's own registry (not the global one, so
// that tests can run many daemons in one process), with the process and Go
// runtime collectors.
func newMetricsRegistry() *prometheus.Registry {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}), collectors.NewGoCollector())
	return reg
}

// routes assembles the API of DESIGN.md §4.
func (s *server) routes() http.Handler {
	r := chi.NewRouter()
	r.Use(s.recoverer, s.requestLog)
	r.NotFound(func(w http.ResponseWriter, r *http.Request) {
		writeError(w, http.StatusNotFound, "no such endpoint: "+r.URL.Path)
	})
	r.MethodNotAllowed(func(w http.ResponseWriter, r *http.Request) {
		writeError(w, http.StatusMethodNotAllowed, r.Method+" is not allowed on "+r.URL.Path)
	})

	read := s.auth.require(permRead)
	short := withTimeout(requestTimeout)
	r.With(short).Get("/healthz", s.healthz)
	r.With(short).Get("/readyz", s.readyz)
	r.With(short, read).Method(http.MethodGet, "/metrics", promhttp.HandlerFor(s.metrics, promhttp.HandlerOpts{Registry: s.metrics}))

	r.Route("/api/v1", func(r chi.Router) {
		ingest := r.With(short, s.auth.require(permIngest))
		ingest.Post("/readings", s.ingest.Readings)
		ingest.Post("/pressure", s.ingest.Pressure)

		r.With(short, read).Get("/zones", s.listZones)
		r.With(short, read).Get("/zones/{zone}", s.getZone)
		r.With(withTimeout(streamTimeout), read).Get("/zones/{zone}/readings", s.zoneReadings)
		r.With(withTimeout(streamTimeout), read).Get("/zones/{zone}/classification", s.zoneClassification)
		r.With(short, s.auth.require(permOperate)).Put("/zones/{zone}/state", s.putZoneState)

		r.With(short, read).Get("/alarms", s.listAlarms)
		r.With(short, s.auth.require(permOperate)).Post("/alarms/{id}/ack", s.ackAlarm)
		r.With(withTimeout(streamTimeout), read).Get("/zones/{zone}/levels", s.zoneLevels)
		r.With(short, read).Get("/sensors", s.listSensors)
		r.With(withTimeout(streamTimeout), read).Get("/audit", s.listAudit)
		r.With(short, read).Get("/audit/head", s.auditHead)
		r.With(withTimeout(streamTimeout), read).Get("/sensors/{sensor}/pressure", s.sensorPressure)

		r.With(withTimeout(backupTimeout), s.auth.require(permAdmin)).Get("/backup", s.backup)
	})
	s.pageRoutes(r)
	return r
}

// apiError is the one shape of every error answer.
type apiError struct {
	Error string `json:"error"`
	Field string `json:"field,omitempty"`
}

func writeError(w http.ResponseWriter, status int, msg string) {
	writeJSON(w, status, apiError{Error: msg})
}

// writeFieldError is a 400 naming the query parameter or body field at fault.
// decodeStrict reads a small JSON object body: unknown fields, trailing
// data and oversized bodies are refused with an answer naming the field.
func decodeStrict(w http.ResponseWriter, r *http.Request, limit int64, v any, fields string) bool {
	dec := json.NewDecoder(http.MaxBytesReader(w, r.Body, limit))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		var mbe *http.MaxBytesError
		switch {
		case errors.As(err, &mbe):
			writeError(w, http.StatusRequestEntityTooLarge, fmt.Sprintf("body larger than %d bytes", limit))
		case strings.HasPrefix(err.Error(), "json: unknown field "):
			f := strings.Trim(strings.TrimPrefix(err.Error(), "json: unknown field "), `"`)
			writeFieldError(w, f, "unknown field (want "+fields+")")
		default:
			writeError(w, http.StatusBadRequest, "body: want a JSON object with "+fields+": "+err.Error())
		}
		return false
	}
	if _, err := dec.Token(); err != io.EOF {
		writeError(w, http.StatusBadRequest, "body: unexpected data after the JSON object")
		return false
	}
	return true
}

func writeFieldError(w http.ResponseWriter, field, msg string) {
	writeJSON(w, http.StatusBadRequest, apiError{Error: field + ": " + msg, Field: field})
}

func writeJSON(w http.ResponseWriter, status int, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		status, b = http.StatusInternalServerError, []byte(`{"error":"answer could not be encoded"}`)
	}
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(status)
	w.Write(append(b, '\n'))
}

// requestInfo travels in the request context so that inner middleware
// (auth) can tell the request log who asked.
type requestInfo struct{ token string }

type requestInfoKey struct{}

func infoOf(r *http.Request) *requestInfo {
	if ri, ok := r.Context().Value(requestInfoKey{}).(*requestInfo); ok {
		return ri
	}
	return &requestInfo{}
}

// requestLog writes one line per request.
func (s *server) requestLog(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		start := time.Now()
		ri := &requestInfo{}
		r = r.WithContext(context.WithValue(r.Context(), requestInfoKey{}, ri))
		ww := middleware.NewWrapResponseWriter(w, r.ProtoMajor)
		completed := false
		// Deferred, so that a stream cut off midway is logged too.
		defer func() {
			status := ww.Status()
			if status == 0 {
				status = http.StatusOK
			}
			lvl, msg := slog.LevelInfo, "http request"
			if status >= 500 || !completed {
				lvl = slog.LevelWarn
			}
			if !completed {
				msg = "http request aborted"
			}
			s.log.Log(r.Context(), lvl, msg,
				"method", r.Method, "path", r.URL.Path, "status", status,
				"bytes", ww.BytesWritten(), "duration", time.Since(start).Round(time.Microsecond),
				"remote", r.RemoteAddr, "token", ri.token)
		}()
		next.ServeHTTP(ww, r)
		completed = true
	})
}

// recoverer turns a panic into a logged 500; http.ErrAbortHandler passes
// through, since it is how a stream that failed midway cuts the connection
// instead of ending with a well-formed but incomplete answer.
func (s *server) recoverer(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		defer func() {
			if v := recover(); v != nil {
				if v == http.ErrAbortHandler {
					panic(v)
				}
				s.log.Error("handler panic", "method", r.Method, "path", r.URL.Path, "panic", fmt.Sprint(v), "stack", string(debug.Stack()))
				writeError(w, http.StatusInternalServerError, "internal error")
			}
		}()
		next.ServeHTTP(w, r)
	})
}

// withTimeout bounds a request's work through its context and extends the
// write deadline of the connection to match.
func withTimeout(d time.Duration) func(http.Handler) http.Handler {
	return func(next http.Handler) http.Handler {
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			ctx, cancel := context.WithTimeout(r.Context(), d)
			defer cancel()
			if d > writeTimeout {
				// Not every ResponseWriter supports it (tests with a recorder).
				_ = http.NewResponseController(w).SetWriteDeadline(time.Now().Add(d + 5*time.Second))
			}
			next.ServeHTTP(w, r.WithContext(ctx))
		})
	}
}

// healthz answers while the process runs.
func (s *server) healthz(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
}

// readyz answers 200 while the store is open and ingest runs, with the
// health of every notifier as detail: a failing notifier does not make
// the daemon unready (readings are still taken and kept, and deliveries
// wait in the outbox), but it shows here and in the metrics.
func (s *server) readyz(w http.ResponseWriter, r *http.Request) {
	if !s.ready.Load() {
		writeError(w, http.StatusServiceUnavailable, "not ready: starting or shutting down")
		return
	}
	out := map[string]any{"status": "ready"}
	if s.alarms != nil {
		h := s.alarms.disp.HealthList()
		out["notifiers"] = h
		for _, n := range h {
			if !n.Up {
				out["status"] = "ready, notifier failing"
			}
		}
	}
	writeJSON(w, http.StatusOK, out)
}

// backup streams a consistent copy of the store.
func (s *server) backup(w http.ResponseWriter, r *http.Request) {
	name := "cleanmon-" + s.now().UTC().Format("20060102T150405Z") + ".db"
	w.Header().Set("Content-Type", "application/octet-stream")
	w.Header().Set("Content-Disposition", `attachment; filename="`+name+`"`)
	w.Header().Set("Cache-Control", "no-store")
	n, err := s.store.Backup(w)
	if err != nil {
		s.log.Error("backup failed", "bytes", n, "err", err)
		if n == 0 {
			writeError(w, http.StatusServiceUnavailable, "backup failed: "+err.Error())
			return
		}
		panic(http.ErrAbortHandler)
	}
	s.log.Info("backup sent", "bytes", n, "token", infoOf(r).token)
}

// storeSink commits the collector's readings to the store: the collector
// acknowledges a sender only once this returns.
type storeSink struct {
	st  *store.Store
	m   *alerts.IngestMetrics // nil: no metrics
	log *slog.Logger          // nil: conflicts are not logged
}

var (
	_ collector.Sink        = storeSink{}
	_ collector.MarkingSink = storeSink{}
)

// CommitReadings implements collector.Sink.
func (s storeSink) CommitReadings(ctx context.Context, rs []collector.Reading) (int, int, error) {
	stored, err := s.CommitReadingsMarked(ctx, rs)
	if err != nil {
		return 0, 0, err
	}
	acc := 0
	for _, ok := range stored {
		if ok {
			acc++
		}
	}
	return acc, len(rs) - acc, nil
}

// CommitReadingsMarked implements collector.MarkingSink, and counts every
// reading in cleanmon_readings_total as accepted, duplicate or conflict,
// per counter. A conflict (the time of a stored reading, other values) is
// answered as a duplicate, as DESIGN.md §4 asks, but logged: the stored
// reading stays, and someone must look at the instrument.
func (s storeSink) CommitReadingsMarked(ctx context.Context, rs []collector.Reading) ([]bool, error) {
	out := make([]store.Reading, len(rs))
	for i := range rs {
		r := &rs[i]
		out[i] = store.Reading{
			Counter: r.Counter, Time: r.Time, VolumeL: r.VolumeL, FlowLPM: r.FlowLPM,
			SampleSeconds: r.SampleSeconds, Status: r.Status, Differential: r.Differential,
			Sizes: r.Sizes, Counts: r.Counts,
		}
	}
	outcomes, err := s.st.AppendReadingsMarked(ctx, out)
	if err != nil {
		return nil, err
	}
	stored := make([]bool, len(rs))
	for i, o := range outcomes {
		stored[i] = o == store.Stored
		if o == store.Conflict && s.log != nil {
			s.log.Warn("reading not stored: a reading of this counter at this time is stored with other values",
				"counter", rs[i].Counter, "time", rs[i].Time)
		}
		if s.m == nil {
			continue
		}
		switch o {
		case store.Stored:
			s.m.Count(rs[i].Counter, alerts.IngestAccepted, 1)
			s.m.Observe(rs[i].Counter, rs[i].Time, rs[i].FlowLPM)
		case store.Conflict:
			s.m.Count(rs[i].Counter, alerts.IngestConflict, 1)
		default:
			s.m.Count(rs[i].Counter, alerts.IngestDuplicate, 1)
		}
	}
	return stored, nil
}

// CommitPressure implements collector.Sink.
func (s storeSink) CommitPressure(ctx context.Context, ps []collector.Pressure) (int, int, error) {
	out := make([]store.Pressure, len(ps))
	for i, p := range ps {
		out[i] = store.Pressure{Sensor: p.Sensor, Time: p.Time, Pa: p.Pa}
	}
	return s.st.AppendPressure(ctx, out)
}

// observation turns a committed reading into what the zone state takes.
func observation(r *collector.Reading) alerts.Observation {
	return alerts.Observation{Counter: r.Counter, Time: r.Time, VolumeL: r.VolumeL, Status: r.Status, Sizes: r.Sizes, PerM3: r.PerM3}
}

// storedObservation does the same for a reading read back from the store.
func storedObservation(r store.Reading) alerts.Observation {
	return alerts.Observation{Counter: r.Counter, Time: r.Time, VolumeL: r.VolumeL, Status: r.Status, Sizes: r.Sizes, PerM3: r.PerM3()}
}

// errorStatus maps store errors to HTTP statuses.
func errorStatus(err error) int {
	switch {
	case errors.Is(err, store.ErrInvalid):
		return http.StatusBadRequest
	case errors.Is(err, context.DeadlineExceeded):
		return http.StatusGatewayTimeout
	}
	return http.StatusServiceUnavailable
}
