package collector

import (
	"os"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/model"
	"go.yaml.in/yaml/v3"
)

func ip(v int) *int { return &v }

func r16(addr int) *ModbusRegister { return &ModbusRegister{Addr: ip(addr)} }
func r32(addr int) *ModbusRegister { return &ModbusRegister{Addr: ip(addr), Bits: 32} }

// mbCounter is a polled counter with a complete, contiguous map: input
// registers 0–12 (sample, three 32-bit channels, status, flow, sampling
// time, 32-bit volume).
func mbCounter() Counter {
	return Counter{
		ID: "pc-asm-1", Zone: "assembly", Sizes: []string{"0.5", "1", "5"}, Interval: model.Duration(time.Second),
		Source: SourceModbus, Modbus: mbSource(""),
	}
}

func mbSource(addr string) *ModbusSource {
	if addr == "" {
		addr = "127.0.0.1:5020"
	}
	return &ModbusSource{
		Address: addr, Poll: model.Duration(100 * time.Millisecond), Timeout: model.Duration(100 * time.Millisecond),
		Sample:        r32(0),
		Channels:      map[string]ModbusRegister{"0.5": *r32(2), "1": *r32(4), "5": *r32(6)},
		Status:        &ModbusStatus{Addr: ip(8), Values: map[string]string{"0": "ok", "1": "warning", "2": "fault"}},
		Flow:          &ModbusRegister{Addr: ip(9), Scale: 0.001},
		SampleSeconds: r16(10),
		Volume:        &ModbusRegister{Addr: ip(11), Bits: 32, Scale: 0.0001},
	}
}

func mbSensor() Sensor {
	return Sensor{ID: "dp-asm-gown", High: "assembly", Low: "gowning", MinPa: 8, Interval: model.Duration(time.Second),
		Source: SourceModbus, Modbus: &ModbusSource{Address: "127.0.0.1:5021",
			Pa:     &ModbusRegister{Addr: ip(0), Signed: true, Scale: 0.1},
			Status: &ModbusStatus{Addr: ip(1), Values: map[string]string{"0": "ok", "1": "fault"}}}}
}

func TestValidateModbusCounter(t *testing.T) {
	cases := []struct {
		name  string
		edit  func(c *Counter)
		paths []string
	}{
		{"good", func(c *Counter) {}, nil},
		{"source left empty with a modbus section", func(c *Counter) { c.Source = "" }, nil},
		{"source push with a modbus section", func(c *Counter) { c.Source = SourcePush }, []string{"counters[0].source"}},
		{"source modbus without a section", func(c *Counter) { c.Modbus = nil }, []string{"counters[0].source"}},
		{"address missing", func(c *Counter) { c.Modbus.Address = "" }, []string{"counters[0].modbus.address"}},
		{"address without a port", func(c *Counter) { c.Modbus.Address = "10.0.4.21" }, []string{"counters[0].modbus.address"}},
		{"address port 0", func(c *Counter) { c.Modbus.Address = "10.0.4.21:0" }, []string{"counters[0].modbus.address"}},
		{"address without a host", func(c *Counter) { c.Modbus.Address = ":502" }, []string{"counters[0].modbus.address"}},
		{"unit 256", func(c *Counter) { c.Modbus.Unit = ip(256) }, []string{"counters[0].modbus.unit"}},
		{"unit 0 is allowed", func(c *Counter) { c.Modbus.Unit = ip(0) }, nil},
		{"poll too short", func(c *Counter) { c.Modbus.Poll = model.Duration(50 * time.Millisecond) }, []string{"counters[0].modbus.poll"}},
		{"poll beyond half the interval", func(c *Counter) { c.Modbus.Poll, c.Modbus.Timeout = model.Duration(600*time.Millisecond), 0 }, []string{"counters[0].modbus.poll"}},
		{"poll and timeout left to defaults", func(c *Counter) { c.Modbus.Poll, c.Modbus.Timeout = 0, 0 }, nil},
		{"timeout beyond the poll period", func(c *Counter) { c.Modbus.Timeout = model.Duration(time.Second) }, []string{"counters[0].modbus.timeout"}},
		{"word order unknown", func(c *Counter) { c.Modbus.WordOrder = "middle-endian" }, []string{"counters[0].modbus.word_order"}},
		{"sample missing", func(c *Counter) { c.Modbus.Sample = nil }, []string{"counters[0].modbus.sample"}},
		{"channels missing", func(c *Counter) { c.Modbus.Channels = nil }, []string{"counters[0].modbus.channels"}},
		{"one channel missing", func(c *Counter) { delete(c.Modbus.Channels, "5") }, []string{"counters[0].modbus.channels"}},
		{"channel the counter lacks", func(c *Counter) { c.Modbus.Channels["0.3"] = *r32(20) }, []string{"counters[0].modbus.channels.0.3"}},
		{"channel not a size", func(c *Counter) { c.Modbus.Channels["big"] = *r32(20) }, []string{"counters[0].modbus.channels.big"}},
		{"channel given twice", func(c *Counter) { c.Modbus.Channels["5um"] = *r32(20) }, []string{"counters[0].modbus.channels.5um"}},
		{"channel with a scale", func(c *Counter) {
			r := c.Modbus.Channels["1"]
			r.Scale = 10
			c.Modbus.Channels["1"] = r
		}, []string{"counters[0].modbus.channels.1.scale"}},
		{"channel signed", func(c *Counter) {
			r := c.Modbus.Channels["1"]
			r.Signed = true
			c.Modbus.Channels["1"] = r
		}, []string{"counters[0].modbus.channels.1.signed"}},
		{"register type unknown", func(c *Counter) {
			r := c.Modbus.Channels["0.5"]
			r.Type = "coil"
			c.Modbus.Channels["0.5"] = r
		}, []string{"counters[0].modbus.channels.0.5.type"}},
		{"bits 24", func(c *Counter) { c.Modbus.Sample.Bits = 24 }, []string{"counters[0].modbus.sample.bits"}},
		{"address missing on a register", func(c *Counter) { c.Modbus.Flow.Addr = nil }, []string{"counters[0].modbus.flow.addr"}},
		{"32-bit value past the last register", func(c *Counter) { c.Modbus.Sample.Addr = ip(65535) }, []string{"counters[0].modbus.sample.addr"}},
		{"negative address", func(c *Counter) { c.Modbus.Sample.Addr = ip(-1) }, []string{"counters[0].modbus.sample.addr"}},
		{"two values in one register", func(c *Counter) { c.Modbus.Flow.Addr = ip(7) }, []string{"counters[0].modbus.flow.addr"}},
		{"same address of the other type", func(c *Counter) { c.Modbus.Flow.Type = RegHolding; c.Modbus.Flow.Addr = ip(7) }, nil},
		{"status values missing", func(c *Counter) { c.Modbus.Status.Values = nil }, []string{"counters[0].modbus.status.values"}},
		{"status value unknown", func(c *Counter) { c.Modbus.Status.Values["1"] = "amber" }, []string{"counters[0].modbus.status.values.1"}},
		{"status key not a number", func(c *Counter) { c.Modbus.Status.Values["x"] = "ok" }, []string{"counters[0].modbus.status.values.x"}},
		{"word order on a 16-bit value", func(c *Counter) { c.Modbus.Flow.WordOrder = WordLowFirst }, []string{"counters[0].modbus.flow.word_order"}},
		{"time in 16 bits", func(c *Counter) { c.Modbus.Time = r16(20) }, []string{"counters[0].modbus.time.bits"}},
		{"pa on a counter", func(c *Counter) { c.Modbus.Pa = r16(20) }, []string{"counters[0].modbus.pa"}},
		{"scale negative", func(c *Counter) { c.Modbus.Flow.Scale = -0.01 }, []string{"counters[0].modbus.flow.scale"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := mbCounter()
			tc.edit(&c)
			checkPaths(t, ValidateCounters([]Counter{c}, demoZones), tc.paths)
		})
	}
}

