package collector

import (
	"context"
	"fmt"
	"io"
	"log"
	"net"
	"sync"
	"time"

	"cleanmon/classify"

	"github.com/simonvetter/modbus"
)

// ModbusSlave serves the register map of one counter, DP or environment sensor over
// Modbus TCP, as the instrument would: the demo serves its simulated
// counters so, and tests use it as a device. Only mapped registers can
// be read; any other address, a write, or another unit id is answered
// with a Modbus exception, as a device answers.
type ModbusSlave struct {
	id         string
	kind       string
	plan       *devicePlan
	keys       []string          // counters: size keys aligned with plan.channels
	statusCode map[string]uint64 // status → the lowest raw value meaning it

	mu      sync.Mutex
	input   map[uint16]uint16
	holding map[uint16]uint16
	sample  uint64
	srv     *modbus.ModbusServer
	addr    string
	// hook, when set (tests), runs before every read under mu and may
	// fail it or stall it.
	hook func(input bool, addr, n uint16) error
}

// NewCounterSlave prepares a slave for the counter's modbus section (its
// address is ignored: Start says where to listen). Every mapped register
// starts at zero but the status, which starts at ok.
func NewCounterSlave(c Counter) (*ModbusSlave, error) {
	if c.Modbus == nil {
		return nil, fmt.Errorf("%w: counter %s has no modbus section", ErrModbus, c.ID)
	}
	c = c.withDefaults()
	keys := make([]string, len(c.Sizes))
	for i, sz := range c.Sizes {
		v, err := classify.ParseSize(sz)
		if err != nil {
			return nil, fmt.Errorf("%w: counter %s: sizes[%d]: %w", ErrConfig, c.ID, i, err)
		}
		keys[i] = classify.FormatSize(v)
	}
	plan, err := compileModbus(c.Modbus, "counter", c.Sizes, time.Duration(c.Interval))
	if err != nil {
		return nil, fmt.Errorf("counter %s: %w", c.ID, err)
	}
	s := newSlave(c.ID, "counter", plan)
	s.keys = keys
	return s, nil
}

// NewSensorSlave prepares a slave for the sensor's modbus section.
func NewSensorSlave(ss Sensor) (*ModbusSlave, error) {
	if ss.Modbus == nil {
		return nil, fmt.Errorf("%w: sensor %s has no modbus section", ErrModbus, ss.ID)
	}
	ss = ss.withDefaults()
	plan, err := compileModbus(ss.Modbus, "sensor", nil, time.Duration(ss.Interval))
	if err != nil {
		return nil, fmt.Errorf("sensor %s: %w", ss.ID, err)
	}
	return newSlave(ss.ID, "sensor", plan), nil
}

// NewEnvironmentSlave prepares a slave for the environment sensor's
// modbus section.
func NewEnvironmentSlave(e EnvironmentSensorConfig) (*ModbusSlave, error) {
	if e.Modbus == nil {
		return nil, fmt.Errorf("%w: environment sensor %s has no modbus section", ErrModbus, e.ID)
	}
	e = e.withDefaults()
	plan, err := compileModbus(e.Modbus, "environment", e.Channels(), time.Duration(e.Interval))
	if err != nil {
		return nil, fmt.Errorf("environment sensor %s: %w", e.ID, err)
	}
	return newSlave(e.ID, "environment", plan), nil
}

