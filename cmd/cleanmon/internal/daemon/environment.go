package daemon

import (
	"context"
	"errors"
	"fmt"
	"sync"

	"cleanmon/alerts"
	"cleanmon/collector"
)

// startEnvironment builds the ingest of temperature, humidity and
// airflow-velocity samples (store first, then the judge and the
// metrics) and brings the metrics up to the newest stored sample of each
// sensor.
func (d *Daemon) startEnvironment() {
	zones := map[string]string{}
	for _, e := range d.cfg.Environment {
		zones[e.ID] = e.Zone
	}
	d.envMetrics = alerts.NewEnvironmentMetrics(zones)
	for _, e := range d.cfg.Environment {
		if last, ok, err := d.st.LatestEnvironment(e.ID); err == nil && ok {
			d.envMetrics.Observe([]alerts.EnvironmentObservation{storedEnvObservation(last)})
		}
	}
	d.envIngest = collector.NewEnvironmentIngest(d.reg, envSink{d.st, &d.gate}, d.ingestOptions())
	d.envIngest.OnEnvironment(func(es []collector.Environment) {
		obs := make([]alerts.EnvironmentObservation, len(es))
		for i := range es {
			obs[i] = envObservation(&es[i])
		}
		d.envMetrics.Observe(obs)
		d.alarms.observeEnvironment(obs)
	})
	d.envIngest.OnRejected(func(rj collector.Rejection) {
		if errors.Is(rj.Err, collector.ErrCommit) {
			d.log.Error("environment samples not stored", "id", rj.ID, "err", rj.Err)
		}
	})
}

// observeEnvironment hands committed environment samples to the rules.
func (s *alarmService) observeEnvironment(obs []alerts.EnvironmentObservation) {
	s.enqueue(context.Background(), func(ctx context.Context) {
		if err := s.judge.Observe(ctx, alerts.Input{Environment: obs}); err != nil {
			s.log.Error("alarm rules could not judge environment samples", "samples", len(obs), "err", err)
		}
	})
}

// startMQTT subscribes at the configured broker, when there is one: each
// message goes through the same ingest as a POST, and is acknowledged to
// the broker only once stored. Its stop ends the session and waits for a
// commit in flight, before the store closes.
func (d *Daemon) startMQTT(ctx context.Context) error {
	if d.cfg.MQTT == nil {
		return nil
	}
	src, err := collector.NewMQTTSource(*d.cfg.MQTT, d.reg, collector.Ingests{Ingest: d.ingest, Environment: d.envIngest},
		collector.MQTTOptions{Metrics: d.metrics, Logger: d.log.With("component", "mqtt")})
	if err != nil {
		if errors.Is(err, collector.ErrConfig) {
			return usage("mqtt: %v", err)
		}
		return fmt.Errorf("mqtt: %w", err)
	}
	ctx, cancel := context.WithCancel(ctx)
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		if err := src.Run(ctx); err != nil && ctx.Err() == nil {
			d.log.Error("mqtt source stopped", "err", err)
		}
	}()
	d.push(func() error { cancel(); wg.Wait(); return nil })
	d.log.Info("subscribing at the MQTT broker", "broker", d.cfg.MQTT.Broker, "topics", len(d.cfg.MQTT.Topics))
	return nil
}
