// Package api is the daemon's HTTP API: /api/v1 (ingest, zones, readings,
// classification, levels, alarms, DP sensors, audit, backup), /healthz,
// /readyz and /metrics. One file per resource; the interfaces it needs
// from the rest of the daemon are defined here (interfaces.go) and are all
// it knows of them. Errors become statuses through one table (Errors).
package api

import (
	"log/slog"
	"net/http"
	"sync/atomic"
	"time"

	"github.com/go-chi/chi/v5"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
)

// Options are the collaborators of the API. None may be nil: a daemon
// without alarms passes NoAlarms.
type Options struct {
	Site    *site.Config
	Zones   Zones
	Store   Store
	Ingest  Ingest
	Alarms  Alarms
	Access  *access.Authorizer
	Metrics *prometheus.Registry
	Log     *slog.Logger
	Now     func() time.Time
	// EnvIngest and EnvStore are the environment side (environment.go);
	// nil: NoEnvironment.
	EnvIngest EnvironmentIngest
	EnvStore  EnvironmentStore
	// Signatures signs acknowledgements and state changes of people.
	Signatures Signatures
	// MaxRawRange bounds the range of one raw readings request; zero is
	// store.DefaultMaxRawRange.
	MaxRawRange time.Duration
	// HeavyPerToken bounds the range walks one token runs at once; zero
	// is DefaultHeavyPerToken.
	HeavyPerToken int
}

// Server holds the API's collaborators; Register mounts its routes.
type Server struct {
	cfg     *site.Config
	zones   Zones
	store   Store
	ingest  Ingest
	alarms  Alarms
	auth    *access.Authorizer
	metrics *prometheus.Registry
	log     *slog.Logger
	now     func() time.Time
	sigs    Signatures

	envIngest   EnvironmentIngest
	envStore    EnvironmentStore
	maxRawRange time.Duration
	heavy       *heavyGate

	// ready is set once the store is open and ingest runs, and cleared
	// when shutdown begins, so a balancer stops sending work first.
	ready atomic.Bool
	// writeProblem is why writes are refused or failing; nil while they
	// succeed.
	writeProblem atomic.Pointer[string]
}

// New returns the API over o.
func New(o Options) *Server {
	s := &Server{cfg: o.Site, zones: o.Zones, store: o.Store, ingest: o.Ingest, alarms: o.Alarms,
		auth: o.Access, metrics: o.Metrics, log: o.Log, now: o.Now, sigs: o.Signatures,
		maxRawRange: o.MaxRawRange, heavy: newHeavyGate(o.HeavyPerToken), envIngest: o.EnvIngest, envStore: o.EnvStore}
	if s.envIngest == nil {
		s.envIngest = NoEnvironment{}
	}
	if s.envStore == nil {
		s.envStore = NoEnvironment{}
	}
	if s.maxRawRange <= 0 {
		s.maxRawRange = store.DefaultMaxRawRange
	}
	return s
}

// SetReady says whether /readyz answers ready.
func (s *Server) SetReady(ready bool) { s.ready.Store(ready) }

// Register mounts the routes of the API on r.
func (s *Server) Register(r chi.Router) {
	read := s.auth.Require(access.PermRead)
	operate := s.auth.Require(access.PermOperate)
	short := httpx.Timeout(httpx.RequestTimeout)
	long := httpx.Timeout(httpx.StreamTimeout)
	r.With(short).Get("/healthz", s.healthz)
	r.With(short).Get("/readyz", s.readyz)
	r.With(short, read).Method(http.MethodGet, "/metrics", promhttp.HandlerFor(s.metrics, promhttp.HandlerOpts{Registry: s.metrics}))

	r.Route("/api/v1", func(r chi.Router) {
		ingest := r.With(short, s.auth.Require(access.PermIngest))
		ingest.Post("/readings", s.postReadings)
		ingest.Post("/pressure", s.postPressure)

		r.With(short, read).Get("/zones", s.listZones)
		r.With(short, read, s.zone).Get("/zones/{zone}", s.getZone)
		r.With(long, read, s.heavy.limit, s.zone).Get("/zones/{zone}/readings", s.zoneReadings)
		r.With(long, read, s.heavy.limit, s.zone).Get("/zones/{zone}/classification", s.zoneClassification)
		r.With(long, read, s.heavy.limit, s.zone).Get("/zones/{zone}/recovery", s.zoneRecovery)
		r.With(short, operate, s.zone).Put("/zones/{zone}/state", s.putZoneState)

		r.With(short, read).Get("/alarms", s.listAlarms)
		r.With(short, operate).Post("/alarms/{id}/ack", s.ackAlarm)
		r.With(long, read, s.heavy.limit, s.zone).Get("/zones/{zone}/levels", s.zoneLevels)
		r.With(short, read).Get("/sensors", s.listSensors)
		r.With(long, read).Get("/audit", s.listAudit)
		r.With(short, read).Get("/audit/head", s.auditHead)
		r.With(long, read, s.heavy.limit).Get("/sensors/{sensor}/pressure", s.sensorPressure)

		s.registerEnvironment(r)
		s.registerOpenAPI(r)
		s.registerRecords(r, read, short, long)

		r.With(httpx.Timeout(httpx.BackupTimeout), s.auth.Require(access.PermAdmin)).Get("/backup", s.backup)
	})
}
