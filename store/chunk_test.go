package store

import (
	"bytes"
	"encoding/binary"
	"reflect"
	"testing"
	"time"
)

// chunkInput builds strictly time-ordered readings from fuzz bytes: each
// reading takes a time step, a status, a volume, a channel layout and
// counts from the stream, so runs, changes of shape and wild count deltas
// all occur.
func chunkInput(data []byte, maxN int) []Reading {
	var out []Reading
	ns := int64(1_700_000_000) * int64(time.Second)
	layouts := [][]float64{isoSizes, {0.5, 5}, {0.1, 0.2, 0.3, 0.5, 1, 2.5, 5, 10}, {0.30000001}}
	for len(data) >= 4 && len(out) < maxN {
		step := int64(binary.LittleEndian.Uint16(data)) + 1
		sel := data[2]
		data = data[3:]
		if sel&1 == 0 {
			step *= int64(time.Minute) / 65536 * 3
		}
		ns += step
		sizes := layouts[int(sel>>1)%len(layouts)]
		r := Reading{Counter: "pc-f", Time: time.Unix(0, ns).UTC(), VolumeL: 28.3, Sizes: sizes, Status: statusCodes[int(sel>>3)%4]}
		if sel&0x20 != 0 {
			r.VolumeL = 2.83
			r.FlowLPM = 2.83
		}
		if sel&0x40 != 0 {
			r.SampleSeconds = 60
		}
		r.Differential = sel&0x80 != 0
		for range sizes {
			var c uint64
			if len(data) > 0 {
				c = uint64(data[0]) << (data[0] % 50)
				data = data[1:]
			}
			if r.Differential {
				c >>= 8 // no overflow when summed
			}
			r.Counts = append(r.Counts, c)
		}
		out = append(out, r)
	}
	return out
}

// roundTrip stores rs as head values, cuts them into a chunk, decodes it
// and checks that every reading and its schema-1 value come back.
func roundTrip(t *testing.T, rs []Reading) {
	t.Helper()
	if len(rs) == 0 {
		return
	}
	var crs []chunkReading
	var vals [][]byte
	for i := range rs {
		if field, reason := checkReading(&rs[i]); field != "" {
			t.Fatalf("input %d invalid: %s %s", i, field, reason)
		}
		key := timeKey(rs[i].Time)
		v := encodeReading(key, &rs[i])
		shape, counts, err := splitV1(key, v)
		if err != nil {
			t.Fatal(err)
		}
		crs = append(crs, chunkReading{ns: rs[i].Time.UnixNano(), shape: shape, counts: counts})
		vals = append(vals, v)
	}
	key := nanosKey(crs[len(crs)-1].ns)
	enc := encodeChunk(key, crs)
	got, tags, err := decodeChunk("pc-f", key, enc)
	if err != nil {
		t.Fatalf("decode: %v", err)
	}
	if len(got) != len(rs) || len(tags) != len(rs) {
		t.Fatalf("%d readings, %d tags back for %d", len(got), len(tags), len(rs))
	}
	for i := range got {
		k := nanosKey(got[i].ns)
		if v := got[i].v1Value(k); !bytes.Equal(v, vals[i]) {
			t.Fatalf("reading %d: value %x, stored %x", i, v, vals[i])
		}
		r, err := got[i].toReading("pc-f")
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(r, rs[i]) {
			t.Fatalf("reading %d: %+v, want %+v", i, r, rs[i])
		}
		if tags[i] != tagOf(vals[i]) {
			t.Fatalf("reading %d: tag %x, want %x", i, tags[i], tagOf(vals[i]))
		}
	}
}

func FuzzChunkRoundTrip(f *testing.F) {
	f.Add([]byte{0, 0, 0, 1, 2, 3, 4, 0, 0, 0, 1, 2, 3, 4})
	f.Add(bytes.Repeat([]byte{0x10, 0x02, 0x22, 0xff, 0x01, 0x40, 0x07}, 50))
	f.Add(bytes.Repeat([]byte{0xff, 0xff, 0xc3, 0x31, 0x00}, 30))
	f.Fuzz(func(t *testing.T, data []byte) {
		roundTrip(t, chunkInput(data, maxChunkReadings))
	})
}

// FuzzChunkDecode feeds damaged chunks to the decoder: it must fail with
// an error, never panic, and never return readings out of time order.
func FuzzChunkDecode(f *testing.F) {
	rs := series("pc-f", t0, 40)
	var crs []chunkReading
	for i := range rs {
		key := timeKey(rs[i].Time)
		shape, counts, _ := splitV1(key, encodeReading(key, &rs[i]))
		crs = append(crs, chunkReading{ns: rs[i].Time.UnixNano(), shape: shape, counts: counts})
	}
	key := nanosKey(crs[len(crs)-1].ns)
	f.Add(encodeChunk(key, crs), uint16(3), byte(1))
	f.Fuzz(func(t *testing.T, v []byte, at uint16, x byte) {
		if len(v) > 0 {
			v = bytes.Clone(v)
			v[int(at)%len(v)] ^= x
		}
		got, _, err := decodeChunk("pc-f", key, v)
		for i := 1; i < len(got); i++ {
			if got[i].ns <= got[i-1].ns {
				t.Fatalf("reading %d out of order (err %v)", i, err)
			}
		}
	})
}

func TestChunkRoundTrip(t *testing.T) {
	tests := []struct {
		name string
		rs   []Reading
	}{
		{"steady minute", series("pc-f", t0, maxChunkReadings)},
		{"one reading", series("pc-f", t0, 1)},
		{"two readings", series("pc-f", t0, 2)},
		{"fuzz-like", chunkInput(bytes.Repeat([]byte{0x10, 0x02, 0x22, 0xff, 0x01, 0x40, 0x07, 0x9a, 0x00}, 300), 500)},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			for i := range tt.rs {
				tt.rs[i].Counter = "pc-f"
			}
			roundTrip(t, tt.rs)
		})
	}
}

// TestChunkSize checks the encoding pays: a day of steady one-minute
// readings with four channels of varying counts.
func TestChunkSize(t *testing.T) {
	rs := series("pc-f", t0, 1440)
	var crs []chunkReading
	for i := range rs {
		key := timeKey(rs[i].Time)
		shape, counts, _ := splitV1(key, encodeReading(key, &rs[i]))
		crs = append(crs, chunkReading{ns: rs[i].Time.UnixNano(), shape: shape, counts: counts})
	}
	enc := encodeChunk(nanosKey(crs[len(crs)-1].ns), crs)
	per := float64(len(enc)) / float64(len(rs))
	t.Logf("%d bytes for %d readings: %.2f bytes/reading", len(enc), len(rs), per)
	if per > 8 {
		t.Fatalf("%.2f bytes/reading in a chunk", per)
	}
}
