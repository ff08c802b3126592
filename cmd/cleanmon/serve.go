package main

import (
	"context"
	"crypto/tls"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"net/http"
	"os"
	"os/signal"
	"reflect"
	"sort"
	"strings"
	"sync"
	"syscall"
	"time"

	"cleanmon/alerts"
	"cleanmon/collector"
	"cleanmon/store"
)

// Daemon defaults and bounds.
const (
	defaultListen   = "127.0.0.1:8080"
	storeLockWait   = time.Second
	shutdownTimeout = 30 * time.Second
	sweepEvery      = time.Hour
)

// serveOptions are the flags of `cleanmon serve`.
type serveOptions struct {
	configPath string
	demo       bool
	listen     string
	dataDir    string
	speed      float64
	demoModbus bool
}

// runServe is `cleanmon serve`: it runs until SIGINT or SIGTERM.
func runServe(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("serve", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var o serveOptions
	fs.StringVar(&o.configPath, "config", "", "site configuration file (YAML)")
	fs.BoolVar(&o.demo, "demo", false, "run the built-in demo site with simulated counters (API open, loopback only)")
	fs.StringVar(&o.listen, "listen", "", "address to listen on, host:port (default: the configuration's listen, else "+defaultListen+"; port 0 picks a free one)")
	fs.StringVar(&o.dataDir, "data", "", "data directory of the store (default: the configuration's data_dir; --demo: a temporary directory)")
	fs.Float64Var(&o.speed, "speed", 1, "--demo only: how many times faster than the wall clock simulated time runs")
	fs.BoolVar(&o.demoModbus, "demo-modbus", false, "--demo only: serve the simulated counters as Modbus TCP devices on loopback and poll them")
	fs.Usage = func() {
		fmt.Fprintln(fs.Output(), "usage: cleanmon serve --config FILE [--listen ADDR] [--data DIR]")
		fmt.Fprintln(fs.Output(), "       cleanmon serve --demo [--listen ADDR] [--data DIR] [--speed N]")
		fmt.Fprintln(fs.Output(), "Runs the monitoring daemon until SIGINT or SIGTERM, then finishes requests in flight and closes the store.")
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return exitOK
		}
		return exitUsage
	}
	speedSet := false
	fs.Visit(func(f *flag.Flag) { speedSet = speedSet || f.Name == "speed" })
	switch {
	case fs.NArg() > 0:
		fmt.Fprintf(stderr, "cleanmon serve: unexpected argument %q\n", fs.Arg(0))
		return exitUsage
	case o.demo && o.configPath != "":
		fmt.Fprintln(stderr, "cleanmon serve: --demo runs the built-in site; it takes no --config")
		return exitUsage
	case !o.demo && o.configPath == "":
		fmt.Fprintln(stderr, "cleanmon serve: --config FILE is required (or --demo)")
		return exitUsage
	case !o.demo && o.demoModbus:
		fmt.Fprintln(stderr, "cleanmon serve: --demo-modbus applies to --demo only")
		return exitUsage
	case !o.demo && speedSet:
		fmt.Fprintln(stderr, "cleanmon serve: --speed applies to --demo only")
		return exitUsage
	case !(o.speed > 0) || math.IsInf(o.speed, 0):
		fmt.Fprintf(stderr, "cleanmon serve: --speed %v: want a positive factor\n", o.speed)
		return exitUsage
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	return serve(ctx, o, stdout, stderr)
}

// serve runs the daemon until ctx ends: the store, the ingest path, the
// live zone state, the HTTP API, the hourly retention sweep and, with
// --demo, the simulator.
func serve(ctx context.Context, o serveOptions, stdout, stderr io.Writer) int {
	log := slog.New(slog.NewTextHandler(stderr, nil))
	quit := func(code int, format string, a ...any) int {
		fmt.Fprintf(stderr, "cleanmon serve: "+format+"\n", a...)
		return code
	}

	var cfg *siteConfig
	var err error
	if o.demo {
		cfg, err = demoConfig()
	} else {
		cfg, err = loadConfigFile(o.configPath)
	}
	if err != nil {
		printConfigError(stderr, "cleanmon serve", err)
		return exitUsage
	}

	listen := firstOf(o.listen, cfg.Listen, defaultListen)
	if _, _, err := net.SplitHostPort(listen); err != nil {
		return quit(exitUsage, "--listen %q: %v", listen, err)
	}
	if !o.demo && !isLoopback(listen) && !cfg.TLS.enabled() && !cfg.AllowPlainHTTP {
		return quit(exitUsage, "refusing plain HTTP on %s, which is not a loopback address: configure tls.cert_file and tls.key_file, or set allow_plain_http: true for a closed network", listen)
	}
	if o.demo && !isLoopback(listen) {
		return quit(exitUsage, "--demo serves an open API (no tokens) and listens on loopback only; %q is not a loopback address", listen)
	}

	dataDir := firstOf(o.dataDir, cfg.DataDir)
	if dataDir == "" {
		if !o.demo {
			return quit(exitUsage, "no data directory: give --data DIR or data_dir in %s", o.configPath)
		}
		dataDir, err = os.MkdirTemp("", "cleanmon-demo-")
		if err != nil {
			return quit(exitFail, "temporary data directory: %v", err)
		}
		defer os.RemoveAll(dataDir)
	}

	now := time.Now
	if o.demo && o.speed != 1 {
		now = speedClock(o.speed)
	}

	st, err := store.Open(dataDir, store.Options{LockTimeout: storeLockWait, Logger: log})
	switch {
	case errors.Is(err, store.ErrLocked):
		return quit(exitFail, "data directory %s is in use by another cleanmon process (%v)", dataDir, err)
	case err != nil:
		return quit(exitFail, "opening the store in %s: %v", dataDir, err)
	}
	storeOpen := true
	defer func() {
		if storeOpen {
			st.Close()
		}
	}()

	var dm *demoModbus
	if o.demoModbus {
		if dm, err = startDemoModbus(cfg.Counters, o.speed); err != nil {
			return quit(exitFail, "%v", err)
		}
		defer dm.Stop()
		cfg.Counters = dm.Counters
	}
	reg, err := collector.NewRegistry(cfg.Counters, cfg.PressureSensors)
	if err != nil {
		return quit(exitUsage, "%v", err)
	}
	zones, err := alerts.NewZoneTracker(cfg.Zones, cfg.bindings(), alerts.ZoneTrackerOptions{Now: now})
	if err != nil {
		return quit(exitUsage, "%v", err)
	}
	history, states, err := restoreZones(st, zones, cfg, now(), log)
	if err != nil {
		return quit(exitFail, "restoring zone state from the store: %v", err)
	}
	alarmSvc, err := newAlarmService(cfg, st, zones, now, log)
	if err != nil {
		return quit(exitUsage, "%v", err)
	}
	ingestMetrics := alerts.NewIngestMetrics(counterIDs(cfg))
	ingest := collector.NewIngest(reg, storeSink{st, ingestMetrics, log}, collector.IngestOptions{Retention: cfg.retention(), Now: now})
	ingest.OnReadings(func(rs []collector.Reading) {
		obs := make([]alerts.Observation, len(rs))
		for i := range rs {
			obs[i] = observation(&rs[i])
		}
		zones.Observe(obs...)
		alarmSvc.observeReadings(rs)
	})
	ingest.OnPressure(alarmSvc.observePressure)
	ingest.OnRejected(func(rj collector.Rejection) {
		if rj.Kind == "reading" {
			ingestMetrics.Count(rj.ID, alerts.IngestRejected, 1)
		}
		// Bad input is the sender's to fix and is answered as such; a
		// failed commit is ours, and an operator must see it.
		if errors.Is(rj.Err, collector.ErrCommit) {
			log.Error("readings not stored", "kind", rj.Kind, "id", rj.ID, "err", rj.Err)
		}
	})
	auth, err := newAuthorizer(cfg.Access, o.demo)
	if err != nil {
		return quit(exitUsage, "%v", err)
	}
	srv := &server{cfg: cfg, store: st, zones: zones, ingest: ingest, auth: auth, log: log, metrics: newMetricsRegistry(), now: now,
		alarms: alarmSvc, alarmLog: st}
	srv.metrics.MustRegister(
		auditCollector{st},
		alarmSvc,
		alerts.NewZoneCollector(zones),
		alerts.NewPressureCollector(alarmSvc),
		alerts.NewAlarmCollector(alarmSvc.eng, zoneIDs(cfg)),
		ingestMetrics,
		alerts.NewNotifierCollector(alarmSvc.disp),
	)
	audit := auditLog{st, log}
	audit.record(ctx, store.AuditActorSystem, store.AuditConfigLoad, cfg.source, "configuration loaded at start", []byte(cfg.sha256))
	bg, stopBG := context.WithCancel(context.Background())
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		audit.watchClock(bg)
	}()
	if err := alarmSvc.start(bg, &wg, history, states); err != nil {
		stopBG()
		return quit(exitFail, "%v", err)
	}
	stopModbus, err := startModbus(bg, reg, ingest, log, modbusHooks{Metrics: srv.metrics, Now: now, Events: alarmSvc})
	if err != nil {
		stopBG()
		wg.Wait()
		return quit(exitUsage, "Modbus: %v", err)
	}

	var certs certReloader
	if cfg.TLS.enabled() {
		if err := certs.load(cfg.TLS); err != nil {
			stopBG()
			stopModbus()
			wg.Wait()
			return quit(exitUsage, "%v", err)
		}
	}
	ln, err := net.Listen("tcp", listen)
	if err != nil {
		stopBG()
		stopModbus()
		wg.Wait()
		return quit(exitFail, "listening on %s: %v", listen, err)
	}
	hs := &http.Server{
		Handler:           srv.routes(),
		ReadHeaderTimeout: readHeaderTimeout,
		ReadTimeout:       readTimeout,
		WriteTimeout:      writeTimeout,
		IdleTimeout:       idleTimeout,
		ErrorLog:          slog.NewLogLogger(log.Handler(), slog.LevelWarn),
	}
	served := make(chan error, 1)
	go func() { served <- hs.Serve(ln) }()
	srv.ready.Store(true)
	if o.demo {
		log.Warn("demo: the API is open, no token is asked for any route", "listen", ln.Addr().String(), "speed", o.speed)
	}
	scheme := "http"
	if cfg.TLS.enabled() {
		ln = tls.NewListener(ln, certs.serverTLS())
		scheme = "https"
	}
	url := scheme + "://" + ln.Addr().String()
	// On record before anyone is told where to connect.
	audit.record(ctx, store.AuditActorSystem, store.AuditStart, cfg.Site, "cleanmon serve on "+url, nil)
	fmt.Fprintf(stdout, "cleanmon: serving on %s\n", url)
	log.Info("serving", "url", url, "site", cfg.Site, "data", dataDir, "zones", len(cfg.Zones), "counters", len(cfg.Counters), "sensors", len(cfg.PressureSensors))
	if !o.demo && len(cfg.Access.Tokens) == 0 {
		log.Warn("no access tokens configured: nothing can post readings or change a zone", "open_reads", cfg.Access.OpenReads)
	}

	wg.Add(1)
	go func() {
		defer wg.Done()
		sweepLoop(bg, st, cfg.retention(), now, log)
	}()
	if o.demo {
		var live collector.Submitter = ingest
		if dm != nil {
			live = dm.Feed(ingest)
		}
		if err := startDemo(bg, &wg, reg, zones, ingest, live, now, o.speed, log); err != nil {
			stopBG()
			hs.Close()
			stopModbus()
			wg.Wait()
			return quit(exitFail, "demo simulator: %v", err)
		}
	}

	if !o.demo {
		hup := make(chan os.Signal, 1)
		signal.Notify(hup, syscall.SIGHUP)
		defer signal.Stop(hup)
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				select {
				case <-bg.Done():
					return
				case <-hup:
					reloadConfig(bg, o.configPath, cfg, auth, &certs, audit, log)
				}
			}
		}()
	}

	code := exitOK
	select {
	case <-ctx.Done():
		log.Info("shutting down: finishing requests in flight")
	case err := <-served:
		log.Error("HTTP server stopped", "err", err)
		code = exitFail
	}
	// Stop taking work, let requests in flight finish (their commits
	// complete and are answered), stop the background work, and only then
	// close the store.
	srv.ready.Store(false)
	stopBG()
	stopModbus() // before the store closes: a poll in flight commits or fails first
	sctx, cancel := context.WithTimeout(context.Background(), shutdownTimeout)
	defer cancel()
	if err := hs.Shutdown(sctx); err != nil {
		log.Error("requests still running at the shutdown deadline; closing connections", "err", err)
		hs.Close()
		code = exitFail
	}
	wg.Wait()
	audit.record(context.Background(), store.AuditActorSystem, store.AuditStop, cfg.Site, "clean shutdown", nil)
	storeOpen = false
	if err := st.Close(); err != nil {
		log.Error("closing the store", "err", err)
		code = exitFail
	}
	log.Info("stopped")
	return code
}

