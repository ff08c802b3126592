package collector

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log"
	"log/slog"
	"math/rand/v2"
	"net"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/simonvetter/modbus"
)

// Why a poll failed or a device was judged faulty: the reason label of
// cleanmon_modbus_poll_errors_total and the reason given to
// [DeviceEvents].Fault.
const (
	// ReasonConnect: no connection could be made, or it dropped.
	ReasonConnect = "connect"
	// ReasonTimeout: the device did not answer within the timeout.
	ReasonTimeout = "timeout"
	// ReasonException: the device answered with a Modbus exception (an
	// address it does not have, a busy or failed device, a gateway whose
	// target is silent).
	ReasonException = "exception"
	// ReasonProtocol: the answer was malformed or for another unit.
	ReasonProtocol = "protocol"
	// ReasonRestart: the sample number went back, so the counter
	// restarted; polling starts again from its new number.
	ReasonRestart = "restart"
	// ReasonImplausible: values that cannot be real (counts beyond what
	// the counter can count, an all-ones "no value" marker, a zero volume
	// or sampling time).
	ReasonImplausible = "implausible"
	// ReasonFlowZero: the counter reports no sample flow, so its counts
	// say nothing about the air.
	ReasonFlowZero = "flow-zero"
	// ReasonStatus: a status value the register map does not list, or a
	// DP sensor reporting a fault.
	ReasonStatus = "status"
	// ReasonRejected: the ingest refused the reading (the same checks as
	// for a pushed reading).
	ReasonRejected = "rejected"
	// ReasonCommit: the store failed. Not the device's fault: no
	// DeviceEvents call, and the sample is read again at the next poll.
	ReasonCommit = "commit"
)

// ImplausibleFactor bounds what a counter can have counted: a sample whose
// concentration at the smallest size is beyond this many times the
// counter's stated maximum (max_per_m3) is refused as not real. At the
// maximum the coincidence loss is already up to 10 % (ISO 21501-4), and
// it grows steeply beyond; ten times the maximum is a wrong register map
// or a broken instrument (the factor is common practice, no source).
// Between the maximum and this bound readings are stored, flagged over
// range, as pushed ones are.
const ImplausibleFactor = 10

// DeviceEvents receives the poller's verdicts on each polled counter or
// sensor, so that the alarm engine can raise and clear an instrument
// alarm; stale alarms come from the engine's own silence rule. Fault is
// called when a device becomes faulty or the reason changes, not at every
// failed poll; Recovered when a faulty device delivers a good sample
// again. Calls come from the devices' goroutines, concurrently, and must
// be quick.
type DeviceEvents interface {
	Fault(id, reason string, t time.Time)
	Recovered(id string, t time.Time)
}

// Device states of [DeviceStatus].
const (
	DeviceUnknown = "unknown" // no good sample yet, and no fault
	DeviceOK      = "ok"
	DeviceFault   = "fault"
)

// DeviceStatus is what the poller knows of one device.
type DeviceStatus struct {
	ID          string    // counter or sensor id
	Kind        string    // "counter", "sensor" (DP) or "environment"
	Address     string    // host:port, or an rtu:// serial address
	State       string    // DeviceUnknown, DeviceOK or DeviceFault
	Reason      string    // of the fault (a Reason constant), "" otherwise
	LastError   string    // the last poll error in full, "" if none yet
	Since       time.Time // when State began (zero while unknown)
	LastSuccess time.Time // last poll that completed without error
	Sample      uint64    // last sample number taken as seen (counters)
}