func TestValidateModbusSensor(t *testing.T) {
	cases := []struct {
		name  string
		edit  func(s *Sensor)
		paths []string
	}{
		{"good", func(s *Sensor) {}, nil},
		{"poll defaults to the interval", func(s *Sensor) { s.Modbus.Poll = 0 }, nil},
		{"pa missing", func(s *Sensor) { s.Modbus.Pa = nil }, []string{"sensors[0].modbus.pa"}},
		{"channels on a sensor", func(s *Sensor) { s.Modbus.Channels = map[string]ModbusRegister{"0.5": *r16(5)} }, []string{"sensors[0].modbus.channels"}},
		{"sample number on a sensor", func(s *Sensor) { s.Modbus.Sample = r16(5) }, []string{"sensors[0].modbus.sample"}},
		{"address missing", func(s *Sensor) { s.Modbus.Address = "" }, []string{"sensors[0].modbus.address"}},
		{"source push with a modbus section", func(s *Sensor) { s.Source = SourcePush }, []string{"sensors[0].source"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			s := mbSensor()
			tc.edit(&s)
			checkPaths(t, ValidateSensors([]Sensor{s}, demoZones), tc.paths)
		})
	}
}

// The documented example map reads as yaml, validates, and groups into
// one read of the input registers and one of the holding registers.
func TestModbusExampleConfig(t *testing.T) {
	b, err := os.ReadFile("../testdata/modbus-counter.yaml")
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Counters []Counter `yaml:"counters"`
	}
	if err := yaml.Unmarshal(b, &doc); err != nil {
		t.Fatal(err)
	}
	if errs := ValidateCounters(doc.Counters, nil); len(errs) > 0 {
		t.Fatalf("example config refused: %v", errs)
	}
	reg, err := NewRegistry(doc.Counters, nil)
	if err != nil {
		t.Fatal(err)
	}
	ci := reg.Counters()[0]
	if ci.Source != SourceModbus || ci.Modbus.Status.Values["1"] != StatusWarning {
		t.Fatalf("decoded %+v, status %+v", ci.Counter, ci.Modbus.Status)
	}
	plan, err := compileModbus(ci.Modbus, "counter", ci.Sizes, time.Duration(ci.Interval))
	if err != nil {
		t.Fatal(err)
	}
	want := []regBlock{{input: true, addr: 0, n: 11}, {input: false, addr: 0, n: 2}}
	if !equalBlocks(plan.blocks, want) {
		t.Errorf("blocks %+v, want %+v", plan.blocks, want)
	}
	if plan.poll != 200*time.Millisecond || plan.timeout != 200*time.Millisecond || plan.unit != 1 {
		t.Errorf("poll %s timeout %s unit %d", plan.poll, plan.timeout, plan.unit)
	}
}