// restoreZones brings the live zone state back after a start: the
// operating states on record and the readings within each zone's window.
// It returns those readings and states for the alarm rules as well.
func restoreZones(st *store.Store, zones *alerts.ZoneTracker, cfg *siteConfig, now time.Time, log *slog.Logger) ([]alerts.Observation, map[string]string, error) {
	stored, err := st.OperatingStates()
	if err != nil {
		return nil, nil, err
	}
	states := map[string]string{}
	var history []alerts.Observation
	for zone, s := range stored {
		if _, ok := zones.Zone(zone); !ok {
			log.Warn("stored operating state of a zone no longer configured", "zone", zone, "state", s.State)
			continue
		}
		if s.State == alerts.Maintenance {
			// Maintenance is judged against the limits of the state before
			// it: find that state in the history and apply it first.
			var before *store.OperatingState
			err := st.OperatingStateHistory(zone, func(h store.OperatingState) error {
				if h.State != alerts.Maintenance {
					h := h
					before = &h
				}
				return nil
			})
			if err != nil {
				return nil, nil, err
			}
			if before != nil {
				zones.RestoreOperatingState(opChange(zone, *before))
			}
		}
		if err := zones.RestoreOperatingState(opChange(zone, s)); err != nil {
			log.Warn("stored operating state not restored", "zone", zone, "err", err)
		} else {
			states[zone] = s.State
		}
	}
	windows := map[string]time.Duration{} // a zone view per zone, not per counter
	for _, v := range zones.Zones() {
		windows[v.ID] = v.Window
	}
	for _, k := range cfg.Counters {
		window, ok := windows[k.Zone]
		if !ok {
			continue
		}
		if r, found, err := st.LatestReading(k.ID); err != nil {
			return nil, nil, err
		} else if found {
			zones.Observe(storedObservation(r))
		}
		var obs []alerts.Observation
		err := st.ScanReadings(k.ID, now.Add(-window), time.Time{}, func(r store.Reading) error {
			obs = append(obs, storedObservation(r))
			return nil
		})
		if err != nil {
			return nil, nil, err
		}
		zones.Observe(obs...)
		history = append(history, obs...)
	}
	return history, states, nil
}

