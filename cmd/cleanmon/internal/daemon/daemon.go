// Package daemon is the running monitor: it opens the store, builds the
// ingest path, the judge (zone state, alarm rules, notifiers), the
// Modbus poller, the API and the pages, and serves them until told to
// stop. New starts everything up to a listening socket, Run serves, and
// Close stops it all in the reverse order of starting: every start step
// pushes its stop on one stack, so a failure half-way rolls back exactly
// what had started. Signals are the caller's (the serve command).
//
// The adapters between collector, store and alerts live in adapters.go,
// and only there.
package daemon

import (
	"cmp"
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"sync"
	"time"

	"github.com/go-chi/chi/v5"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/api"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/cmd/cleanmon/internal/web"
	"cleanmon/collector"
	"cleanmon/store"
)

// Daemon defaults and bounds.
const (
	DefaultListen   = "127.0.0.1:8080"
	storeLockWait   = time.Second
	shutdownTimeout = 30 * time.Second
	sweepEvery      = time.Hour
)

// ErrUsage marks a failure to start that is the caller's to fix (a bad
// configuration, flag or address), as opposed to a fault met while
// starting (a store in use, a port taken).
var ErrUsage = errors.New("usage")

// Options are what `cleanmon serve` was asked for.
type Options struct {
	ConfigPath string  // the site configuration; "" with Demo
	Demo       bool    // the built-in demo site, simulated counters, open API
	Listen     string  // host:port; "" for the configuration's, else DefaultListen
	DataDir    string  // "" for the configuration's; with Demo, a temporary one
	Speed      float64 // Demo only: simulated time runs this many times faster
	DemoModbus bool    // Demo only: serve the simulated counters over Modbus TCP and poll them
	// Stdout gets the one line "cleanmon: serving on URL" once the daemon
	// serves; Log gets everything else.
	Stdout io.Writer
	Log    *slog.Logger
}

// Daemon is one running monitor.
type Daemon struct {
	o     Options
	log   *slog.Logger
	cfg   *site.Config
	st    *store.Store
	now   func() time.Time
	audit auditLog

	reg    *collector.Registry
	ingest *collector.Ingest
	alarms *alarmService // the judge, its queue and its notifiers
	dm     *demoModbus
	// envIngest and envMetrics are the environment side (environment.go).
	envIngest  *collector.EnvironmentIngest
	envMetrics *alerts.EnvironmentMetrics
	auth       *access.Authorizer
	certs      access.CertReloader
	metrics    *prometheus.Registry
	api        *api.Server
	people     *peopleSide

	ln     net.Listener
	url    string
	hs     *http.Server
	served chan error

	bg context.Context // background work; cancelled by its stop
	wg sync.WaitGroup

	notify notifier // the service manager (sdnotify.go)
	// demoPassword is the demo admin's password until Run prints it.
	demoPassword string
	// keys, gate and the fault found are the signed record's (trust.go).
	keys     auditKeys
	gate     writeGate
	faultMu  sync.Mutex
	faultMsg string

	stops   []func() error // run in reverse by Close
	running bool           // Run was called: Close records a clean stop
	closed  bool
}

// push registers the stop of a step that has started.
func (d *Daemon) push(stop func() error) { d.stops = append(d.stops, stop) }

// usageError is a start failure that is the caller's to fix: it is
// ErrUsage and the failure, and reads as the failure alone.
type usageError struct{ err error }

func (e usageError) Error() string   { return e.err.Error() }
func (e usageError) Unwrap() []error { return []error{ErrUsage, e.err} }

// usage is a start failure that is the caller's to fix.
func usage(format string, a ...any) error {
	return usageError{fmt.Errorf(format, a...)}
}

// asUsage marks err as the caller's to fix.
func asUsage(err error) error { return usageError{err} }

// New starts the daemon up to a listening socket: configuration, store,
// ingest, zone state, alarm rules and notifiers, Modbus poller, access
// and TLS. On failure what had started is stopped again, and the error
// wraps ErrUsage when the fault is in what was asked for (a configuration
// error is a *site.Error).
func New(o Options) (d *Daemon, err error) {
	if o.Log == nil {
		o.Log = slog.New(slog.NewTextHandler(os.Stderr, nil))
	}
	if o.Stdout == nil {
		o.Stdout = io.Discard
	}
	if o.Speed == 0 {
		o.Speed = 1
	}
	d = &Daemon{o: o, log: o.Log, now: time.Now, notify: newNotifier()}
	defer func() {
		if err != nil {
			d.Close()
			d = nil
		}
	}()
	steps := []func() error{d.loadConfig, d.openStore, d.startTrust, d.startPeople, d.startJudge, d.startIngest, d.startBackground, d.startChecks, d.listen}
	for _, step := range steps {
		if err := step(); err != nil {
			return d, err
		}
	}
	return d, nil
}

