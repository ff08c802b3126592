package collector

import (
	"fmt"
	"maps"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"cleanmon/classify"

	"github.com/prometheus/common/model"
)

// ModbusSource says where and how the poller reads one counter, DP or
// environment sensor over Modbus TCP or RTU: the yaml key "modbus" of an
// instrument whose source is modbus. The register map is the project's own schema:
//
//	modbus:
//	  address: "10.0.4.21:502"    # host:port of the instrument or gateway
//	  unit: 1                     # unit identifier, default 1
//	  poll: "5s"                  # time between polls
//	  timeout: "2s"               # per request
//	  word_order: high-first      # of 32-bit values; low-first for the other
//	  sample: {addr: 0, bits: 32}            # advanced by one per finished sample
//	  time: {addr: 2, bits: 32}              # optional: sample time, Unix seconds
//	  channels:
//	    "0.5": {addr: 4, bits: 32}
//	    "5": {addr: 6, bits: 32}
//	  status: {addr: 8, values: {0: ok, 1: warning, 2: fault}}
//	  flow: {addr: 9, scale: 0.01}            # L/min
//	  sample_seconds: {addr: 10}              # s
//	  volume: {addr: 11, bits: 32, scale: 0.001}  # L
//
// A sensor maps pa (and optionally status) instead:
// pa: {addr: 0, signed: true, scale: 0.1}; an environment sensor maps
// the channels of its kind: temperature_c: {addr: 0, signed: true,
// scale: 0.01}, humidity_pct: {addr: 1, scale: 0.01}, velocity_m_s:
// {addr: 2, scale: 0.001}.
//
// Address is host:port for Modbus TCP, or a serial device as an rtu://
// URL (see [ParseModbusAddress]): rtu:///dev/ttyUSB0?baud=19200&parity=E&stop=1.
//
// Addresses are those on the wire, counted from 0 (a manual's register
// 30001 or 40001 is addr 0). Registers of one type that follow each other
// without a gap are read in one request, so a sample's channels are read
// together; keep a counter's registers contiguous for that.
type ModbusSource struct {
	// Address is host:port of the instrument or of its gateway (Modbus
	// TCP), or its serial line as rtu:///dev/ttyUSB0?baud=19200&parity=even&stop=1
	// (Modbus RTU; see [ParseModbusAddress]). Units on one line share it
	// in turn and must agree on its settings.
	Address string `yaml:"address"`
	// Unit is the unit identifier (0–255) the device answers to; default 1.
	Unit *int `yaml:"unit"`
	// Poll is the time between polls. Default for a counter: 5 s, or half
	// its interval when that is shorter; for a sensor: its interval, each
	// poll being one DP sample.
	Poll model.Duration `yaml:"poll"`
	// Timeout bounds each request; default 2 s, or the poll period when
	// that is shorter.
	Timeout model.Duration `yaml:"timeout"`
	// WordOrder of 32-bit values: "high-first" (default) or "low-first".
	WordOrder string `yaml:"word_order"`

	// Sample (counters, required) is the sample number the counter
	// advances once per finished sample, so that each sample is read once.
	Sample *ModbusRegister `yaml:"sample"`
	// Time (counters, optional) is the time of the sample in Unix seconds.
	// With it, readings carry the counter's own time and the sample shown
	// when polling starts is read too (the store drops it if it was
	// stored before); without it they carry the time of the poll that saw
	// the sample, and the sample shown at start is taken as already seen.
	Time *ModbusRegister `yaml:"time"`
	// Channels (counters, required) maps each size of the counter ("0.5",
	// as in sizes) to the register of its count.
	Channels map[string]ModbusRegister `yaml:"channels"`
	// Flow (counters, optional) is the sample flow in L/min after scale.
	Flow *ModbusRegister `yaml:"flow"`
	// Volume (counters, optional) is the sampled volume in litres after
	// scale. Without it the volume is the flow (reported, else nominal)
	// times the sampling time (reported, else the interval).
	Volume *ModbusRegister `yaml:"volume"`
	// SampleSeconds (counters, optional) is the sampling time in seconds
	// after scale.
	SampleSeconds *ModbusRegister `yaml:"sample_seconds"`
	// Status (optional) is the instrument's status code and what each
	// value means.
	Status *ModbusStatus `yaml:"status"`

	// Pa (sensors, required) is the differential pressure in Pa after
	// scale.
	Pa *ModbusRegister `yaml:"pa"`

	// TemperatureC, HumidityPct and VelocityMS (environment sensors) are
	// the temperature in °C, the relative humidity in % and the airflow
	// velocity in m/s after scale: each required when the sensor's kind
	// reports it, refused otherwise.
	TemperatureC *ModbusRegister `yaml:"temperature_c"`
	HumidityPct  *ModbusRegister `yaml:"humidity_pct"`
	VelocityMS   *ModbusRegister `yaml:"velocity_m_s"`
}

