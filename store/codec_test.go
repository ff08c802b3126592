package store

import (
	"bytes"
	"testing"
)

func TestReadingEncodingIsCompact(t *testing.T) {
	r := reading("pc-asm-1", t0, 1000)
	key := timeKey(r.Time)
	grid := encodeReading(key, &r)
	off := r
	off.Sizes = []float64{0.3, 0.5, 1, 5.0001} // 5.0001 µm is not a whole nanometre
	float := encodeReading(key, &off)
	// Sizes on the nanometre grid take 2 bytes each rather than 8.
	if len(grid) >= len(float) || len(grid) > 60 {
		t.Fatalf("encoded %d bytes on the nanometre grid, %d off it", len(grid), len(float))
	}
	for _, v := range [][]byte{grid, float} {
		back, err := decodeReading("pc-asm-1", key, v)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(encodeReading(key, &back), v) {
			t.Fatal("decode then encode changed the value")
		}
	}
}

// body strips version and checksum from an encoded value; sealed puts
// them back, so the fuzzers reach the decoder behind the checksum.
func body(v []byte) []byte { return v[1 : len(v)-crcLen] }

func sealed(key, body []byte) []byte { return seal(key, append([]byte{codecV1}, body...)) }

// FuzzDecodeReading: no value body panics the decoder, and whatever
// decodes encodes back to the same bytes.
func FuzzDecodeReading(f *testing.F) {
	r := reading("pc-asm-1", t0, 1000)
	f.Add(timeKey(t0), body(encodeReading(timeKey(t0), &r)))
	d := r
	d.Differential, d.FlowLPM, d.Sizes = true, 0, []float64{0.1 / 3, 0.5, 1, 5}
	f.Add(timeKey(t0), body(encodeReading(timeKey(t0), &d)))
	f.Add([]byte{1, 2}, []byte{0, 0})
	f.Fuzz(func(t *testing.T, key, b []byte) {
		val := sealed(key, b)
		got, err := decodeReading("pc-asm-1", key, val)
		if err != nil {
			return
		}
		if again := encodeReading(key, &got); !bytes.Equal(again, val) {
			t.Fatalf("round trip changed %x into %x", val, again)
		}
	})
}

// FuzzDecodeRollup: the same for rollups, whose decoder also feeds Verify.
func FuzzDecodeRollup(f *testing.F) {
	acc := &rollupAcc{start: t0.UnixNano()}
	r := reading("pc-asm-1", t0, 1000)
	acc.add(r.Sizes, r.PerM3())
	f.Add(nanosKey(acc.start), body(encodeRollup(nanosKey(acc.start), acc)))
	f.Fuzz(func(t *testing.T, key, b []byte) {
		val := sealed(key, b)
		got, err := decodeRollup("pc-asm-1", 60e9, key, val)
		if err != nil {
			return
		}
		if again := encodeRollup(key, got); !bytes.Equal(again, val) {
			t.Fatalf("round trip changed %x into %x", val, again)
		}
	})
}