// PollerOptions tunes a [Poller]; zero fields take the defaults.
type PollerOptions struct {
	// Events receives faults and recoveries; nil: none.
	Events DeviceEvents
	// Metrics is where the poll metrics are registered; nil: nowhere.
	Metrics prometheus.Registerer
	// Logger receives poll failures and the Modbus library's own messages
	// (at debug level); nil: discarded.
	Logger *slog.Logger
	// Now stamps readings that carry no time of their own; default
	// time.Now. Scheduling uses the wall clock regardless.
	Now func() time.Time
	// MaxConns bounds the connections open at once (default 32). When
	// there are at most that many devices each keeps its connection open;
	// otherwise each poll connects and disconnects, so that every device
	// gets its turn.
	MaxConns int
	// MaxBackoff bounds the wait between attempts at a failing device;
	// default eight poll periods, at most a minute.
	MaxBackoff time.Duration
	// Environment receives the samples of polled environment sensors;
	// required when the registry has any whose source is modbus.
	Environment EnvironmentSubmitter
}

// DefaultMaxConns is the default bound on open Modbus connections.
const DefaultMaxConns = 32

// ErrModbus wraps failures of the Modbus poller's set-up.
var ErrModbus = errors.New("collector: modbus")

// Poller reads every counter, DP and environment sensor of a registry
// whose source is modbus, over Modbus TCP or RTU, and submits what it
// reads through the same [Submitter] (an [*Ingest]) and
// [EnvironmentSubmitter] as pushed data, so the same validation, store and
// alarm path applies.
//
// Each device has its own goroutine, so a slow or dead device delays no
// other; a semaphore bounds the open connections. A counter is read only
// when its sample number has moved on, so each finished sample is read
// once; a failing device is retried with exponential backoff, and polled
// at its normal rate again once it answers. The sample shown when polling
// starts is taken as already seen unless the map has a time register.
type Poller struct {
	devices []*device
	opt     PollerOptions
	metrics *pollMetrics
	conns   chan struct{}
	persist bool
	libLog  *log.Logger
	log     *slog.Logger
}

// device is the state of one polled instrument; only its own goroutine
// touches it, except st, which Devices reads under mu.
type device struct {
	p        *Poller
	id, kind string
	addr     string
	where    ModbusAddress
	line     *sync.Mutex // the serial line, when other devices share it
	plan     *devicePlan
	counter  *CounterInfo
	sub      Submitter
	env      EnvironmentSubmitter // environment sensors
	client   *modbus.ModbusClient
	seen     bool   // a sample number has been read
	last     uint64 // the last sample number taken as seen
	backoff  time.Duration

	mu sync.Mutex
	st DeviceStatus
}