// loadConfig reads the site and checks the address and data directory.
func (d *Daemon) loadConfig() error {
	var err error
	if d.o.Demo {
		d.cfg, err = site.Demo()
	} else {
		d.cfg, err = site.LoadFile(d.o.ConfigPath)
	}
	if err != nil {
		return asUsage(err)
	}
	if d.o.Listen == "" {
		d.o.Listen = cmp.Or(d.cfg.Listen, DefaultListen)
	}
	if _, _, err := net.SplitHostPort(d.o.Listen); err != nil {
		return usage("--listen %q: %v", d.o.Listen, err)
	}
	if !d.o.Demo && !site.IsLoopback(d.o.Listen) && !d.cfg.TLS.Enabled() && !d.cfg.AllowPlainHTTP {
		return usage("refusing plain HTTP on %s, which is not a loopback address: configure tls.cert_file and tls.key_file, or set allow_plain_http: true for a closed network", d.o.Listen)
	}
	if d.o.Demo && !site.IsLoopback(d.o.Listen) {
		return usage("--demo serves an open API (no tokens) and listens on loopback only; %q is not a loopback address", d.o.Listen)
	}
	if d.o.DataDir == "" {
		d.o.DataDir = d.cfg.DataDir
	}
	if d.o.Demo && d.o.Speed != 1 {
		d.now = speedClock(d.o.Speed)
	}
	return nil
}

// openStore opens the store, in a temporary directory for a demo without
// one.
func (d *Daemon) openStore() error {
	if d.o.DataDir == "" {
		if !d.o.Demo {
			return usage("no data directory: give --data DIR or data_dir in %s", d.o.ConfigPath)
		}
		dir, err := os.MkdirTemp("", "cleanmon-demo-")
		if err != nil {
			return fmt.Errorf("temporary data directory: %w", err)
		}
		d.o.DataDir = dir
		d.push(func() error { os.RemoveAll(dir); return nil })
	}
	st, err := store.Open(d.o.DataDir, store.Options{LockTimeout: storeLockWait, Logger: d.log})
	switch {
	case errors.Is(err, store.ErrLocked):
		return fmt.Errorf("data directory %s is in use by another cleanmon process (%v)", d.o.DataDir, err)
	case err != nil:
		return fmt.Errorf("opening the store in %s: %w", d.o.DataDir, err)
	}
	d.st = st
	d.audit = auditLog{st, d.log}
	d.push(func() error {
		if d.running {
			d.audit.record(context.Background(), store.AuditActorSystem, store.AuditStop, d.cfg.Site, "clean shutdown", nil)
		}
		if err := st.Close(); err != nil {
			d.log.Error("closing the store", "err", err)
			return err
		}
		return nil
	})
	return nil
}

// startPeople builds the accounts, sessions and signatures, and in the
// demo gives the admin account a new password.
func (d *Daemon) startPeople() error {
	var err error
	if d.people, err = newPeople(context.Background(), d.st, d.cfg, d.cfg.TLS.Enabled()); err != nil {
		return err
	}
	d.people.fault = func() string {
		d.faultMu.Lock()
		defer d.faultMu.Unlock()
		return d.faultMsg
	}
	if d.people.sigErr != nil {
		d.log.Error("signatures made before this start may be missing from the records they signed", "err", d.people.sigErr)
	}
	if d.o.Demo {
		if d.demoPassword, err = d.people.demoAdmin(context.Background()); err != nil {
			return fmt.Errorf("demo administrator: %w", err)
		}
	}
	return nil
}

