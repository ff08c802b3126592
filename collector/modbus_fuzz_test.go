package collector

import (
	"encoding/binary"
	"math"
	"testing"
)

// FuzzModbusRegisters checks the register decoding on any register
// contents and any field shape: a value is always finite; what the device
// side writes (scaledRaw, put) reads back as the same raw value and, within
// one scale step, the same value, in either word order, signed or not.
func FuzzModbusRegisters(f *testing.F) {
	f.Add(uint16(0x1234), uint16(0xabcd), uint8(2), true, false, 1.0)
	f.Add(uint16(0xffff), uint16(0xffff), uint8(1), false, true, 0.01)
	f.Add(uint16(0x8000), uint16(0x0000), uint8(2), false, true, 0.1)
	f.Fuzz(func(t *testing.T, w0, w1 uint16, n uint8, low, signed bool, scale float64) {
		if !(scale > 0) || math.IsInf(scale, 0) || scale > 1e6 || scale < 1e-9 {
			return // refused by the config checks before any decoding
		}
		fld := &regField{path: "f", n: uint16(1 + n%2), low: low, signed: signed, scale: scale}
		vals := [][]uint16{{w0, w1}}
		v := fld.value(vals)
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("value %v from %#x %#x", v, w0, w1)
		}
		raw := fld.raw(vals)
		if raw > fld.allOnes() {
			t.Fatalf("raw %#x wider than %d registers", raw, fld.n)
		}
		back, err := fld.scaledRaw(v)
		if err != nil {
			t.Fatalf("a decoded value does not encode again: %v", err)
		}
		regs := map[uint16]uint16{}
		fld.put(regs, back)
		again := [][]uint16{{regs[0], regs[1]}}
		if got := fld.value(again); math.Abs(got-v) > scale/2+math.Abs(v)*1e-12 {
			t.Fatalf("round trip %v → %v (raw %#x → %#x)", v, got, raw, back)
		}
		// Word order: the high word of a 32-bit value is the first register
		// unless the map says low-first.
		if fld.n == 2 {
			want := binary.BigEndian.Uint32([]byte{byte(w0 >> 8), byte(w0), byte(w1 >> 8), byte(w1)})
			if low {
				want = binary.BigEndian.Uint32([]byte{byte(w1 >> 8), byte(w1), byte(w0 >> 8), byte(w0)})
			}
			if raw != uint64(want) {
				t.Fatalf("raw %#x, want %#x", raw, want)
			}
		}
	})
}

// FuzzParseModbusAddress: any text either is refused with a message or
// parses into an address whose own spelling parses back to the same.
func FuzzParseModbusAddress(f *testing.F) {
	for _, s := range []string{"10.0.4.21:502", "tcp://gw:1502", "rtu:///dev/ttyUSB0?baud=9600&parity=none", "rtu://x", "", "rtu:///a?stop=2&parity=O"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		a, err := ParseModbusAddress(s)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error")
			}
			return
		}
		b, err := ParseModbusAddress(a.String())
		if err != nil || b != a {
			t.Fatalf("%q → %+v → %q → %+v, %v", s, a, a.String(), b, err)
		}
	})
}