// NewPoller prepares polling of every counter and sensor in reg whose
// source is modbus; submit receives the readings and DP samples,
// opt.Environment the environment samples. It fails, wrapping ErrModbus,
// when a register map or address does not compile, devices on one serial
// line disagree on its settings, or the metrics cannot be registered.
func NewPoller(reg *Registry, submit Submitter, opt PollerOptions) (*Poller, error) {
	if opt.Now == nil {
		opt.Now = time.Now
	}
	if opt.MaxConns <= 0 {
		opt.MaxConns = DefaultMaxConns
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	p := &Poller{opt: opt, log: opt.Logger, conns: make(chan struct{}, opt.MaxConns)}
	p.libLog = slog.NewLogLogger(opt.Logger.Handler(), slog.LevelDebug)
	for _, ci := range reg.Counters() {
		if ci.Source != SourceModbus {
			continue
		}
		plan, err := compileModbus(ci.Modbus, "counter", ci.Sizes, time.Duration(ci.Interval))
		if err != nil {
			return nil, fmt.Errorf("%w: counter %s: %w", ErrModbus, ci.ID, err)
		}
		p.devices = append(p.devices, &device{p: p, id: ci.ID, kind: "counter", addr: ci.Modbus.Address, plan: plan, counter: ci, sub: submit})
	}
	for _, si := range reg.Sensors() {
		if si.Source != SourceModbus {
			continue
		}
		plan, err := compileModbus(si.Modbus, "sensor", nil, time.Duration(si.Interval))
		if err != nil {
			return nil, fmt.Errorf("%w: sensor %s: %w", ErrModbus, si.ID, err)
		}
		p.devices = append(p.devices, &device{p: p, id: si.ID, kind: "sensor", addr: si.Modbus.Address, plan: plan, sub: submit})
	}
	if err := p.addEnvironment(reg, opt.Environment); err != nil {
		return nil, err
	}
	if err := p.resolveAddresses(); err != nil {
		return nil, err
	}
	ids := make([]string, len(p.devices))
	for i, d := range p.devices {
		ids[i] = d.id
		d.st = DeviceStatus{ID: d.id, Kind: d.kind, Address: d.addr, State: DeviceUnknown}
	}
	m, err := newPollMetrics(opt.Metrics, ids)
	if err != nil {
		return nil, fmt.Errorf("%w: metrics: %w", ErrModbus, err)
	}
	p.metrics = m
	p.persist = len(p.devices) <= opt.MaxConns
	return p, nil
}

// addEnvironment adds the environment sensors polled over Modbus.
func (p *Poller) addEnvironment(reg *Registry, sub EnvironmentSubmitter) error {
	for _, ei := range reg.EnvironmentSensors() {
		if ei.Source != SourceModbus {
			continue
		}
		if sub == nil {
			return fmt.Errorf("%w: environment sensor %s is polled, but PollerOptions.Environment is not set", ErrModbus, ei.ID)
		}
		plan, err := compileModbus(ei.Modbus, "environment", ei.Channels(), time.Duration(ei.Interval))
		if err != nil {
			return fmt.Errorf("%w: environment sensor %s: %w", ErrModbus, ei.ID, err)
		}
		p.devices = append(p.devices, &device{p: p, id: ei.ID, kind: "environment", addr: ei.Modbus.Address, plan: plan, env: sub})
	}
	return nil
}

// resolveAddresses parses every device's address and makes the devices
// on one serial line take turns: a line carries one request at a time.
func (p *Poller) resolveAddresses() error {
	byPort := map[string][]*device{}
	for _, d := range p.devices {
		a, err := ParseModbusAddress(d.addr)
		if err != nil {
			return fmt.Errorf("%w: %s %s: address %w", ErrModbus, d.kind, d.id, err)
		}
		d.where = a
		if a.Serial {
			byPort[a.Port] = append(byPort[a.Port], d)
		}
	}
	for _, ds := range byPort {
		if len(ds) < 2 {
			continue
		}
		mu := &sync.Mutex{}
		for _, d := range ds {
			if d.where != ds[0].where {
				return fmt.Errorf("%w: %s %s: serial line %s is set up as %s by %s %s", ErrModbus, d.kind, d.id, d.where.Port, ds[0].where, ds[0].kind, ds[0].id)
			}
			d.line = mu
		}
	}
	return nil
}

// Len returns the number of devices polled.
func (p *Poller) Len() int { return len(p.devices) }

// Devices returns the state of every polled device, counters then
// sensors, each ordered by id.
func (p *Poller) Devices() []DeviceStatus {
	out := make([]DeviceStatus, len(p.devices))
	for i, d := range p.devices {
		d.mu.Lock()
		out[i] = d.st
		d.mu.Unlock()
	}
	return out
}

// Run polls until ctx ends, then closes every connection and returns nil.
// A request in flight when ctx ends finishes or times out first, so Run
// may return up to one timeout (or the Modbus library's 5 s connect
// timeout) after ctx ends.
func (p *Poller) Run(ctx context.Context) error {
	var wg sync.WaitGroup
	for _, d := range p.devices {
		wg.Add(1)
		go func() {
			defer wg.Done()
			d.run(ctx)
		}()
	}
	wg.Wait()
	return nil
}

// pollError is a failed poll: its reason and the error in full.
type pollError struct {
	reason string
	err    error
}

func (e *pollError) Error() string { return e.reason + ": " + e.err.Error() }

func fault(reason, format string, args ...any) *pollError {
	return &pollError{reason: reason, err: fmt.Errorf(format, args...)}
}

// backsOff tells whether the device should be left alone for a while:
// it is unreachable or refuses us, rather than answering with odd data.
func (e *pollError) backsOff() bool {
	switch e.reason {
	case ReasonConnect, ReasonTimeout, ReasonException, ReasonProtocol:
		return true
	}
	return false
}

func (d *device) run(ctx context.Context) {
	defer d.disconnect()
	maxBackoff := d.p.opt.MaxBackoff
	if maxBackoff <= 0 {
		maxBackoff = min(8*d.plan.poll, time.Minute)
	}
	maxBackoff = max(maxBackoff, d.plan.poll)
	timer := time.NewTimer(0)
	defer timer.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-timer.C:
		}
		start := time.Now()
		if perr := d.pollOnce(ctx); perr != nil && ctx.Err() == nil && perr.backsOff() {
			// Double the wait at every failure in a row, with ±10 %
			// jitter so that devices behind one gateway do not all
			// come back at the same instant.
			d.backoff = min(max(2*d.backoff, d.plan.poll), maxBackoff)
			wait := time.Duration(float64(d.backoff) * (0.9 + 0.2*rand.Float64()))
			timer.Reset(max(0, wait-time.Since(start)))
			continue
		}
		d.backoff = 0
		timer.Reset(untilNextPoll(time.Now(), d.plan.poll))
	}
}