// startJudge builds the registry of instruments, the live zone state
// (restored from the store) and the alarm rules with their notifiers.
func (d *Daemon) startJudge() error {
	var err error
	if d.o.DemoModbus {
		if d.dm, err = startDemoModbus(d.cfg.Counters, d.o.Speed); err != nil {
			return err
		}
		d.push(func() error { d.dm.Stop(); return nil })
		d.cfg.Counters = d.dm.Counters
	}
	if d.reg, err = d.cfg.Registry(); err != nil {
		return asUsage(err)
	}
	if d.reg, err = d.reg.WithBounds(d.cfg.Bounds()); err != nil {
		return asUsage(err)
	}
	if d.alarms, err = newAlarmService(d.cfg, d.reg, d.st, d.now, d.log); err != nil {
		return asUsage(err)
	}
	changes, history, err := storedHistory(d.st, d.cfg, d.now(), d.log)
	if err != nil {
		if !d.damaged() {
			return fmt.Errorf("reading the judge's history from the store: %w", err)
		}
		// A damaged store still serves what it can: the zones start
		// without history, so they show unknown until readings come.
		d.log.Error("zone state not restored from the damaged store: zones start unknown", "err", err)
		changes, history = nil, nil
	}
	return d.alarms.restore(context.Background(), changes, history, d.damaged())
}

// submitWindow is how long the ingest gathers the submissions of the
// Modbus poller (one goroutine per device) into one commit. Each commit
// costs the store an audit entry (about 180 bytes, kept) and a head
// record; one per sample would make a DP sensor polled every 10 s cost
// some 560 MB a year. A second, with polls on multiples of their period,
// bounds the poller to about one commit per poll period for all its
// devices together, and delays a polled sample's
// commit and judgement by at most that, against sample periods of 10 s to
// a minute. HTTP requests, MQTT messages and the demo's simulator commit
// as they come: they batch already, or submit one at a time and would
// only wait.
const submitWindow = time.Second

// ingestOptions are the options of both ingests.
func (d *Daemon) ingestOptions() collector.IngestOptions {
	return collector.IngestOptions{Retention: d.cfg.RetentionOrDefault(), Now: d.now, Coalesce: submitWindow}
}

// startIngest builds the ingest path (store first, then the judge), the
// access rules, the metrics and the API.
func (d *Daemon) startIngest() error {
	ingestMetrics := alerts.NewIngestMetrics(counterIDs(d.cfg))
	d.ingest = collector.NewIngest(d.reg, storeSink{d.st, ingestMetrics, d.log, &d.gate}, d.ingestOptions())
	d.ingest.OnReadings(d.alarms.observeReadings)
	d.ingest.OnPressure(d.alarms.observePressure)
	d.ingest.OnRejected(func(rj collector.Rejection) {
		if rj.Kind == "readings" { // collector.Rejection.Kind: "readings" or "pressure"
			ingestMetrics.Count(rj.ID, alerts.IngestRejected, 1)
		}
		// Bad input is the sender's to fix and is answered as such; a
		// failed commit is ours, and an operator must see it.
		if errors.Is(rj.Err, collector.ErrCommit) {
			d.log.Error("readings not stored", "kind", rj.Kind, "id", rj.ID, "err", rj.Err)
		}
	})
	d.startEnvironment()
	var err error
	if d.auth, err = access.NewAuthorizer(d.cfg.Access, d.o.Demo); err != nil {
		return asUsage(err)
	}
	d.auth.SetSignaturesRequired(d.cfg.SignaturesRequired)
	d.metrics = prometheus.NewRegistry()
	d.metrics.MustRegister(
		collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}), collectors.NewGoCollector(),
		auditCollector{d.st},
		d.alarms,
		alerts.NewZoneCollector(d.alarms.judge.Tracker()),
		alerts.NewJudgeCollector(d.alarms.judge),
		alerts.NewPressureCollector(alerts.SensorDPFunc(d.alarms.judge.LatestDP)),
		alerts.NewAlarmCollector(d.alarms, zoneIDs(d.cfg)),
		ingestMetrics,
		alerts.NewNotifierCollector(d.alarms.disp),
		d.envMetrics,
		buildInfoCollector(),
	)
	d.api = api.New(api.Options{Site: d.cfg, Zones: d.alarms.judge, Store: d.st, Ingest: d.ingest, Alarms: d.alarms,
		Access: d.auth, Metrics: d.metrics, Log: d.log, Now: d.now, Signatures: d.people,
		MaxRawRange: time.Duration(d.cfg.Queries.MaxRawRange), HeavyPerToken: d.cfg.Queries.HeavyPerToken,
		EnvIngest: d.envIngest, EnvStore: d.st})
	d.gate.mu.Lock()
	d.gate.onChange = d.api.SetWriteProblem
	d.gate.mu.Unlock()
	d.api.SetWriteProblem(d.gate.problem())
	return nil
}

