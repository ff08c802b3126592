package daemon

import (
	"context"
	"fmt"
	"log/slog"
	"net/http"
	"sort"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
	"cleanmon/store"
)

// alarmStore adapts the bbolt store to what the alarm engine (Journal) and
// the dispatcher (Outbox, QueueCounter) need: transitions and alarm
// engineConfig is the alarm engine's view of the site configuration.
func engineConfig(cfg *site.Config, notifiers []string, zones *alerts.ZoneTracker) alerts.EngineConfig {
	ec := alerts.EngineConfig{
		Zones: cfg.Zones, Notifiers: notifiers, Tracker: zones,
		Consecutive: cfg.Alarms.Consecutive, TrendRun: cfg.Alarms.TrendRun, TrendBaseline: cfg.Alarms.TrendBaseline, Latch: cfg.Alarms.Latch,
	}
	for _, k := range cfg.Counters {
		ec.Counters = append(ec.Counters, alerts.CounterRule{
			ID: k.ID, Zone: k.Zone, Location: site.CounterLocation(k),
			NominalFlowLPM: k.FlowLPM, MaxPerM3: k.MaxPerM3, Interval: time.Duration(k.Interval),
		})
	}
	for _, p := range cfg.PressureSensors {
		ec.Sensors = append(ec.Sensors, alerts.SensorRule{
			ID: p.ID, High: p.High, Low: p.Low, MinPa: p.MinPa, MaxPa: p.MaxPa,
			Delay: time.Duration(p.Delay), Interval: time.Duration(p.Interval),
		})
	}
	ec.Environment = cfg.EnvironmentRules()
	return ec
}

// alarmService runs the alarm engine beside the ingest path: readings are
// handed over after their commit, in order, through a bounded queue, so a
// slow rule never delays an acknowledgement and a burst is absorbed (the
// queue pushes back on ingest only when it is full).
type alarmService struct {
	eng       *alerts.Engine
	disp      *alerts.Dispatcher
	notifiers []alerts.Notifier
	log       *slog.Logger
	work      chan func(context.Context)

	busy atomic.Int32 // a queued task is running

	mu sync.Mutex
	dp map[string]alerts.SensorDP // latest DP per sensor, for metrics

	// unjournaled is the integrity alarm when the damaged store could not
	// record it (trust.go): shown and sent all the same.
	unjournaled atomic.Pointer[alerts.Alarm]
}

const alarmQueue = 4096

func newAlarmService(cfg *site.Config, st *store.Store, zones *alerts.ZoneTracker, now func() time.Time, log *slog.Logger) (*alarmService, error) {
	notifiers, err := alerts.BuildNotifiers(cfg.Notifications, &http.Client{Timeout: 30 * time.Second}, log)
	if err != nil {
		return nil, err
	}
	opt := cfg.Notifications.DispatcherOptions()
	opt.Now, opt.Logger = now, log
	disp := alerts.NewDispatcher(alarmStore{st}, notifiers, opt)
	eng, err := alerts.NewEngine(engineConfig(cfg, disp.Names(), zones), alarmStore{st}, now)
	if err != nil {
		return nil, err
	}
	eng.Subscribe(func([]alerts.Transition) { disp.Kick() })
	s := &alarmService{eng: eng, disp: disp, notifiers: notifiers, log: log, work: make(chan func(context.Context), alarmQueue), dp: map[string]alerts.SensorDP{}}
	for _, p := range cfg.PressureSensors {
		s.dp[p.ID] = alerts.SensorDP{Sensor: p.ID, High: p.High, Low: p.Low, MinPa: p.MinPa}
		if v, ok, err := st.LatestPressure(p.ID); err == nil && ok {
			d := s.dp[p.ID]
			d.Pa, d.Time = v.Pa, v.Time
			s.dp[p.ID] = d
		}
	}
	return s, nil
}