// PublishEnvironment shows the channels raw carries as the sensor's
// current values; all of them or, when one does not fit its register,
// none.
func (s *ModbusSlave) PublishEnvironment(raw RawEnvironment) error {
	if s.kind != "environment" {
		return fmt.Errorf("%w: slave %s is not an environment sensor", ErrModbus, s.id)
	}
	type put struct {
		f   *regField
		raw uint64
	}
	var puts []put
	for ch, f := range s.plan.env {
		v := raw.value(ch)
		if v == nil {
			continue
		}
		r, err := f.scaledRaw(*v)
		if err != nil {
			return fmt.Errorf("%w: slave %s: %w", ErrModbus, s.id, err)
		}
		puts = append(puts, put{f, r})
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, p := range puts {
		p.f.put(s.regs(p.f.input), p.raw)
	}
	return nil
}

func newSlave(id, kind string, plan *devicePlan) *ModbusSlave {
	s := &ModbusSlave{id: id, kind: kind, plan: plan, input: map[uint16]uint16{}, holding: map[uint16]uint16{}, statusCode: map[string]uint64{}}
	for code, st := range plan.statuses {
		if old, ok := s.statusCode[st]; !ok || code < old {
			s.statusCode[st] = code
		}
	}
	for _, f := range []*regField{plan.sample, plan.time, plan.flow, plan.volume, plan.secs, plan.status, plan.pa} {
		if f != nil {
			f.put(s.regs(f.input), 0)
		}
	}
	for _, f := range plan.channels {
		f.put(s.regs(f.input), 0)
	}
	if plan.status != nil {
		plan.status.put(s.regs(plan.status.input), s.statusCode[StatusOK])
	}
	return s
}

func (s *ModbusSlave) regs(input bool) map[uint16]uint16 {
	if input {
		return s.input
	}
	return s.holding
}

// Start listens on addr (host:port; port 0 picks a free one) and serves
// until Close.
func (s *ModbusSlave) Start(addr string) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.srv != nil {
		return fmt.Errorf("%w: slave %s already serves on %s", ErrModbus, s.id, s.addr)
	}
	var err error
	// The library listens by itself and does not tell the port it got, so
	// a free port is found first; another process may take it meanwhile,
	// hence the retries.
	for try := 0; try < 5; try++ {
		at, perr := freePort(addr)
		if perr != nil {
			return fmt.Errorf("%w: slave %s: %w", ErrModbus, s.id, perr)
		}
		var srv *modbus.ModbusServer
		srv, err = modbus.NewServer(&modbus.ServerConfiguration{URL: "tcp://" + at, Timeout: time.Minute, MaxClients: 16,
			Logger: log.New(io.Discard, "", 0)}, slaveHandler{s})
		if err == nil {
			if err = srv.Start(); err == nil {
				s.srv, s.addr = srv, at
				return nil
			}
		}
	}
	return fmt.Errorf("%w: slave %s listening on %s: %w", ErrModbus, s.id, addr, err)
}

// freePort returns addr with a free port when its port is 0.
func freePort(addr string) (string, error) {
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		return "", err
	}
	if port != "0" {
		return addr, nil
	}
	ln, err := net.Listen("tcp", net.JoinHostPort(host, "0"))
	if err != nil {
		return "", err
	}
	defer ln.Close()
	return ln.Addr().String(), nil
}

// Addr returns host:port the slave listens on ("" before Start).
func (s *ModbusSlave) Addr() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.addr
}

// Close stops listening and drops every connection, like a device whose
// plug is pulled; Start may be called again.
func (s *ModbusSlave) Close() error {
	s.mu.Lock()
	srv := s.srv
	s.srv = nil
	s.mu.Unlock()
	if srv == nil {
		return nil
	}
	return srv.Stop()
}