// startBackground starts what runs beside the HTTP side: the clock watch,
// the alarm rules and notifiers, and the Modbus poller.
func (d *Daemon) startBackground() error {
	d.audit.record(context.Background(), store.AuditActorSystem, store.AuditConfigLoad, d.cfg.Source(), "configuration loaded at start", []byte(d.cfg.Digest()))
	bg, cancel := context.WithCancel(context.Background())
	d.bg = bg
	d.push(func() error { cancel(); d.wg.Wait(); return nil })
	d.wg.Add(1)
	go func() {
		defer d.wg.Done()
		d.audit.watchClock(bg)
	}()
	d.alarms.start(bg, &d.wg)
	stopModbus, err := startModbus(bg, d.reg, d.ingest.Pooled(), d.log, modbusHooks{Metrics: d.metrics, Now: d.now, Events: d.alarms, Environment: d.envIngest.Pooled()})
	if err != nil {
		return usage("Modbus: %v", err)
	}
	// Before the store closes: a poll in flight commits or fails first.
	d.push(func() error { stopModbus(); return nil })
	d.startTrendFiles()
	return d.startMQTT(bg)
}

// listen opens the socket (TLS when configured) and builds the HTTP
// server; Run serves on it.
func (d *Daemon) listen() error {
	if d.cfg.TLS.Enabled() {
		if err := d.certs.Load(d.cfg.TLS); err != nil {
			return asUsage(err)
		}
	}
	ln, err := net.Listen("tcp", d.o.Listen)
	if err != nil {
		return fmt.Errorf("listening on %s: %w", d.o.Listen, err)
	}
	scheme := "http"
	if d.cfg.TLS.Enabled() {
		ln = tls.NewListener(ln, d.certs.ServerTLS())
		scheme = "https"
	}
	d.ln, d.url = ln, scheme+"://"+ln.Addr().String()
	d.hs = &http.Server{
		Handler:           d.routes(),
		ReadHeaderTimeout: httpx.ReadHeaderTimeout,
		ReadTimeout:       httpx.ReadTimeout,
		WriteTimeout:      httpx.WriteTimeout,
		IdleTimeout:       httpx.IdleTimeout,
		ErrorLog:          slog.NewLogLogger(d.log.Handler(), slog.LevelWarn),
	}
	d.push(d.shutdownHTTP)
	return nil
}

// routes assembles the API and the pages behind the common middleware.
func (d *Daemon) routes() http.Handler {
	r := chi.NewRouter()
	r.Use(httpx.Recoverer(d.log), httpx.RequestLog(d.log), d.gate.middleware, d.people.web.Middleware)
	if d.cfg.TLS.Enabled() {
		r.Use(httpx.HSTS)
	}
	r.NotFound(func(w http.ResponseWriter, r *http.Request) {
		httpx.WriteError(w, http.StatusNotFound, "no such endpoint: "+r.URL.Path)
	})
	r.MethodNotAllowed(func(w http.ResponseWriter, r *http.Request) {
		httpx.WriteError(w, http.StatusMethodNotAllowed, r.Method+" is not allowed on "+r.URL.Path)
	})
	d.api.Register(r)
	d.people.register(r)
	web.New(web.Options{Site: d.cfg, Store: d.st, Certify: d.api, Records: d.api, Access: d.auth, Errors: api.Errors, Log: d.log, Now: d.now,
		Accounts: d.people, Signatures: d.people, Audit: d.people}).Register(r)
	return r
}

// shutdownHTTP stops taking requests and lets those in flight finish
// (their commits complete and are answered), within shutdownTimeout.
func (d *Daemon) shutdownHTTP() error {
	d.api.SetReady(false)
	if d.served == nil {
		return d.ln.Close()
	}
	ctx, cancel := context.WithTimeout(context.Background(), shutdownTimeout)
	defer cancel()
	if err := d.hs.Shutdown(ctx); err != nil {
		d.log.Error("requests still running at the shutdown deadline; closing connections", "err", err)
		d.hs.Close()
		return err
	}
	return nil
}

