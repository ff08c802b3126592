package daemon

import (
	"context"
	"fmt"
	"log/slog"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/common/model"

	"cleanmon/collector"
)

// modbusHooks is what the Modbus poller is wired to besides the ingest.
type modbusHooks struct {
	// Events receives device faults and recoveries (the alarm engine's
	// instrument rule); nil: the poller only logs them.
	Events collector.DeviceEvents
	// Metrics is the daemon's registry for the cleanmon_modbus_* metrics;
	// nil: none.
	Metrics prometheus.Registerer
	// Now is the daemon's clock (the demo's may run fast); nil: time.Now.
	Now func() time.Time
	// MaxConns bounds the open Modbus connections; 0: the default.
	MaxConns int
	// Environment takes the samples of polled environment sensors.
	Environment collector.EnvironmentSubmitter
}

// startModbus polls, in the background, every counter and sensor of reg
// whose source is modbus, submitting through in like any pushed reading.
// It returns at once; stop ends polling and waits for it (bounded by the
// request timeouts). With no such instrument it starts nothing.
func startModbus(ctx context.Context, reg *collector.Registry, in collector.Submitter, log *slog.Logger, m modbusHooks) (stop func(), err error) {
	p, err := collector.NewPoller(reg, in, collector.PollerOptions{
		Events:   m.Events,
		Metrics:  m.Metrics,
		Logger:   log.With("component", "modbus"),
		Now:      m.Now,
		MaxConns: m.MaxConns,

		Environment: m.Environment,
	})
	if err != nil {
		return nil, err
	}
	if p.Len() == 0 {
		return func() {}, nil
	}
	ctx, cancel := context.WithCancel(ctx)
	done := make(chan struct{})
	go func() {
		defer close(done)
		p.Run(ctx)
	}()
	log.Info("polling Modbus devices", "devices", p.Len())
	var once sync.Once
	return func() {
		once.Do(func() {
			cancel()
			<-done
		})
	}, nil
}

// demoModbus serves the demo's simulated counters as Modbus TCP devices
// on loopback (serve --demo --demo-modbus), so that the poller runs end
// to end: simulator → device registers → poll → ingest.
type demoModbus struct {
	// Counters are the demo counters with source modbus, each pointed at
	// its device.
	Counters []collector.Counter
	// Addrs gives each counter's device address.
	Addrs  map[string]string
	slaves map[string]*collector.ModbusSlave
}

// Register map of a demo counter: every value in one block of input
// registers, so that a poll is one request.
const (
	demoRegSample = 0 // 32-bit sample number
	demoRegTime   = 2 // 32-bit Unix seconds
	demoRegCounts = 4 // 32 bits per channel from here
)

// demoModbusSource is the register map of a demo counter with n channels.
func demoModbusSource(sizes []string, poll time.Duration) *collector.ModbusSource {
	at := func(a int) *int { return &a }
	r32 := func(a int) *collector.ModbusRegister { return &collector.ModbusRegister{Addr: at(a), Bits: 32} }
	ch := map[string]collector.ModbusRegister{}
	next := demoRegCounts
	for _, s := range sizes {
		ch[s] = *r32(next)
		next += 2
	}
	return &collector.ModbusSource{
		Poll:          model.Duration(poll),
		Sample:        r32(demoRegSample),
		Time:          r32(demoRegTime),
		Channels:      ch,
		Status:        &collector.ModbusStatus{Addr: at(next), Values: map[string]string{"0": collector.StatusOK, "1": collector.StatusWarning, "2": collector.StatusFault}},
		Flow:          &collector.ModbusRegister{Addr: at(next + 1), Scale: 0.001},            // L/min
		SampleSeconds: &collector.ModbusRegister{Addr: at(next + 2)},                          // s
		Volume:        &collector.ModbusRegister{Addr: at(next + 3), Bits: 32, Scale: 0.0001}, // L
	}
}

// demoPoll is how often a demo device is polled: four times per
// simulated sample at the demo's speed, within 100 ms and 5 s.
func demoPoll(interval time.Duration, speed float64) time.Duration {
	p := time.Duration(float64(interval) / speed / 4)
	return min(max(p, collector.MinModbusPoll), collector.DefaultModbusPoll)
}

// startDemoModbus starts a loopback Modbus device for every counter in
// cs and returns the counters re-pointed at them. Feed the simulator's
// live readings through Feed so that they reach the devices.
func startDemoModbus(cs []collector.Counter, speed float64) (*demoModbus, error) {
	if !(speed > 0) {
		return nil, fmt.Errorf("demo Modbus: speed %g must be positive", speed)
	}
	d := &demoModbus{Addrs: map[string]string{}, slaves: map[string]*collector.ModbusSlave{}}
	for _, c := range cs {
		interval := time.Duration(c.Interval)
		if interval == 0 {
			interval = collector.DefaultCounterInterval
		}
		c.Source = collector.SourceModbus
		c.Modbus = demoModbusSource(c.Sizes, demoPoll(interval, speed))
		s, err := collector.NewCounterSlave(c)
		if err == nil {
			err = s.Start("127.0.0.1:0")
		}
		if err != nil {
			d.Stop()
			return nil, fmt.Errorf("demo Modbus device for %s: %w", c.ID, err)
		}
		c.Modbus.Address = s.Addr()
		d.slaves[c.ID], d.Addrs[c.ID] = s, s.Addr()
		d.Counters = append(d.Counters, c)
	}
	return d, nil
}

// Feed is the submitter for the simulator's live data: counter readings
// go to the devices, the rest (DP samples) to next.
func (d *demoModbus) Feed(next collector.Submitter) collector.Submitter {
	return &collector.SlaveFeed{Slaves: d.slaves, Next: next}
}

// Stop closes every device.
func (d *demoModbus) Stop() {
	for _, s := range d.slaves {
		s.Close()
	}
}