// start restores the engine (history first, so the consecutive and trend
// rules continue; then the open alarms) and runs the queue worker, the
// one-second tick of the time-driven rules, the dispatcher and the
// Alertmanager resenders until ctx ends.
// On a store found damaged (damaged set) a failed restore is logged and
// the rules run all the same: the integrity alarm must get out.
func (s *alarmService) start(ctx context.Context, wg *sync.WaitGroup, history []alerts.Observation, states map[string]string, damaged bool) error {
	if err := s.eng.Prime(history); err != nil {
		return fmt.Errorf("alarm engine history: %w", err)
	}
	if err := s.eng.Restore(ctx); err != nil {
		if !damaged {
			return fmt.Errorf("restoring alarms: %w", err)
		}
		s.log.Error("open alarms not restored from the damaged store: the alarms shown may be incomplete", "err", err)
	}
	for zone, st := range states {
		if err := s.eng.SetOperatingState(ctx, zone, st); err != nil {
			s.log.Warn("operating state not applied to the alarm rules", "zone", zone, "err", err)
		}
	}
	wg.Add(3)
	go func() {
		defer wg.Done()
		for {
			select {
			case <-ctx.Done():
				// Drain what is queued so that no committed reading goes
				// unjudged at a clean stop.
				for {
					select {
					case f := <-s.work:
						f(context.Background())
					default:
						return
					}
				}
			case f := <-s.work:
				s.busy.Store(1)
				f(ctx)
				s.busy.Store(0)
			}
		}
	}()
	go func() {
		defer wg.Done()
		t := time.NewTicker(time.Second)
		defer t.Stop()
		for {
			select {
			case <-ctx.Done():
				return
			case <-t.C:
				s.enqueue(ctx, func(ctx context.Context) {
					if err := s.eng.Tick(ctx); err != nil && ctx.Err() == nil {
						s.log.Error("alarm rules tick failed", "err", err)
					}
				})
			}
		}
	}()
	go func() {
		defer wg.Done()
		if err := s.disp.Run(ctx); err != nil && ctx.Err() == nil {
			s.log.Error("notification dispatcher stopped", "err", err)
		}
	}()
	for _, n := range s.notifiers {
		if r, ok := n.(alerts.Resender); ok {
			wg.Add(1)
			go func() {
				defer wg.Done()
				r.Run(ctx, func() []alerts.Alarm { return s.eng.Alarms(false) })
			}()
		}
	}
	return nil
}

func (s *alarmService) enqueue(ctx context.Context, f func(context.Context)) {
	select {
	case s.work <- f:
	case <-ctx.Done():
	}
}

// observeReadings hands committed readings to the rules.
func (s *alarmService) observeReadings(rs []collector.Reading) {
	crs := make([]alerts.CounterReading, len(rs))
	for i := range rs {
		crs[i] = alerts.CounterReading{Observation: observation(&rs[i]), FlowLPM: rs[i].FlowLPM}
	}
	s.enqueue(context.Background(), func(ctx context.Context) {
		if err := s.eng.ObserveCounterReadings(ctx, crs); err != nil {
			s.log.Error("alarm rules could not judge readings", "readings", len(crs), "err", err)
		}
	})
}

// observePressure hands committed DP samples to the rules.
func (s *alarmService) observePressure(ps []collector.Pressure) {
	obs := make([]alerts.PressureObservation, len(ps))
	s.mu.Lock()
	for i, p := range ps {
		obs[i] = alerts.PressureObservation{Sensor: p.Sensor, Time: p.Time, Pa: p.Pa}
		if d, ok := s.dp[p.Sensor]; ok && !p.Time.Before(d.Time) {
			d.Pa, d.Time = p.Pa, p.Time
			s.dp[p.Sensor] = d
		}
	}
	s.mu.Unlock()
	s.enqueue(context.Background(), func(ctx context.Context) {
		if err := s.eng.ObservePressure(ctx, obs); err != nil {
			s.log.Error("alarm rules could not judge DP samples", "samples", len(obs), "err", err)
		}
	})
}

// Fault implements collector.DeviceEvents: a polled instrument that fails
// raises an instrument alarm.
func (s *alarmService) Fault(id, reason string, t time.Time) {
	s.enqueue(context.Background(), func(ctx context.Context) {
		if err := s.eng.ObserveDevice(ctx, id, true, reason, t); err != nil {
			s.log.Error("alarm rules could not judge a device fault", "device", id, "err", err)
		}
	})
}

// Recovered implements collector.DeviceEvents.
func (s *alarmService) Recovered(id string, t time.Time) {
	s.enqueue(context.Background(), func(ctx context.Context) {
		if err := s.eng.ObserveDevice(ctx, id, false, "", t); err != nil {
			s.log.Error("alarm rules could not judge a device recovery", "device", id, "err", err)
		}
	})
}

// LatestDP is the newest DP per sensor, for the pressure metrics.
func (s *alarmService) LatestDP() []alerts.SensorDP {
	s.mu.Lock()
	defer s.mu.Unlock()
	out := make([]alerts.SensorDP, 0, len(s.dp))
	for _, d := range s.dp {
		if !d.Time.IsZero() {
			out = append(out, d)
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Sensor < out[j].Sensor })
	return out
}

var descRulesQueue = prometheus.NewDesc("cleanmon_rules_queue", "Batches of committed readings and DP samples waiting for the alarm rules.", nil, nil)

// Describe and Collect export the rules' queue length: a queue that stays
// long means the rules fall behind the ingest.
func (s *alarmService) Describe(ch chan<- *prometheus.Desc) { ch <- descRulesQueue }

// Collect implements prometheus.Collector.
func (s *alarmService) Collect(ch chan<- prometheus.Metric) {
	ch <- prometheus.MustNewConstMetric(descRulesQueue, prometheus.GaugeValue, float64(len(s.work)+int(s.busy.Load())))
}

// zoneAlarms are the open alarms of one zone, newest first.