// untilNextPoll is the wait from now to the next multiple of period on the
// clock. Devices with the same period then poll at the same instants, and
// their samples, submitted through the ingest's pooled view, share one
// commit: at most one per period for all of them, where polls at their own
// phases would fill every second.
func untilNextPoll(now time.Time, period time.Duration) time.Duration {
	if period <= 0 {
		return 0
	}
	return period - time.Duration(now.UnixNano()%int64(period))
}

// pollOnce runs one poll and books its outcome. Events are told after
// the status is updated and unlocked, so that a handler may read Devices.
func (d *device) pollOnce(ctx context.Context) *pollError {
	if d.line != nil {
		d.line.Lock()
	}
	perr, fresh := d.poll(ctx)
	if d.line != nil {
		// Another unit on the same line needs the port.
		d.disconnect()
		d.line.Unlock()
	}
	if !d.p.persist || (perr != nil && perr.backsOff() && perr.reason != ReasonException) {
		// After a timeout or a broken frame a late answer could still be
		// on its way: start from a fresh connection.
		d.disconnect()
	}
	if perr != nil && ctx.Err() != nil {
		return perr // shutting down: nothing the device did
	}
	now := d.p.opt.Now()
	m := d.p.metrics
	m.polled(d.id, perr == nil)
	var tell func(DeviceEvents)
	d.mu.Lock()
	d.st.Sample = d.last
	switch {
	case perr == nil:
		m.success(d.id, time.Now())
		d.st.LastSuccess = now
		if fresh && d.st.State != DeviceOK {
			if d.st.State == DeviceFault {
				d.p.log.Info("modbus device recovered", "device", d.id, "address", d.addr)
				tell = func(ev DeviceEvents) { ev.Recovered(d.id, now) }
			}
			d.st.State, d.st.Reason, d.st.Since = DeviceOK, "", now
		}
	case perr.reason == ReasonCommit:
		m.failed(d.id, perr.reason)
		d.st.LastError = perr.Error()
		d.p.log.Error("modbus reading not stored; it is read again at the next poll", "device", d.id, "err", perr.err)
	default:
		m.failed(d.id, perr.reason)
		d.st.LastError = perr.Error()
		if d.st.State != DeviceFault || d.st.Reason != perr.reason {
			d.st.State, d.st.Reason, d.st.Since = DeviceFault, perr.reason, now
			d.p.log.Warn("modbus device fault", "device", d.id, "address", d.addr, "reason", perr.reason, "err", perr.err)
			reason := perr.reason
			tell = func(ev DeviceEvents) { ev.Fault(d.id, reason, now) }
		}
	}
	d.mu.Unlock()
	if ev := d.p.opt.Events; tell != nil && ev != nil {
		tell(ev)
	}
	return perr
}