// Addr is the URL the daemon serves on (http:// or https://host:port).
func (d *Daemon) Addr() string { return d.url }

// Run serves until ctx ends or the HTTP server fails; either way the
// caller then calls Close. The line "cleanmon: serving on URL" goes to
// Options.Stdout once the start is on record.
func (d *Daemon) Run(ctx context.Context) error {
	d.running = true
	d.served = make(chan error, 1)
	go func() { d.served <- d.hs.Serve(d.ln) }()
	d.api.SetReady(true)
	if d.o.Demo {
		d.log.Warn("demo: the API is open, no token is asked for any route", "listen", d.ln.Addr().String(), "speed", d.o.Speed)
	}
	// On record before anyone is told where to connect.
	d.audit.record(ctx, store.AuditActorSystem, store.AuditStart, d.cfg.Site, "cleanmon serve on "+d.url, nil)
	fmt.Fprintf(d.o.Stdout, "cleanmon: serving on %s\n", d.url)
	if d.demoPassword != "" {
		// Once, here: the password is kept nowhere but in its hash.
		fmt.Fprintf(d.o.Stdout, "cleanmon: sign in at %s/signin as admin with password %s\n", d.url, d.demoPassword)
		d.demoPassword = ""
	}
	if err := d.notify.send("READY=1\nSTATUS=serving on " + d.url); err != nil {
		d.log.Warn("telling the service manager that the daemon is ready", "err", err)
	}
	d.notify.watch(d.bg, &d.wg, d.alive, func(err error) { d.log.Error("watchdog not fed", "err", err) })
	d.log.Info("serving", "url", d.url, "site", d.cfg.Site, "data", d.o.DataDir, "zones", len(d.cfg.Zones), "counters", len(d.cfg.Counters), "sensors", len(d.cfg.PressureSensors),
		"environment_sensors", len(d.cfg.Environment), "version", BuildInfo().Version, "revision", BuildInfo().Revision)
	if !d.o.Demo && len(d.cfg.Access.Tokens) == 0 {
		d.log.Warn("no access tokens configured: nothing can post readings or change a zone", "open_reads", d.cfg.Access.OpenReads)
	}
	d.wg.Add(1)
	go func() {
		defer d.wg.Done()
		sweepLoop(d.bg, d.st, d.cfg.RetentionOrDefault(), d.now, d.log)
	}()
	if d.o.Demo {
		var live collector.Submitter = d.ingest
		if d.dm != nil {
			live = d.dm.Feed(d.ingest)
		}
		if err := demoRuns(d.bg, d.st, d.now()); err != nil {
			d.log.Warn("demo: production runs not recorded", "err", err)
		}
		if err := startDemo(d.bg, &d.wg, d.reg, d.alarms.judge.Tracker(), collector.Ingests{Ingest: d.ingest, Environment: d.envIngest}, live, d.now, d.o.Speed, d.log); err != nil {
			return fmt.Errorf("demo simulator: %w", err)
		}
	}
	select {
	case <-ctx.Done():
		d.log.Info("shutting down: finishing requests in flight")
		return nil
	case err := <-d.served:
		d.log.Error("HTTP server stopped", "err", err)
		return fmt.Errorf("HTTP server stopped: %w", err)
	}
}

// Reload re-reads the configuration file (the serve command calls it on
// SIGHUP); see reloadConfig for what takes effect at once.
func (d *Daemon) Reload() {
	if d.o.Demo {
		return
	}
	reloadConfig(d.bg, d.o.ConfigPath, d.cfg, d.auth, &d.certs, d.audit, d.log)
}

// Close stops everything that started, in reverse order: the HTTP side
// first (requests in flight finish), then the poller, the background
// work, and the store last. It returns the failures joined.
func (d *Daemon) Close() error {
	if d.closed {
		return nil
	}
	d.closed = true
	if d.running {
		if err := d.notify.send("STOPPING=1"); err != nil {
			d.log.Warn("telling the service manager that the daemon stops", "err", err)
		}
	}
	var errs []error
	for i := len(d.stops) - 1; i >= 0; i-- {
		if err := d.stops[i](); err != nil {
			errs = append(errs, err)
		}
	}
	if d.running {
		d.log.Info("stopped")
	}
	return errors.Join(errs...)
}
