package site

import (
	"fmt"
	"time"

	"cleanmon/alerts"
	"cleanmon/collector"
)

// checkEnvironment checks the environment and mqtt sections: each with
// its package's own rules, and the topics against the instruments the
// other sections configure.
func (d *nodeDecoder) checkEnvironment(c *Config, zoneIDs map[string]bool) {
	dp := map[string]bool{}
	for _, s := range c.PressureSensors {
		dp[s.ID] = true
	}
	for _, e := range collector.ValidateEnvironmentSensors(c.Environment, zoneIDs, dp, collector.EnvironmentBounds{}) {
		d.add(e.Path, "%s", e.Msg)
	}
	d.checkMQTTSources(c)
	if c.MQTT == nil {
		return
	}
	// The topics name counters and sensors: check them against a registry
	// when the other sections allow one to be built (their own problems
	// are reported above).
	reg, err := c.Registry()
	if err != nil {
		reg = nil
	}
	for _, e := range collector.ValidateMQTT(c.MQTT, reg) {
		d.add(e.Path, "%s", e.Msg)
	}
}

// Registry builds the registry of every instrument the configuration
// names: counters, DP sensors and environment sensors.
func (c *Config) Registry() (*collector.Registry, error) {
	reg, err := collector.NewRegistry(c.Counters, c.PressureSensors)
	if err != nil {
		return nil, err
	}
	return reg.WithEnvironment(c.Environment, collector.EnvironmentBounds{})
}

// EnvironmentRules are the alarm rules of the environment sensors.
func (c *Config) EnvironmentRules() []alerts.EnvironmentRule {
	out := make([]alerts.EnvironmentRule, 0, len(c.Environment))
	for _, e := range c.Environment {
		r := alerts.EnvironmentRule{ID: e.ID, Zone: e.Zone, Delay: time.Duration(e.Delay), Interval: time.Duration(e.Interval),
			Limits: map[string]alerts.EnvironmentLimits{}}
		for _, ch := range e.Channels() {
			lim := e.Limits(ch)
			if lim == nil {
				continue
			}
			r.Limits[ch] = alerts.EnvironmentLimits{Alert: band(lim.Alert), Action: band(lim.Action)}
		}
		out = append(out, r)
	}
	return out
}

func band(b *collector.EnvironmentBand) *alerts.EnvironmentBand {
	if b == nil {
		return nil
	}
	return &alerts.EnvironmentBand{Low: b.Low, High: b.High}
}

// EnvironmentSensor returns the configuration of one environment sensor.
func (c *Config) EnvironmentSensor(id string) (*collector.EnvironmentSensorConfig, bool) {
	for i := range c.Environment {
		if c.Environment[i].ID == id {
			return &c.Environment[i], true
		}
	}
	return nil, false
}

// checkMQTTSources: an instrument whose source is mqtt needs the mqtt
// section and a topic that can carry it (one naming it, or one of its
// kind naming no instrument), or nothing would ever arrive from it.
func (d *nodeDecoder) checkMQTTSources(c *Config) {
	carried := func(kind, id string) bool {
		if c.MQTT == nil {
			return false
		}
		for _, t := range c.MQTT.Topics {
			named := t.Counter
			if named == "" {
				named = t.Sensor
			}
			if named == id || (named == "" && t.Kind == kind) {
				return true
			}
		}
		return false
	}
	check := func(path, kind, id, source string) {
		switch {
		case source != collector.SourceMQTT:
		case c.MQTT == nil:
			d.add(path, "%q needs the mqtt section: the broker and the topic %s publishes to", source, id)
		case !carried(kind, id):
			d.add(path, "%q, but no topic of the mqtt section carries %s: add one naming it, or one of kind %s", source, id, kind)
		}
	}
	for i, k := range c.Counters {
		check(fmt.Sprintf("counters[%d].source", i), collector.MQTTReadings, k.ID, k.Source)
	}
	for i, s := range c.PressureSensors {
		check(fmt.Sprintf("pressure_sensors[%d].source", i), collector.MQTTPressure, s.ID, s.Source)
	}
	for i, e := range c.Environment {
		check(fmt.Sprintf("environment[%d].source", i), collector.MQTTEnvironment, e.ID, e.Source)
	}
}