// poll reads the device once; fresh tells that a new sample was stored.
func (d *device) poll(ctx context.Context) (perr *pollError, fresh bool) {
	if err := d.connect(ctx); err != nil {
		return err, false
	}
	switch d.kind {
	case "sensor":
		return d.pollSensor(ctx)
	case "environment":
		return d.pollEnvironment(ctx)
	}
	return d.pollCounter(ctx)
}

func (d *device) connect(ctx context.Context) *pollError {
	if d.client != nil {
		return nil
	}
	select {
	case d.p.conns <- struct{}{}:
	case <-ctx.Done():
		return &pollError{reason: ReasonConnect, err: ctx.Err()}
	}
	cfg := d.where.clientConfig()
	cfg.Timeout, cfg.Logger = d.plan.timeout, d.p.libLog
	c, err := modbus.NewClient(&cfg)
	if err == nil {
		err = c.Open()
	}
	if err != nil {
		<-d.p.conns
		return classifyErr(fmt.Errorf("connecting to %s: %w", d.addr, err))
	}
	if err := c.SetUnitId(d.plan.unit); err != nil {
		c.Close()
		<-d.p.conns
		return classifyErr(err)
	}
	d.client = c
	return nil
}

func (d *device) disconnect() {
	if d.client == nil {
		return
	}
	d.client.Close()
	d.client = nil
	<-d.p.conns
}

// classifyErr sorts a client error into a reason.
func classifyErr(err error) *pollError {
	var me modbus.Error
	var ne net.Error
	reason := ReasonConnect
	switch {
	case errors.Is(err, modbus.ErrRequestTimedOut), errors.As(err, &ne) && ne.Timeout():
		reason = ReasonTimeout
	case errors.As(err, &me):
		switch me {
		case modbus.ErrIllegalFunction, modbus.ErrIllegalDataAddress, modbus.ErrIllegalDataValue,
			modbus.ErrServerDeviceFailure, modbus.ErrAcknowledge, modbus.ErrServerDeviceBusy,
			modbus.ErrMemoryParityError, modbus.ErrGWPathUnavailable, modbus.ErrGWTargetFailedToRespond:
			reason = ReasonException
		case modbus.ErrConfigurationError:
			reason = ReasonConnect
		default:
			reason = ReasonProtocol
		}
	}
	return &pollError{reason: reason, err: err}
}

// read fetches block i into vals[i].
func (d *device) read(vals [][]uint16, i int) *pollError {
	b := d.plan.blocks[i]
	typ := modbus.HOLDING_REGISTER
	if b.input {
		typ = modbus.INPUT_REGISTER
	}
	v, err := d.client.ReadRegisters(b.addr, b.n, typ)
	if err != nil {
		return classifyErr(fmt.Errorf("reading %s registers %d–%d: %w", typeName(b.input), b.addr, int(b.addr)+int(b.n)-1, err))
	}
	if len(v) != int(b.n) {
		return fault(ReasonProtocol, "asked for %d registers at %d, got %d", b.n, b.addr, len(v))
	}
	vals[i] = v
	return nil
}

func (d *device) readAll(vals [][]uint16, skip int) *pollError {
	for i := range d.plan.blocks {
		if i == skip {
			continue
		}
		if err := d.read(vals, i); err != nil {
			return err
		}
	}
	return nil
}