func equalBlocks(a, b []regBlock) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func TestModbusBlocks(t *testing.T) {
	run := func(n int, input bool, start int) []*regField {
		var fs []*regField
		for i := 0; i < n; i++ {
			fs = append(fs, &regField{path: "x", input: input, addr: uint16(start + i), n: 1})
		}
		return fs
	}
	cases := []struct {
		name   string
		fields []*regField
		want   []regBlock
	}{
		{"contiguous", run(5, true, 10), []regBlock{{true, 10, 5}}},
		{"a gap splits", append(run(2, true, 0), run(2, true, 3)...), []regBlock{{true, 0, 2}, {true, 3, 2}}},
		{"types apart, input first", append(run(2, false, 0), run(2, true, 0)...), []regBlock{{true, 0, 2}, {false, 0, 2}}},
		// Modbus Application Protocol V1.1b3 §6.3/§6.4: at most 125
		// registers per read.
		{"at most 125 per read", run(130, true, 0), []regBlock{{true, 0, 125}, {true, 125, 5}}},
		{"a 32-bit value is not split", append(run(124, true, 0), &regField{path: "y", input: true, addr: 124, n: 2}), []regBlock{{true, 0, 124}, {true, 124, 2}}},
		{"out of order", append(run(2, true, 4), run(4, true, 0)...), []regBlock{{true, 0, 6}}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var errs []string
			got := planBlocks("m", tc.fields, func(p, f string, a ...any) { errs = append(errs, p) })
			if len(errs) > 0 || !equalBlocks(got, tc.want) {
				t.Fatalf("blocks %+v (errors %v), want %+v", got, errs, tc.want)
			}
			for _, f := range tc.fields {
				b := got[f.block]
				if b.input != f.input || int(b.addr)+f.off != int(f.addr) || f.off+int(f.n) > int(b.n) {
					t.Errorf("field at %d placed at block %+v offset %d", f.addr, b, f.off)
				}
			}
		})
	}
}

// Word order, sign and scale of values as they arrive in registers. The
// two word orders are the two conventions devices use for 32-bit values
// (common practice, no source).
func TestModbusFieldDecoding(t *testing.T) {
	cases := []struct {
		name string
		f    regField
		regs []uint16
		raw  uint64
		val  float64
	}{
		{"16-bit", regField{n: 1, scale: 1}, []uint16{0x1234}, 0x1234, 0x1234},
		{"32-bit high word first", regField{n: 2, scale: 1}, []uint16{0x0001, 0x86A0}, 100000, 100000},
		{"32-bit low word first", regField{n: 2, low: true, scale: 1}, []uint16{0x86A0, 0x0001}, 100000, 100000},
		{"scaled", regField{n: 1, scale: 0.01}, []uint16{2830}, 2830, 28.3},
		{"signed 16-bit negative", regField{n: 1, signed: true, scale: 0.1}, []uint16{0xFFDD}, 0xFFDD, -3.5},
		{"signed 16-bit positive", regField{n: 1, signed: true, scale: 0.1}, []uint16{124}, 124, 12.4},
		{"signed 32-bit negative", regField{n: 2, signed: true, scale: 1}, []uint16{0xFFFF, 0xFFFE}, 0xFFFFFFFE, -2},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			vals := [][]uint16{append([]uint16{0xAAAA}, tc.regs...)}
			f := tc.f
			f.off = 1
			if got := f.raw(vals); got != tc.raw {
				t.Errorf("raw %#x, want %#x", got, tc.raw)
			}
			if got := f.value(vals); abs(got-tc.val) > 1e-9 {
				t.Errorf("value %g, want %g", got, tc.val)
			}
			// The slave writes what the poller reads.
			r, err := f.scaledRaw(tc.val)
			if err != nil || r != tc.raw {
				t.Errorf("scaledRaw(%g) = %#x, %v; want %#x", tc.val, r, err, tc.raw)
			}
			regs := map[uint16]uint16{}
			f.addr = 7
			f.put(regs, tc.raw)
			for i, w := range tc.regs {
				if regs[uint16(7+i)] != w {
					t.Errorf("put wrote %#x at %d, want %#x", regs[uint16(7+i)], 7+i, w)
				}
			}
		})
	}
	if _, err := (&regField{path: "flow", n: 1, scale: 0.01}).scaledRaw(1000); err == nil || !strings.Contains(err.Error(), "flow") {
		t.Errorf("a value beyond 16 bits was written: %v", err)
	}
}

func abs(v float64) float64 {
	if v < 0 {
		return -v
	}
	return v
}
