package collector

import (
	"testing"
	"time"

	"go.yaml.in/yaml/v3"
)

// The sections as a site configuration writes them decode into the
// structs, and the result passes validation.
func TestEnvironmentAndMQTTSectionsFromYAML(t *testing.T) {
	const doc = `
environment:
  - id: th-asm
    zone: assembly
    kind: temperature-humidity
    delay: 5m
    temperature_c: {alert: {low: 20.3, high: 21.7}, action: {low: 20, high: 22}}
    humidity_pct: {action: {low: 40, high: 50}}
  - id: av-hood
    zone: coating-hood
    kind: air-velocity
    delay: 1m
    interval: 10s
    velocity_m_s: {action: {low: 0.36, high: 0.54}}
    modbus:
      address: "rtu:///dev/ttyUSB0?baud=9600&parity=none"
      unit: 4
      poll: 10s
      velocity_m_s: {addr: 0, type: holding, scale: 0.001}
mqtt:
  broker: ssl://broker.veldmark.example:8883
  client_id: cleanmon-building-c
  topics:
    - topic: building-c/readings/#
      kind: readings
    - topic: building-c/hood/velocity
      sensor: av-hood
      fields: {velocity_m_s: v, time: ts}
`
	var cfg struct {
		Environment []EnvironmentSensorConfig `yaml:"environment"`
		MQTT        MQTTConfig                `yaml:"mqtt"`
	}
	if err := yaml.Unmarshal([]byte(doc), &cfg); err != nil {
		t.Fatal(err)
	}
	reg, err := demoRegistry(t).WithEnvironment(cfg.Environment, EnvironmentBounds{})
	if err != nil {
		t.Fatal(err)
	}
	av, ok := reg.EnvironmentSensor("av-hood")
	if !ok || av.Source != SourceModbus || time.Duration(av.Delay).Seconds() != 60 || *av.VelocityMS.Action.Low != 0.36 || *av.Modbus.Unit != 4 {
		t.Fatalf("av-hood decoded as %+v", av)
	}
	if errs := ValidateMQTT(&cfg.MQTT, reg); len(errs) > 0 {
		t.Fatalf("mqtt section refused: %v", errs)
	}
	if cfg.MQTT.Topics[1].Fields["time"] != "ts" {
		t.Errorf("fields decoded as %v", cfg.MQTT.Topics[1].Fields)
	}
}