func (d *device) pollCounter(ctx context.Context) (*pollError, bool) {
	plan := d.plan
	vals := make([][]uint16, len(plan.blocks))
	sb := plan.sample.block
	if err := d.read(vals, sb); err != nil {
		return err, false
	}
	n := plan.sample.raw(vals)
	now := d.p.opt.Now()
	missed := uint64(0)
	first := !d.seen
	if first {
		d.seen, d.last = true, n
		if plan.time == nil {
			// Without the counter's own time this sample cannot be told
			// from one stored before a restart of the daemon: leave it.
			return nil, false
		}
	} else {
		step := (n - d.last) & plan.sample.allOnes()
		switch {
		case step == 0:
			return nil, false
		case step > plan.sample.allOnes()/2:
			old := d.last
			d.last = n
			return fault(ReasonRestart, "sample number went back from %d to %d: the counter restarted", old, n), false
		}
		missed = step - 1
	}
	if err := d.readAll(vals, sb); err != nil {
		return err, false
	}
	if len(plan.blocks) > 1 {
		// The sample may have finished while the other blocks were read:
		// then they belong to the next one, and are read again with it.
		check := make([][]uint16, len(plan.blocks))
		if err := d.read(check, sb); err != nil {
			return err, false
		}
		if plan.sample.raw(check) != n {
			return nil, false
		}
	}
	if first && plan.time.raw(vals) == 0 {
		return nil, false // a counter that has not finished a sample yet
	}
	d.p.metrics.samples(d.id, sampleMissed, int(missed))
	raw, perr := d.counterReading(vals, now)
	if perr != nil {
		d.last = n // judged: not read again
		return perr, false
	}
	res, err := d.sub.SubmitReadings(ctx, []RawReading{raw})
	var ie *InputError
	switch {
	case errors.As(err, &ie):
		d.last = n
		return &pollError{reason: ReasonRejected, err: err}, false
	case err != nil:
		return &pollError{reason: ReasonCommit, err: err}, false
	}
	d.last = n
	d.p.metrics.samples(d.id, sampleAccepted, res.Accepted)
	d.p.metrics.samples(d.id, sampleDuplicate, res.Duplicates)
	return nil, true
}

// counterReading turns the registers of one sample into a reading, or
// says why they cannot be real.
func (d *device) counterReading(vals [][]uint16, now time.Time) (RawReading, *pollError) {
	plan, ci := d.plan, d.counter
	raw := RawReading{Counter: ci.ID, Counts: make(map[string]Count, len(ci.Keys)), Status: StatusOK}
	counts := make([]uint64, len(ci.Keys))
	for i, f := range plan.channels {
		c := f.raw(vals)
		if c == f.allOnes() {
			return raw, fault(ReasonImplausible, "the %s µm channel reads 0x%X, the all-ones \"no value\" marker", ci.Keys[i], c)
		}
		counts[i] = c
		raw.Counts[ci.Keys[i]] = Count{N: c}
	}
	if plan.status != nil {
		code := plan.status.raw(vals)
		s, ok := plan.statuses[code]
		if !ok {
			return raw, fault(ReasonStatus, "status value %d is not in the register map", code)
		}
		raw.Status = s
	}
	if plan.flow != nil {
		raw.FlowLPM = plan.flow.value(vals)
		if !(raw.FlowLPM > 0) {
			return raw, fault(ReasonFlowZero, "flow reads %g L/min: no air is sampled, the counts mean nothing", raw.FlowLPM)
		}
	}
	if plan.secs != nil {
		raw.SampleS = plan.secs.value(vals)
		if !(raw.SampleS > 0) {
			return raw, fault(ReasonImplausible, "sampling time reads %g s", raw.SampleS)
		}
	}
	var vol float64
	if plan.volume != nil {
		vol = plan.volume.value(vals)
		if !(vol > 0) {
			return raw, fault(ReasonImplausible, "volume reads %g L", vol)
		}
	} else {
		flow, secs := ci.FlowLPM, time.Duration(ci.Interval).Seconds()
		if raw.FlowLPM > 0 {
			flow = raw.FlowLPM
		}
		if raw.SampleS > 0 {
			secs = raw.SampleS
		}
		vol = flow * secs / 60
	}
	raw.VolumeL = &vol
	t := now
	if plan.time != nil {
		s := plan.time.raw(vals)
		if s == 0 || s == plan.time.allOnes() {
			return raw, fault(ReasonImplausible, "sample time reads %d", s)
		}
		t = time.Unix(int64(s), 0)
	}
	raw.Time = t.UTC().Format(time.RFC3339Nano)
	if ci.MaxPerM3 > 0 {
		total := counts[0]
		if ci.Mode == ModeDifferential {
			total = 0
			for _, c := range counts {
				total += c
			}
		}
		if conc := float64(total) / vol * 1000; conc > ImplausibleFactor*ci.MaxPerM3 {
			return raw, fault(ReasonImplausible, "%d particles ≥%s µm in %g L is %.3g/m³, beyond %d× the counter's maximum of %g/m³",
				total, ci.Keys[0], vol, conc, ImplausibleFactor, ci.MaxPerM3)
		}
	}
	return raw, nil
}