// ModbusRegister is one value in a device's registers.
type ModbusRegister struct {
	// Addr is the address of the (first) register, 0–65535; required.
	Addr *int `yaml:"addr"`
	// Type is "input" (default, function 4) or "holding" (function 3).
	Type string `yaml:"type"`
	// Bits is 16 (default) or 32, a 32-bit value taking addr and addr+1.
	Bits int `yaml:"bits"`
	// WordOrder overrides the source's word order for this value.
	WordOrder string `yaml:"word_order"`
	// Signed reads the value as two's complement (a DP may be negative).
	Signed bool `yaml:"signed"`
	// Scale multiplies the raw value into the unit (default 1); counts,
	// sample numbers, times and status codes take none.
	Scale float64 `yaml:"scale"`
}

// ModbusStatus is a status register and the meaning of its values.
type ModbusStatus struct {
	Addr *int   `yaml:"addr"` // register address, required
	Type string `yaml:"type"` // input (default) or holding
	// Values maps each raw value ("0") to ok, warning or fault; a value
	// not listed is a fault of the device. Required.
	Values map[string]string `yaml:"values"`
}

// Register types and word orders of the register map.
const (
	RegInput      = "input"
	RegHolding    = "holding"
	WordHighFirst = "high-first"
	WordLowFirst  = "low-first"
)

// Defaults and bounds of a Modbus source.
const (
	DefaultModbusUnit    = 1
	DefaultModbusPoll    = 5 * time.Second
	DefaultModbusTimeout = 2 * time.Second
	// MinModbusPoll is the shortest poll period accepted: faster polling
	// loads the instrument without seeing more samples.
	MinModbusPoll = 100 * time.Millisecond
	// maxReadRegs is the most registers one read request may ask for
	// (Modbus Application Protocol Specification V1.1b3, §6.3 and §6.4:
	// 1 to 125 registers).
	maxReadRegs = 125
)

// regField is one mapped value, resolved: which block holds it and where.
type regField struct {
	path   string // under the source, for messages: "channels.0.5"
	input  bool   // input register (else holding)
	addr   uint16
	n      uint16 // registers: 1 or 2
	low    bool   // low word first
	signed bool
	scale  float64
	block  int // index into devicePlan.blocks
	off    int // offset of addr within the block
}

// regBlock is one read request: n contiguous registers of one type.
type regBlock struct {
	input bool
	addr  uint16
	n     uint16
}

// devicePlan is a validated register map turned into read requests and
// the place of every value in them.
type devicePlan struct {
	unit     uint8
	poll     time.Duration
	timeout  time.Duration
	blocks   []regBlock
	sample   *regField   // counters
	time     *regField   // counters, optional
	channels []*regField // counters, aligned with the counter's sizes
	flow     *regField
	volume   *regField
	secs     *regField
	status   *regField
	statuses map[uint64]string
	pa       *regField            // sensors
	env      map[string]*regField // environment sensors, by channel
}

// raw returns the field's unsigned value from the blocks read.
func (f *regField) raw(vals [][]uint16) uint64 {
	v := vals[f.block][f.off:]
	if f.n == 1 {
		return uint64(v[0])
	}
	hi, lo := v[0], v[1]
	if f.low {
		hi, lo = lo, hi
	}
	return uint64(hi)<<16 | uint64(lo)
}

// value returns the field in its unit: signed if so mapped, then scaled.
func (f *regField) value(vals [][]uint16) float64 {
	r := f.raw(vals)
	v := float64(r)
	if f.signed {
		bits := 16 * uint(f.n)
		if r&(1<<(bits-1)) != 0 {
			v = float64(int64(r) - int64(1)<<bits)
		}
	}
	return v * f.scale
}

// allOnes is the raw value with every bit set, which instruments commonly
// show for "no value" (common practice, no source).
func (f *regField) allOnes() uint64 { return 1<<(16*uint(f.n)) - 1 }

