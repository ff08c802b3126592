package daemon

import (
	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/store"
	"context"
	"fmt"
	"log/slog"
	"reflect"
	"sort"
	"strings"
	"time"
)

// storedHistory reads what the judge needs back after a start: every
// recorded operating-state change of the configured zones (the judge
// judges each reading by the state of its time), and each counter's
// readings within its zone's window plus its newest reading, which fill
// the windows and baselines without raising anything.
func storedHistory(st *store.Store, cfg *site.Config, now time.Time, log *slog.Logger) ([]alerts.OperatingChange, []alerts.Observation, error) {
	latest, err := st.OperatingStates()
	if err != nil {
		return nil, nil, err
	}
	var changes []alerts.OperatingChange
	for zone, s := range latest {
		if _, ok := cfg.Zone(zone); !ok {
			log.Warn("stored operating state of a zone no longer configured", "zone", zone, "state", s.State)
			continue
		}
		err := st.OperatingStateHistory(zone, func(h store.OperatingState) error {
			changes = append(changes, opChange(zone, h))
			return nil
		})
		if err != nil {
			return nil, nil, err
		}
	}
	var history []alerts.Observation
	for _, k := range cfg.Counters {
		z, ok := cfg.Zone(k.Zone)
		if !ok {
			continue
		}
		window := time.Duration(z.Window)
		if window <= 0 {
			window = alerts.DefaultWindow
		}
		from := now.Add(-window)
		if r, found, err := st.LatestReading(k.ID); err != nil {
			return nil, nil, err
		} else if found && r.Time.Before(from) {
			history = append(history, storedObservation(r))
		}
		err := st.ScanReadings(k.ID, from, time.Time{}, func(r store.Reading) error {
			history = append(history, storedObservation(r))
			return nil
		})
		if err != nil {
			return nil, nil, err
		}
	}
	return changes, history, nil
}

func counterIDs(cfg *site.Config) []string {
	out := make([]string, len(cfg.Counters))
	for i, k := range cfg.Counters {
		out[i] = k.ID
	}
	return out
}

func zoneIDs(cfg *site.Config) []string {
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

// reloadConfig re-reads the configuration on SIGHUP. Tokens (added,
// revoked, new secrets), the rate limit and the TLS certificate take
// effect at once and the reload is audited; a file with any problem
// changes nothing. Other sections (zones, counters, sensors, alarms,
// notifications) are read at start only: a change to them is logged as
// waiting for a restart rather than applied halfway.
func reloadConfig(ctx context.Context, path string, running *site.Config, auth *access.Authorizer, certs *access.CertReloader, audit auditLog, log *slog.Logger) {
	next, err := site.LoadFile(path)
	if err != nil {
		log.Error("configuration not reloaded: it has problems, the running one stays", "file", path, "err", oneLine(err.Error()))
		audit.record(ctx, store.AuditActorSystem, "config-reload-refused", path, oneLine(err.Error()), nil)
		return
	}
	if next.TLS.Enabled() != running.TLS.Enabled() {
		log.Error("configuration not reloaded: turning TLS on or off needs a restart", "file", path)
		return
	}
	if next.TLS.Enabled() {
		if err := certs.Load(next.TLS); err != nil {
			log.Error("configuration not reloaded: the certificate does not load, the running one stays", "err", err)
			return
		}
	}
	added, removed, err := auth.Replace(next.Access)
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
	audit.record(ctx, store.AuditActorSystem, store.AuditConfigLoad, next.Source(), reason, []byte(next.Digest()))
	log.Info("configuration reloaded", "tokens_added", added, "tokens_revoked", removed)
}

func listOrNone(v []string) string {
	if len(v) == 0 {
		return "none"
	}
	return strings.Join(v, ", ")
}

// oneLine folds a multi-line message (a configuration's problems) into
// one log attribute.
func oneLine(s string) string { return strings.Join(strings.Fields(s), " ") }
