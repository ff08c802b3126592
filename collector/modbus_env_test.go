package collector

import (
	"context"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

func envModbusSensors() []EnvironmentSensorConfig {
	return []EnvironmentSensorConfig{
		{ID: "th-mb", Zone: "assembly", Kind: EnvTemperatureHumidity, Interval: model.Duration(time.Second), Modbus: &ModbusSource{
			Address: "127.0.0.1:1", Poll: model.Duration(100 * time.Millisecond),
			TemperatureC: &ModbusRegister{Addr: ip(0), Signed: true, Scale: 0.01},
			HumidityPct:  &ModbusRegister{Addr: ip(1), Scale: 0.01},
			Status:       &ModbusStatus{Addr: ip(2), Values: map[string]string{"0": StatusOK, "1": StatusFault}},
		}},
		{ID: "av-mb", Zone: "coating-hood", Kind: EnvAirVelocity, Interval: model.Duration(time.Second), Modbus: &ModbusSource{
			Address: "127.0.0.1:1", Poll: model.Duration(100 * time.Millisecond),
			VelocityMS: &ModbusRegister{Addr: ip(10), Type: RegHolding, Bits: 32, Scale: 0.0001},
		}},
	}
}

// Environment sensors polled over Modbus TCP from slaves that serve their
// register maps: a signed temperature below zero, a 32-bit velocity in a
// holding register, and the values in force at each poll.
func TestModbusPollerEnvironment(t *testing.T) {
	es := envModbusSensors()
	slaves := map[string]*ModbusSlave{}
	for i := range es {
		s, err := NewEnvironmentSlave(es[i])
		if err != nil {
			t.Fatal(err)
		}
		if err := s.Start("127.0.0.1:0"); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { s.Close() })
		slaves[es[i].ID] = s
		m := *es[i].Modbus
		m.Address = s.Addr()
		es[i].Modbus = &m
	}
	feed := &SlaveFeed{Slaves: slaves}
	ctx := context.Background()
	if _, err := feed.SubmitEnvironment(ctx, []RawEnvironment{
		{Sensor: "th-mb", TemperatureC: f64(-5.25), HumidityPct: f64(44.8)},
		{Sensor: "av-mb", VelocityMS: f64(0.4521)},
	}); err != nil {
		t.Fatal(err)
	}
	base, _ := NewRegistry(nil, nil)
	reg, err := base.WithEnvironment(es, EnvironmentBounds{})
	if err != nil {
		t.Fatal(err)
	}
	esink := newMemEnvSink()
	env := NewEnvironmentIngest(reg, esink, IngestOptions{})
	p, err := NewPoller(reg, NewIngest(reg, newMemSink(), IngestOptions{}), PollerOptions{Environment: env})
	if err != nil {
		t.Fatal(err)
	}
	latest := func(id string) (Environment, int) {
		esink.mu.Lock()
		defer esink.mu.Unlock()
		var last Environment
		n := 0
		for _, e := range esink.rows {
			if e.Sensor == id {
				n++
				if e.Time.After(last.Time) {
					last = e
				}
			}
		}
		return last, n
	}
	rctx, cancel := context.WithCancel(ctx)
	done := make(chan struct{})
	go func() { defer close(done); p.Run(rctx) }()
	defer func() { cancel(); <-done }()
	waitFor(t, 10*time.Second, "samples of both sensors", func() bool {
		_, a := latest("th-mb")
		_, b := latest("av-mb")
		return a > 0 && b > 0
	})
	th, _ := latest("th-mb")
	av, _ := latest("av-mb")
	if abs(th.TemperatureC+5.25) > 1e-9 || abs(th.HumidityPct-44.8) > 1e-9 {
		t.Errorf("th-mb %+v, want −5.25 °C and 44.8 %%", th)
	}
	if abs(av.VelocityMS-0.4521) > 1e-9 {
		t.Errorf("av-mb %+v, want 0.4521 m/s", av)
	}
	if err := slaves["th-mb"].PublishEnvironment(RawEnvironment{TemperatureC: f64(21.5), HumidityPct: f64(45)}); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 10*time.Second, "the new temperature", func() bool {
		th, _ := latest("th-mb")
		return abs(th.TemperatureC-21.5) < 1e-9
	})
	if err := slaves["av-mb"].PublishEnvironment(RawEnvironment{VelocityMS: f64(-1)}); err == nil {
		t.Error("a negative velocity fitted an unsigned register")
	}
}

func TestModbusEnvironmentConfig(t *testing.T) {
	cases := []struct {
		name string
		mod  func(*EnvironmentSensorConfig)
		path string
		msg  string
	}{
		{"velocity on a T/RH sensor", func(e *EnvironmentSensorConfig) { e.Modbus.VelocityMS = &ModbusRegister{Addr: ip(5)} }, "environment[0].modbus.velocity_m_s", "no velocity_m_s channel"},
		{"pa on an environment sensor", func(e *EnvironmentSensorConfig) { e.Modbus.Pa = &ModbusRegister{Addr: ip(5)} }, "environment[0].modbus.pa", "environment sensor has no pa"},
		{"signed humidity", func(e *EnvironmentSensorConfig) { e.Modbus.HumidityPct.Signed = true }, "environment[0].modbus.humidity_pct.signed", "cannot be negative"},
		{"shared register", func(e *EnvironmentSensorConfig) { e.Modbus.HumidityPct.Addr = ip(0) }, "environment[0].modbus.humidity_pct.addr", "also temperature_c"},
		{"rtu address", func(e *EnvironmentSensorConfig) { e.Modbus.Address = "rtu:///dev/ttyUSB0?baud=9600" }, "", ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			e := envModbusSensors()[0]
			m := *e.Modbus
			h := *m.HumidityPct
			m.HumidityPct = &h
			e.Modbus = &m
			c.mod(&e)
			errs := ValidateEnvironmentSensors([]EnvironmentSensorConfig{e}, nil, nil, EnvironmentBounds{})
			if c.path == "" {
				if len(errs) > 0 {
					t.Fatalf("refused: %v", errs)
				}
				return
			}
			for _, fe := range errs {
				if fe.Path == c.path && strings.Contains(fe.Msg, c.msg) {
					return
				}
			}
			t.Errorf("no error at %s saying %q; got %v", c.path, c.msg, errs)
		})
	}
	// A counter or DP sensor with an environment register is refused.
	cs := []Counter{{ID: "pc", Zone: "z", Sizes: []string{"0.5"}, Modbus: &ModbusSource{Address: "127.0.0.1:502", Sample: &ModbusRegister{Addr: ip(0)},
		Channels: map[string]ModbusRegister{"0.5": {Addr: ip(1)}}, TemperatureC: &ModbusRegister{Addr: ip(2)}}}}
	if errs := ValidateCounters(cs, nil); len(errs) != 1 || errs[0].Path != "counters[0].modbus.temperature_c" {
		t.Errorf("counter with a temperature register: %v", errs)
	}
}