// validateModbusCounter checks the modbus section of counter c at path p
// ("counters[0].modbus").
func validateModbusCounter(p string, c *Counter, add func(string, string, ...any)) {
	checkModbusAddress(p, c.Modbus.Address, add)
	interval := time.Duration(c.Interval)
	if interval == 0 {
		interval = DefaultCounterInterval
	}
	planModbus(p, c.Modbus, "counter", c.Sizes, interval, add)
}

// validateModbusSensor checks the modbus section of sensor s at path p.
func validateModbusSensor(p string, s *Sensor, add func(string, string, ...any)) {
	checkModbusAddress(p, s.Modbus.Address, add)
	interval := time.Duration(s.Interval)
	if interval == 0 {
		interval = DefaultSensorInterval
	}
	planModbus(p, s.Modbus, "sensor", nil, interval, add)
}

// validateModbusEnvironment checks the modbus section of environment
// sensor e at path p.
func validateModbusEnvironment(p string, e *EnvironmentSensorConfig, add func(string, string, ...any)) {
	checkModbusAddress(p, e.Modbus.Address, add)
	interval := time.Duration(e.Interval)
	if interval == 0 {
		interval = DefaultEnvironmentInterval
	}
	planModbus(p, e.Modbus, "environment", e.Channels(), interval, add)
}

func checkModbusAddress(p, addr string, add func(string, string, ...any)) {
	if _, err := ParseModbusAddress(addr); err != nil {
		add(p+".address", "%s", err.Error())
	}
}

// planModbus checks a register map for a counter (sizes its channels), a
// DP sensor, or an environment sensor (sizes then lists the channels of
// its kind) and turns it into a plan. Problems go to add, with paths under
// p; the plan is nil when there were any.
func planModbus(p string, src *ModbusSource, kind string, sizes []string, interval time.Duration, add func(string, string, ...any)) *devicePlan {
	pl := &planner{p: p, kind: kind, add: add, plan: &devicePlan{unit: DefaultModbusUnit}}
	pl.timing(src, interval)
	pl.status(src)
	switch kind {
	case "counter":
		pl.counter(src, sizes)
	case "environment":
		planEnvironment(p, src, sizes, pl.plan, func(name string, r *ModbusRegister, signed bool) *regField {
			if signed {
				return pl.reg(name, r, optNum)
			}
			return pl.reg(name, r, optUnsigned)
		}, pl.addf)
		pl.none("pa", src.Pa != nil)
		pl.noCounter(src)
	default:
		if src.Pa == nil {
			pl.addf(p+".pa", "missing: give the register of the differential pressure")
		} else {
			pl.plan.pa = pl.reg("pa", src.Pa, optNum)
		}
		pl.noEnv(src)
		pl.noCounter(src)
	}
	pl.plan.blocks = planBlocks(p, pl.fields, pl.addf)
	if pl.bad {
		return nil
	}
	return pl.plan
}

// regOpts says which options make sense for a value.
type regOpts struct{ scale, signed bool }

var (
	optNum      = regOpts{scale: true, signed: true} // a measured value that may be negative
	optUnsigned = regOpts{scale: true}               // a measured value that may not
	optWhole    = regOpts{}                          // counts, sample numbers, times, status codes
)

// planner builds the plan of one register map, reporting every problem
// under its path p.
type planner struct {
	p, kind    string
	add        func(string, string, ...any)
	plan       *devicePlan
	lowDefault bool        // the source's word order is low-first
	fields     []*regField // every value resolved, for planBlocks
	bad        bool
}

func (pl *planner) addf(path, format string, args ...any) {
	pl.bad = true
	pl.add(path, format, args...)
}

// none refuses a register the kind of device does not have.
func (pl *planner) none(name string, present bool) {
	if present {
		pl.addf(pl.p+"."+name, "a %s has no %s register", kindNoun(pl.kind), name)
	}
}

// noCounter refuses the registers only a counter has.
func (pl *planner) noCounter(src *ModbusSource) {
	pl.none("sample", src.Sample != nil)
	pl.none("time", src.Time != nil)
	pl.none("channels", len(src.Channels) > 0)
	pl.none("flow", src.Flow != nil)
	pl.none("volume", src.Volume != nil)
	pl.none("sample_seconds", src.SampleSeconds != nil)
}