// PublishReading shows raw as the counter's newest finished sample: the
// counts, status, flow, volume, sampling time and time it carries go
// into their registers and the sample number advances, all at once for a
// reader. raw is taken as the counter's configured mode.
func (s *ModbusSlave) PublishReading(raw RawReading) error {
	puts, err := s.prepare(raw)
	if err != nil {
		return err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	s.apply(puts)
	s.advance()
	return nil
}

// slavePut is one value to write into the registers.
type slavePut struct {
	f   *regField
	raw uint64
}

// prepare turns a reading into register values.
func (s *ModbusSlave) prepare(raw RawReading) ([]slavePut, error) {
	if s.kind != "counter" || raw.Counter != s.id {
		return nil, fmt.Errorf("%w: slave %s cannot show a reading of counter %q", ErrModbus, s.id, raw.Counter)
	}
	var puts []slavePut
	for i, f := range s.plan.channels {
		c, ok := raw.Counts[s.keys[i]]
		if !ok {
			return nil, fmt.Errorf("%w: slave %s: the reading has no %s µm count", ErrModbus, s.id, s.keys[i])
		}
		if c.N > f.allOnes() {
			return nil, fmt.Errorf("%w: slave %s: count %d does not fit %d bits", ErrModbus, s.id, c.N, 16*f.n)
		}
		puts = append(puts, slavePut{f, c.N})
	}
	scaled := func(f *regField, v float64) error {
		if f == nil {
			return nil
		}
		r, err := f.scaledRaw(v)
		if err != nil {
			return fmt.Errorf("%w: slave %s: %w", ErrModbus, s.id, err)
		}
		puts = append(puts, slavePut{f, r})
		return nil
	}
	if err := scaled(s.plan.flow, raw.FlowLPM); err != nil {
		return nil, err
	}
	if err := scaled(s.plan.secs, raw.SampleS); err != nil {
		return nil, err
	}
	if s.plan.volume != nil {
		if raw.VolumeL == nil {
			return nil, fmt.Errorf("%w: slave %s: the reading has no volume", ErrModbus, s.id)
		}
		if err := scaled(s.plan.volume, *raw.VolumeL); err != nil {
			return nil, err
		}
	}
	if f := s.plan.status; f != nil {
		st := raw.Status
		if st == "" {
			st = StatusOK
		}
		code, ok := s.statusCode[st]
		if !ok {
			return nil, fmt.Errorf("%w: slave %s: the register map has no value for status %q", ErrModbus, s.id, st)
		}
		puts = append(puts, slavePut{f, code})
	}
	if f := s.plan.time; f != nil {
		t, err := time.Parse(time.RFC3339Nano, raw.Time)
		if err != nil || t.Unix() <= 0 || uint64(t.Unix()) >= f.allOnes() {
			return nil, fmt.Errorf("%w: slave %s: time %q cannot be shown in Unix seconds", ErrModbus, s.id, raw.Time)
		}
		puts = append(puts, slavePut{f, uint64(t.Unix())})
	}
	return puts, nil
}

// apply writes the values; s.mu must be held.
func (s *ModbusSlave) apply(puts []slavePut) {
	for _, p := range puts {
		p.f.put(s.regs(p.f.input), p.raw)
	}
}

// advance moves the sample number on; s.mu must be held.
func (s *ModbusSlave) advance() {
	s.sample = (s.sample + 1) & s.plan.sample.allOnes()
	s.plan.sample.put(s.regs(s.plan.sample.input), s.sample)
}

// PublishPressure shows pa as the sensor's current differential pressure.
func (s *ModbusSlave) PublishPressure(pa float64) error {
	if s.kind != "sensor" {
		return fmt.Errorf("%w: slave %s is not a DP sensor", ErrModbus, s.id)
	}
	r, err := s.plan.pa.scaledRaw(pa)
	if err != nil {
		return fmt.Errorf("%w: slave %s: %w", ErrModbus, s.id, err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	s.plan.pa.put(s.regs(s.plan.pa.input), r)
	return nil
}

// read answers a read request the way a device does.
func (s *ModbusSlave) read(input bool, unit uint8, addr, n uint16) ([]uint16, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if unit != s.plan.unit {
		return nil, modbus.ErrGWTargetFailedToRespond
	}
	if s.hook != nil {
		if err := s.hook(input, addr, n); err != nil {
			return nil, err
		}
	}
	regs := s.regs(input)
	out := make([]uint16, n)
	for i := range out {
		v, ok := regs[addr+uint16(i)]
		if !ok {
			return nil, modbus.ErrIllegalDataAddress
		}
		out[i] = v
	}
	return out, nil
}

// slaveHandler answers the Modbus server's requests from the slave's
// registers; it keeps the handler methods off the slave's API.
type slaveHandler struct{ s *ModbusSlave }

func (h slaveHandler) HandleCoils(*modbus.CoilsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalFunction
}

func (h slaveHandler) HandleDiscreteInputs(*modbus.DiscreteInputsRequest) ([]bool, error) {
	return nil, modbus.ErrIllegalFunction
}

func (h slaveHandler) HandleHoldingRegisters(r *modbus.HoldingRegistersRequest) ([]uint16, error) {
	if r.IsWrite {
		return nil, modbus.ErrIllegalFunction
	}
	return h.s.read(false, r.UnitId, r.Addr, r.Quantity)
}

func (h slaveHandler) HandleInputRegisters(r *modbus.InputRegistersRequest) ([]uint16, error) {
	return h.s.read(true, r.UnitId, r.Addr, r.Quantity)
}

// SlaveFeed is a [Submitter] that shows each reading of a counter served
// by a slave on that slave, each DP sample of a served sensor on its
// slave, and passes everything else to Next: the simulator feeds the
// demo's Modbus devices through it. Result.Accepted counts what the
// slaves showed plus what Next accepted.
type SlaveFeed struct {
	Slaves map[string]*ModbusSlave // by counter or sensor id
	Next   Submitter               // may be nil when every instrument has a slave
	// NextEnvironment takes the environment samples of sensors without a
	// slave; may be nil when every environment sensor has one.
	NextEnvironment EnvironmentSubmitter
}

// SubmitEnvironment shows or passes on raws.
func (f *SlaveFeed) SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error) {
	var res Result
	var rest []RawEnvironment
	for _, e := range raws {
		s, ok := f.Slaves[e.Sensor]
		if !ok {
			rest = append(rest, e)
			continue
		}
		if err := s.PublishEnvironment(e); err != nil {
			return res, err
		}
		res.Accepted++
	}
	if len(rest) == 0 {
		return res, nil
	}
	if f.NextEnvironment == nil {
		return res, fmt.Errorf("%w: no slave and no next environment submitter for some of the samples", ErrModbus)
	}
	r, err := f.NextEnvironment.SubmitEnvironment(ctx, rest)
	res.Accepted += r.Accepted
	res.Duplicates += r.Duplicates
	return res, err
}

// SubmitReadings shows or passes on raws.
func (f *SlaveFeed) SubmitReadings(ctx context.Context, raws []RawReading) (Result, error) {
	var res Result
	var rest []RawReading
	for _, r := range raws {
		s, ok := f.Slaves[r.Counter]
		if !ok {
			rest = append(rest, r)
			continue
		}
		if err := s.PublishReading(r); err != nil {
			return res, err
		}
		res.Accepted++
	}
	return f.pass(res, len(rest) > 0, func(n Submitter) (Result, error) { return n.SubmitReadings(ctx, rest) })
}

// SubmitPressure shows or passes on raws.
func (f *SlaveFeed) SubmitPressure(ctx context.Context, raws []RawPressure) (Result, error) {
	var res Result
	var rest []RawPressure
	for _, p := range raws {
		s, ok := f.Slaves[p.Sensor]
		if !ok || p.Pa == nil {
			rest = append(rest, p)
			continue
		}
		if err := s.PublishPressure(*p.Pa); err != nil {
			return res, err
		}
		res.Accepted++
	}
	return f.pass(res, len(rest) > 0, func(n Submitter) (Result, error) { return n.SubmitPressure(ctx, rest) })
}

func (f *SlaveFeed) pass(res Result, any bool, call func(Submitter) (Result, error)) (Result, error) {
	if !any {
		return res, nil
	}
	if f.Next == nil {
		return res, fmt.Errorf("%w: no slave and no next submitter for some of the data", ErrModbus)
	}
	r, err := call(f.Next)
	res.Accepted += r.Accepted
	res.Duplicates += r.Duplicates
	return res, err
}
