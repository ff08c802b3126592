package daemon

import (
	"context"
	"fmt"
	"log/slog"
	"net/http"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
	"cleanmon/store"
)

// engineConfig is the judge's view of the site configuration. The
// counters come from the registry, whose defaults (the nominal flow, the
// sample interval) are the ones the ingest path checks volumes with, so
// the flow check and the sample volume cannot disagree.
func engineConfig(cfg *site.Config, reg *collector.Registry, notifiers []string) alerts.EngineConfig {
	ec := alerts.EngineConfig{
		Zones: cfg.Zones, Notifiers: notifiers,
		Consecutive: cfg.Alarms.Consecutive, TrendRun: cfg.Alarms.TrendRun, TrendBaseline: cfg.Alarms.TrendBaseline, Latch: cfg.Alarms.Latch,
		CountRuleCounts: cfg.Alarms.CountRuleCounts, CountRuleSamples: cfg.Alarms.CountRuleSamples,
	}
	for _, k := range reg.Counters() {
		ec.Counters = append(ec.Counters, alerts.CounterRule{
			ID: k.ID, Zone: k.Zone, Location: site.CounterLocation(k.Counter),
			NominalFlowLPM: k.FlowLPM, MaxPerM3: k.MaxPerM3, Interval: time.Duration(k.Interval),
		}.WithDefaults())
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

// alarmService runs the judge beside the ingest path: readings, DP samples
// and device events are handed over after their commit, in order, through
// a bounded queue, so a slow rule never delays an acknowledgement and a
// burst is absorbed (the queue pushes back on ingest only when it is full).
type alarmService struct {
	judge     *alerts.Judge
	disp      *alerts.Dispatcher
	notifiers *alerts.NotifierSet
	heartbeat time.Duration
	now       func() time.Time
	log       *slog.Logger
	work      chan func(context.Context)

	busy atomic.Int32 // a queued task is running

	// unjournaled is the integrity alarm when the damaged store could not
	// record it (trust.go): shown and sent all the same.
	unjournaled atomic.Pointer[alerts.Alarm]
}

const alarmQueue = 4096

func newAlarmService(cfg *site.Config, reg *collector.Registry, st *store.Store, now func() time.Time, log *slog.Logger) (*alarmService, error) {
	notifiers, err := alerts.BuildNotifiers(cfg.Notifications, &http.Client{Timeout: 30 * time.Second}, log)
	if err != nil {
		return nil, err
	}
	opt := cfg.Notifications.DispatcherOptions()
	opt.Now, opt.Logger, opt.Degraded = now, log, notifiers.Degraded
	disp := alerts.NewDispatcher(alarmStore{st}, notifiers.All, opt)
	judge, err := alerts.NewJudge(engineConfig(cfg, reg, disp.Names()), alarmStore{st}, now)
	if err != nil {
		return nil, err
	}
	judge.Subscribe(func([]alerts.Transition) { disp.Kick() })
	return &alarmService{judge: judge, disp: disp, notifiers: notifiers, heartbeat: cfg.Notifications.HeartbeatEvery(),
		now: now, log: log, work: make(chan func(context.Context), alarmQueue)}, nil
}

// restore brings the judge back after a start: the operating-state
// history and the open alarms first, then the stored readings of each
// window, which raise nothing. On a store found damaged a failed restore
// of the alarms is logged and the judge runs all the same: the integrity
// alarm must get out.
func (s *alarmService) restore(ctx context.Context, changes []alerts.OperatingChange, history []alerts.Observation, damaged bool) error {
	if err := s.judge.Restore(ctx, changes); err != nil {
		if !damaged {
			return fmt.Errorf("restoring the judge: %w", err)
		}
		s.log.Error("open alarms not restored from the damaged store: the alarms shown may be incomplete", "err", err)
	}
	if err := s.judge.Prime(history); err != nil {
		return fmt.Errorf("judge history: %w", err)
	}
	return nil
}

// start runs the queue worker, the one-second tick of the time-driven
// rules, the dispatcher, the heartbeat and the Alertmanager resenders
// until ctx ends.
func (s *alarmService) start(ctx context.Context, wg *sync.WaitGroup) {
	wg.Add(4)
	go func() {
		defer wg.Done()
		s.worker(ctx)
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
					if err := s.judge.Tick(ctx); err != nil && ctx.Err() == nil {
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
	go func() {
		defer wg.Done()
		// Its silence after ctx ends is what a receiver's dead-man's
		// switch notices.
		alerts.RunHeartbeat(ctx, s.notifiers.Heartbeats, s.heartbeat, s.Active, s.now)
	}()
	for _, r := range s.notifiers.Resenders {
		wg.Add(1)
		go func() {
			defer wg.Done()
			r.Run(ctx, s.Active)
		}()
	}
}

// worker runs the queued tasks in order until ctx ends, then drains what
// is queued so that no committed reading goes unjudged at a clean stop.
func (s *alarmService) worker(ctx context.Context) {
	for {
		select {
		case <-ctx.Done():
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
}

func (s *alarmService) enqueue(ctx context.Context, f func(context.Context)) {
	select {
	case s.work <- f:
	case <-ctx.Done():
	}
}

// observe hands one committed batch to the judge.
func (s *alarmService) observe(what string, n int, in alerts.Input) {
	s.enqueue(context.Background(), func(ctx context.Context) {
		if err := s.judge.Observe(ctx, in); err != nil {
			s.log.Error("the judge could not take committed "+what, "count", n, "err", err)
		}
	})
}

// observeReadings hands committed readings to the judge.
func (s *alarmService) observeReadings(rs []collector.Reading) {
	crs := make([]alerts.CounterReading, len(rs))
	for i := range rs {
		crs[i] = alerts.CounterReading{Observation: observation(&rs[i]), FlowLPM: rs[i].FlowLPM}
	}
	s.observe("readings", len(crs), alerts.Input{Readings: crs})
}

// observePressure hands committed DP samples to the judge.
func (s *alarmService) observePressure(ps []collector.Pressure) {
	obs := make([]alerts.PressureObservation, len(ps))
	for i, p := range ps {
		obs[i] = alerts.PressureObservation{Sensor: p.Sensor, Time: p.Time, Pa: p.Pa}
	}
	s.observe("DP samples", len(obs), alerts.Input{Pressure: obs})
}

// Fault implements collector.DeviceEvents: a polled instrument that fails
// raises an instrument alarm.
func (s *alarmService) Fault(id, reason string, t time.Time) {
	s.observe("device events", 1, alerts.Input{Devices: []alerts.DeviceObservation{{ID: id, Fault: true, Reason: reason, Time: t}}})
}

// Recovered implements collector.DeviceEvents.
func (s *alarmService) Recovered(id string, t time.Time) {
	s.observe("device events", 1, alerts.Input{Devices: []alerts.DeviceObservation{{ID: id, Time: t}}})
}

var descRulesQueue = prometheus.NewDesc("cleanmon_rules_queue", "Batches of committed readings and DP samples waiting for the alarm rules.", nil, nil)

// Describe and Collect export the rules' queue length: a queue that stays
// long means the rules fall behind the ingest.
func (s *alarmService) Describe(ch chan<- *prometheus.Desc) { ch <- descRulesQueue }

// Collect implements prometheus.Collector.
func (s *alarmService) Collect(ch chan<- prometheus.Metric) {
	ch <- prometheus.MustNewConstMetric(descRulesQueue, prometheus.GaugeValue, float64(len(s.work)+int(s.busy.Load())))
}