// noEnv refuses environment registers on a counter or DP sensor.
func (pl *planner) noEnv(src *ModbusSource) {
	pl.none(ChanTemperature, src.TemperatureC != nil)
	pl.none(ChanHumidity, src.HumidityPct != nil)
	pl.none(ChanVelocity, src.VelocityMS != nil)
}

// timing checks the unit, poll period, timeout and word order.
func (pl *planner) timing(src *ModbusSource, interval time.Duration) {
	p, plan := pl.p, pl.plan
	if src.Unit != nil {
		if u := *src.Unit; u < 0 || u > 255 {
			pl.addf(p+".unit", "%d: a unit identifier is 0–255", u)
		} else {
			plan.unit = uint8(u)
		}
	}
	switch {
	case src.Poll < 0:
		pl.addf(p+".poll", "must not be negative")
	case src.Poll == 0 && pl.kind == "counter":
		plan.poll = min(DefaultModbusPoll, interval/2)
	case src.Poll == 0:
		plan.poll = interval
	case time.Duration(src.Poll) < MinModbusPoll:
		pl.addf(p+".poll", "%s is shorter than the %s minimum", src.Poll, MinModbusPoll)
	case pl.kind == "counter" && time.Duration(src.Poll) > interval/2:
		// A sample number seen only every other sample loses samples.
		pl.addf(p+".poll", "%s is more than half the interval (%s): poll at least twice per sample so that none is missed", src.Poll, interval)
	default:
		plan.poll = time.Duration(src.Poll)
	}
	switch {
	case src.Timeout < 0:
		pl.addf(p+".timeout", "must not be negative")
	case src.Timeout == 0:
		plan.timeout = min(DefaultModbusTimeout, max(plan.poll, MinModbusPoll))
	case plan.poll > 0 && time.Duration(src.Timeout) > plan.poll:
		pl.addf(p+".timeout", "%s is longer than the poll period (%s)", src.Timeout, plan.poll)
	default:
		plan.timeout = time.Duration(src.Timeout)
	}
	switch src.WordOrder {
	case "", WordHighFirst:
	case WordLowFirst:
		pl.lowDefault = true
	default:
		pl.addf(p+".word_order", "unknown word order %q (%s or %s)", src.WordOrder, WordHighFirst, WordLowFirst)
	}
}

// reg resolves one register; o tells which options make sense for it.
func (pl *planner) reg(name string, r *ModbusRegister, o regOpts) *regField {
	fp := pl.p + "." + name
	f := &regField{path: name, input: true, n: 1, low: pl.lowDefault, scale: 1}
	ok := true
	fail := func(path, format string, args ...any) { ok = false; pl.addf(path, format, args...) }
	switch r.Type {
	case "", RegInput:
	case RegHolding:
		f.input = false
	default:
		fail(fp+".type", "unknown register type %q (%s or %s)", r.Type, RegInput, RegHolding)
	}
	switch r.Bits {
	case 0, 16:
	case 32:
		f.n = 2
	default:
		fail(fp+".bits", "%d: a value is 16 or 32 bits", r.Bits)
	}
	switch r.WordOrder {
	case "":
	case WordHighFirst:
		f.low = false
	case WordLowFirst:
		f.low = true
	default:
		fail(fp+".word_order", "unknown word order %q (%s or %s)", r.WordOrder, WordHighFirst, WordLowFirst)
	}
	if r.WordOrder != "" && f.n == 1 {
		fail(fp+".word_order", "a 16-bit value has no word order: give bits: 32 or drop word_order")
	}
	if r.Signed && !o.signed {
		fail(fp+".signed", "%s cannot be negative", name)
	}
	f.signed = r.Signed
	switch {
	case r.Scale == 0:
	case !o.scale:
		fail(fp+".scale", "%s is a whole number read as it is: it takes no scale", name)
	case !finite(r.Scale) || r.Scale < 0:
		fail(fp+".scale", "%g: the scale must be a finite number > 0", r.Scale)
	default:
		f.scale = r.Scale
	}
	switch {
	case r.Addr == nil:
		fail(fp+".addr", "missing: give the register address (0–65535, counted from 0 as on the wire)")
	case *r.Addr < 0 || *r.Addr+int(f.n)-1 > 65535:
		fail(fp+".addr", "%d: the %d-bit value must lie within registers 0–65535", *r.Addr, 16*f.n)
	default:
		f.addr = uint16(*r.Addr)
	}
	if !ok {
		return nil
	}
	pl.fields = append(pl.fields, f)
	return f
}