func counterIDs(cfg *siteConfig) []string {
	out := make([]string, len(cfg.Counters))
	for i, k := range cfg.Counters {
		out[i] = k.ID
	}
	return out
}

func zoneIDs(cfg *siteConfig) []string {
	out := make([]string, len(cfg.Zones))
	for i, z := range cfg.Zones {
		out[i] = z.ID
	}
	return out
}

func opChange(zone string, s store.OperatingState) alerts.OperatingChange {
	return alerts.OperatingChange{Zone: zone, State: s.State, By: s.By, Reason: s.Reason, Time: s.Time}
}

// sweepLoop deletes what is older than the retention, at start and then
// every hour.
func sweepLoop(ctx context.Context, st *store.Store, retention time.Duration, now func() time.Time, log *slog.Logger) {
	t := time.NewTicker(sweepEvery)
	defer t.Stop()
	for {
		res, err := st.Sweep(ctx, now().Add(-retention))
		switch {
		case err != nil && ctx.Err() == nil:
			log.Error("retention sweep failed", "err", err)
		case err == nil && res.Readings+res.Pressure+res.Rollups > 0:
			log.Info("retention sweep", "before", res.Before, "readings", res.Readings, "pressure", res.Pressure, "rollups", res.Rollups)
		}
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
	}
}

