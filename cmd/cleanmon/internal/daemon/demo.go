package daemon

import (
	"context"
	"fmt"
	"log/slog"
	"sync"
	"time"

	"cleanmon/alerts"
	"cleanmon/collector"
)

const (
	// demoExcursionRate keeps the demo's day of history to a handful of
	// excursions site-wide (about one a day per counter): each one at the
	// action level latches until acknowledged, and a screen full of them
	// would hide what the demo is there to show.
	demoExcursionRate = 1.0 / 1440
	// demoEnvExcursionRate gives each temperature, humidity or velocity
	// channel an excursion about every two days: the day of history
	// holds a few environment alarms, not a screen of them.
	demoEnvExcursionRate = 1.0 / 2880
	// demoBackfill is the history the demo starts with.
	demoBackfill = 24 * time.Hour
	// demoBatch is the simulated time per backfill commit: an hour of the
	// demo site is a few hundred readings and about 1 500 DP samples.
	demoBatch = time.Hour
	// demoSeed fixes the simulated history, so that two runs show the same.
	demoSeed = 20260302
)

// startDemo runs the simulator in the background: it backfills the last
// 24 h through the same ingest path as HTTP, then goes live. Serving does
// not wait for it.
func startDemo(ctx context.Context, wg *sync.WaitGroup, reg *collector.Registry, zones *alerts.ZoneTracker,
	ingest collector.Ingests, live collector.Submitter, now func() time.Time, speed float64, log *slog.Logger) error {
	feed := newIncidentFeed(ingest.Ingest, reg, log)
	limits := map[string]map[float64]float64{}
	for _, ci := range reg.Counters() {
		v, ok := zones.Zone(ci.Zone)
		if !ok {
			return fmt.Errorf("counter %s: unknown zone %q", ci.ID, ci.Zone)
		}
		m := map[float64]float64{}
		for _, l := range v.Limits {
			if l.Limit != nil {
				m[l.SizeUM] = *l.Limit
			}
		}
		limits[ci.ID] = m
	}
	sim, err := collector.NewSimulator(reg, limits, collector.SimOptions{Seed: demoSeed, Now: now, ExcursionRate: demoExcursionRate,
		EnvExcursionRate: demoEnvExcursionRate, Environment: ingest.Environment})
	if err != nil {
		return err
	}
	wg.Add(1)
	go func() {
		defer wg.Done()
		start := time.Now()
		end := now()
		n, err := demoBackfillRange(ctx, sim, feed, ingest.Environment, end.Add(-demoBackfill), end)
		// Backfilling took time, more of it at a higher speed: catch up with
		// the clock before going live, so that live data is fresh.
		for i := 0; err == nil && i < 5 && now().Sub(sim.Cursor()) > time.Second; i++ {
			var m int
			m, err = demoBackfillRange(ctx, sim, feed, ingest.Environment, sim.Cursor(), now())
			n += m
		}
		if err != nil {
			if ctx.Err() == nil {
				log.Error("demo backfill failed", "err", err)
			}
			return
		}
		log.Info("demo backfill done", "readings", n, "took", time.Since(start).Round(time.Millisecond))
		feed.mu.Lock()
		feed.next = live
		feed.mu.Unlock()
		if err := sim.Run(ctx, speed, feed); err != nil && ctx.Err() == nil {
			log.Error("demo simulator stopped", "err", err)
		}
	}()
	return nil
}

// demoBackfillRange submits the simulated data of [from, to) batch by
// batch and returns the readings accepted.
func demoBackfillRange(ctx context.Context, sim *collector.Simulator, ingest collector.Submitter, env collector.EnvironmentSubmitter, from, to time.Time) (int, error) {
	n := 0
	for b := range sim.Backfill(from, to, demoBatch) {
		if err := ctx.Err(); err != nil {
			return n, err
		}
		if len(b.Readings) > 0 {
			res, err := ingest.SubmitReadings(ctx, b.Readings)
			if err != nil {
				return n, err
			}
			n += res.Accepted
		}
		if len(b.Pressure) > 0 {
			if _, err := ingest.SubmitPressure(ctx, b.Pressure); err != nil {
				return n, err
			}
		}
		if len(b.Environment) > 0 {
			if _, err := env.SubmitEnvironment(ctx, b.Environment); err != nil {
				return n, err
			}
		}
	}
	return n, nil
}