// status resolves the status register and the meaning of its values.
func (pl *planner) status(src *ModbusSource) {
	if src.Status == nil {
		return
	}
	fp := pl.p + ".status"
	f := pl.reg("status", &ModbusRegister{Addr: src.Status.Addr, Type: src.Status.Type}, optWhole)
	if len(src.Status.Values) == 0 {
		pl.addf(fp+".values", "missing: say what each status value means, e.g. {0: ok, 1: warning, 2: fault}")
	}
	pl.plan.statuses = make(map[uint64]string, len(src.Status.Values))
	for _, k := range slices.Sorted(maps.Keys(src.Status.Values)) {
		v := src.Status.Values[k]
		code, err := strconv.ParseUint(strings.TrimSpace(k), 0, 16)
		if err != nil {
			pl.addf(fp+".values."+k, "%q is not a register value 0–65535", k)
			continue
		}
		switch v {
		case StatusOK, StatusWarning, StatusFault:
			pl.plan.statuses[code] = v
		default:
			pl.addf(fp+".values."+k, "unknown status %q (ok, warning or fault)", v)
		}
	}
	pl.plan.status = f
}

// counter resolves the registers of a particle counter.
func (pl *planner) counter(src *ModbusSource, sizes []string) {
	p, plan := pl.p, pl.plan
	if src.Sample == nil {
		pl.addf(p+".sample", "missing: give the register of the sample number, so that each sample is read once")
	} else {
		plan.sample = pl.reg("sample", src.Sample, optWhole)
	}
	if src.Time != nil {
		plan.time = pl.reg("time", src.Time, optWhole)
		if plan.time != nil && plan.time.n != 2 {
			pl.addf(p+".time.bits", "a time in Unix seconds needs 32 bits")
		}
	}
	if src.Flow != nil {
		plan.flow = pl.reg("flow", src.Flow, optUnsigned)
	}
	if src.Volume != nil {
		plan.volume = pl.reg("volume", src.Volume, optUnsigned)
	}
	if src.SampleSeconds != nil {
		plan.secs = pl.reg("sample_seconds", src.SampleSeconds, optUnsigned)
	}
	pl.none("pa", src.Pa != nil)
	planChannels(p, src, sizes, plan, func(key string, r *ModbusRegister) *regField {
		return pl.reg("channels."+key, r, optWhole)
	}, pl.addf)
	pl.noEnv(src)
}

// planEnvironment resolves the registers of an environment sensor: one
// for each channel of its kind, none for the others. Temperature may be
// negative; humidity and velocity may not.
func planEnvironment(p string, src *ModbusSource, chans []string, plan *devicePlan, reg func(string, *ModbusRegister, bool) *regField, addf func(string, string, ...any)) {
	plan.env = make(map[string]*regField, len(chans))
	for _, ch := range []string{ChanTemperature, ChanHumidity, ChanVelocity} {
		var r *ModbusRegister
		switch ch {
		case ChanTemperature:
			r = src.TemperatureC
		case ChanHumidity:
			r = src.HumidityPct
		default:
			r = src.VelocityMS
		}
		switch has := contains(chans, ch); {
		case has && r == nil:
			addf(p+"."+ch, "missing: give the register of %s", channelWords[ch])
		case !has && r != nil:
			addf(p+"."+ch, "the sensor's kind has no %s channel (it reports %s)", ch, strings.Join(chans, ", "))
		case has:
			if f := reg(ch, r, ch == ChanTemperature); f != nil {
				plan.env[ch] = f
			}
		}
	}
}