// speedClock runs time speed times faster than the wall clock from now on.
func speedClock(speed float64) func() time.Time {
	start := time.Now()
	return func() time.Time {
		return start.Add(time.Duration(float64(time.Since(start)) * speed))
	}
}

// isLoopback tells whether a listen address stays on this machine. An
// empty host means every interface, which is not.
func isLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

func firstOf(vs ...string) string {
	for _, v := range vs {
		if v != "" {
			return v
		}
	}
	return ""
}

// reloadConfig re-reads the configuration on SIGHUP. Tokens (added,
// revoked, new secrets), the rate limit and the TLS certificate take
// effect at once and the reload is audited; a file with any problem
// changes nothing. Other sections (zones, counters, sensors, alarms,
// notifications) are read at start only: a change to them is logged as
// waiting for a restart rather than applied halfway.
func reloadConfig(ctx context.Context, path string, running *siteConfig, auth *authorizer, certs *certReloader, audit auditLog, log *slog.Logger) {
	next, err := loadConfigFile(path)
	if err != nil {
		log.Error("configuration not reloaded: it has problems, the running one stays", "file", path, "err", oneLine(err.Error()))
		audit.record(ctx, store.AuditActorSystem, "config-reload-refused", path, oneLine(err.Error()), nil)
		return
	}
	if next.TLS.enabled() != running.TLS.enabled() {
		log.Error("configuration not reloaded: turning TLS on or off needs a restart", "file", path)
		return
	}
	if next.TLS.enabled() {
		if err := certs.load(next.TLS); err != nil {
			log.Error("configuration not reloaded: the certificate does not load, the running one stays", "err", err)
			return
		}
	}
	added, removed, err := auth.replace(next.Access)
	if err != nil {
		log.Error("tokens not reloaded", "err", err)
		return
	}
	var later []string
	for name, same := range map[string]bool{
		"zones": reflect.DeepEqual(next.Zones, running.Zones), "counters": reflect.DeepEqual(next.Counters, running.Counters),
		"pressure_sensors": reflect.DeepEqual(next.PressureSensors, running.PressureSensors), "alarms": reflect.DeepEqual(next.Alarms, running.Alarms),
		"notifications": reflect.DeepEqual(next.Notifications, running.Notifications), "listen": next.Listen == running.Listen,
		"data_dir": next.DataDir == running.DataDir, "retention": next.Retention == running.Retention,
	} {
		if !same {
			later = append(later, name)
		}
	}
	sort.Strings(later)
	reason := fmt.Sprintf("reloaded on SIGHUP; tokens added: %s; tokens revoked: %s", listOrNone(added), listOrNone(removed))
	if len(later) > 0 {
		reason += "; waiting for a restart: " + strings.Join(later, ", ")
		log.Warn("configuration reloaded; these sections change only at the next restart", "sections", later)
	}
	audit.record(ctx, store.AuditActorSystem, store.AuditConfigLoad, next.source, reason, []byte(next.sha256))
	log.Info("configuration reloaded", "tokens_added", added, "tokens_revoked", removed)
}

func listOrNone(v []string) string {
	if len(v) == 0 {
		return "none"
	}
	return strings.Join(v, ", ")
}