func (d *device) pollSensor(ctx context.Context) (*pollError, bool) {
	plan := d.plan
	vals, perr := d.readSensor()
	if perr != nil {
		return perr, false
	}
	pa := plan.pa.value(vals)
	raw := RawPressure{Sensor: d.id, Time: d.p.opt.Now().UTC().Format(time.RFC3339Nano), Pa: &pa}
	res, err := d.sub.SubmitPressure(ctx, []RawPressure{raw})
	return d.submitted(res, err)
}

func (d *device) pollEnvironment(ctx context.Context) (*pollError, bool) {
	plan := d.plan
	vals, perr := d.readSensor()
	if perr != nil {
		return perr, false
	}
	raw := RawEnvironment{Sensor: d.id, Time: d.p.opt.Now().UTC().Format(time.RFC3339Nano)}
	for ch, f := range plan.env {
		if f.raw(vals) == f.allOnes() && !f.signed {
			return fault(ReasonImplausible, "%s reads 0x%X, the all-ones \"no value\" marker", ch, f.raw(vals)), false
		}
		v := f.value(vals)
		switch ch {
		case ChanTemperature:
			raw.TemperatureC = &v
		case ChanHumidity:
			raw.HumidityPct = &v
		case ChanVelocity:
			raw.VelocityMS = &v
		}
	}
	res, err := d.env.SubmitEnvironment(ctx, []RawEnvironment{raw})
	return d.submitted(res, err)
}

// readSensor reads a DP or environment sensor's registers and refuses a
// sample its status register does not vouch for.
func (d *device) readSensor() ([][]uint16, *pollError) {
	plan := d.plan
	vals := make([][]uint16, len(plan.blocks))
	if err := d.readAll(vals, -1); err != nil {
		return nil, err
	}
	if plan.status != nil {
		code := plan.status.raw(vals)
		switch s, ok := plan.statuses[code]; {
		case !ok:
			return nil, fault(ReasonStatus, "status value %d is not in the register map", code)
		case s == StatusFault:
			return nil, fault(ReasonStatus, "the sensor reports a fault (status %d)", code)
		}
	}
	return vals, nil
}

// submitted counts a sensor's submitted sample, or says why it failed: a
// refused sample is the instrument's fault, a failed commit the daemon's.
func (d *device) submitted(res Result, err error) (*pollError, bool) {
	var ie *InputError
	switch {
	case errors.As(err, &ie):
		return &pollError{reason: ReasonRejected, err: err}, false
	case err != nil:
		return &pollError{reason: ReasonCommit, err: err}, false
	}
	d.p.metrics.samples(d.id, sampleAccepted, res.Accepted)
	d.p.metrics.samples(d.id, sampleDuplicate, res.Duplicates)
	return nil, true
}