// planChannels resolves the channel registers against the counter's
// sizes: exactly one register per size.
func planChannels(p string, src *ModbusSource, sizes []string, plan *devicePlan, reg func(string, *ModbusRegister) *regField, addf func(string, string, ...any)) {
	if len(src.Channels) == 0 {
		addf(p+".channels", "missing: give the count register of each size (%s)", strings.Join(sizes, ", "))
		return
	}
	index := map[string]int{}
	for i, s := range sizes {
		if v, err := classify.ParseSize(s); err == nil {
			index[classify.FormatSize(v)] = i
		}
	}
	plan.channels = make([]*regField, len(sizes))
	given := make([]string, len(sizes))
	for _, key := range slices.Sorted(maps.Keys(src.Channels)) {
		r := src.Channels[key]
		v, err := classify.ParseSize(key)
		if err != nil {
			addf(p+".channels."+key, "%q is not a channel size in µm", key)
			continue
		}
		i, ok := index[classify.FormatSize(v)]
		switch {
		case !ok:
			addf(p+".channels."+key, "the counter has no %s µm channel (its sizes are %s)", classify.FormatSize(v), strings.Join(sizes, ", "))
			continue
		case given[i] != "":
			addf(p+".channels."+key, "names the %s µm channel a second time (also given as %q)", classify.FormatSize(v), given[i])
			continue
		}
		given[i] = key
		plan.channels[i] = reg(key, &r)
	}
	for i, s := range sizes {
		if given[i] == "" {
			if _, err := classify.ParseSize(s); err == nil {
				addf(p+".channels", "missing the register of the %s µm channel", s)
			}
		}
	}
}

// planBlocks groups the fields into read requests: per register type,
// registers that follow each other without a gap make one request of at
// most 125. Two values sharing a register are an error.
func planBlocks(p string, fields []*regField, addf func(string, string, ...any)) []regBlock {
	sorted := slices.Clone(fields)
	sort.SliceStable(sorted, func(i, j int) bool {
		if sorted[i].input != sorted[j].input {
			return sorted[i].input
		}
		return sorted[i].addr < sorted[j].addr
	})
	var blocks []regBlock
	var prev *regField
	for _, f := range sorted {
		if prev != nil && prev.input == f.input && int(f.addr) < int(prev.addr)+int(prev.n) {
			addf(p+"."+f.path+".addr", "%s register %d is also %s (registers %d–%d)", typeName(f.input), f.addr, prev.path, prev.addr, int(prev.addr)+int(prev.n)-1)
			continue
		}
		last := len(blocks) - 1
		if last >= 0 && blocks[last].input == f.input && int(blocks[last].addr)+int(blocks[last].n) == int(f.addr) &&
			int(blocks[last].n)+int(f.n) <= maxReadRegs {
			blocks[last].n += f.n
		} else {
			blocks = append(blocks, regBlock{input: f.input, addr: f.addr, n: f.n})
			last++
		}
		f.block, f.off = last, int(f.addr-blocks[last].addr)
		prev = f
	}
	return blocks
}

func typeName(input bool) string {
	if input {
		return RegInput
	}
	return RegHolding
}

// compileModbus builds the plan of a validated counter or sensor.
func compileModbus(src *ModbusSource, kind string, sizes []string, interval time.Duration) (*devicePlan, error) {
	var msgs []string
	plan := planModbus("modbus", src, kind, sizes, interval, func(path, format string, args ...any) {
		msgs = append(msgs, path+": "+fmt.Sprintf(format, args...))
	})
	if plan == nil {
		return nil, fmt.Errorf("%w: %s", ErrConfig, strings.Join(msgs, "; "))
	}
	return plan, nil
}

// scaledRaw turns a value in the field's unit back into its raw register
// value (the slave side of value), rounding to the nearest step.
func (f *regField) scaledRaw(v float64) (uint64, error) {
	r := math.Round(v / f.scale)
	bits := 16 * uint(f.n)
	lo, hi := 0.0, float64(uint64(1)<<bits-1)
	if f.signed {
		lo, hi = -float64(uint64(1)<<(bits-1)), float64(uint64(1)<<(bits-1)-1)
	}
	if !finite(r) || r < lo || r > hi {
		return 0, fmt.Errorf("%g does not fit %s (%d-bit, scale %g)", v, f.path, bits, f.scale)
	}
	if r < 0 {
		return uint64(int64(r) + int64(1)<<bits), nil
	}
	return uint64(r), nil
}

// put writes raw into the registers of f in regs (addr → value).
func (f *regField) put(regs map[uint16]uint16, raw uint64) {
	if f.n == 1 {
		regs[f.addr] = uint16(raw)
		return
	}
	hi, lo := uint16(raw>>16), uint16(raw)
	if f.low {
		hi, lo = lo, hi
	}
	regs[f.addr], regs[f.addr+1] = hi, lo
}

// kindNoun names a device kind of planModbus for messages.
func kindNoun(kind string) string {
	switch kind {
	case "sensor":
		return "differential-pressure sensor"
	case "environment":
		return "environment sensor"
	}
	return kind
}
