package store

import (
	"bytes"
	"fmt"
	"math"
	"reflect"
	"testing"
	"time"
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

func TestCoverageEncoding(t *testing.T) {
	type rec struct {
		name string
		key  int64
	}
	steady := make([]rec, 1000)
	for i := range steady {
		steady[i] = rec{"pc-asm-1", t0.Add(time.Duration(i) * time.Minute).UnixNano()}
	}
	var live, jittered []rec
	for m := range 5 {
		for c := range 200 {
			live = append(live, rec{fmt.Sprintf("pc-c-%03d", c), t0.Add(time.Duration(m)*time.Minute + time.Duration(c)*time.Second).UnixNano()})
		}
	}
	for i := range 50 {
		jittered = append(jittered, rec{"pc-asm-1", t0.Add(time.Duration(i)*time.Minute + time.Duration(i%3)*time.Millisecond).UnixNano()})
	}
	cases := []struct {
		name    string
		recs    []rec
		maxSize int // bytes of Detail, 0: not checked
	}{
		// One counter at a steady one-minute period: the name, the count,
		// the first key and one step, whatever the count, plus the digest.
		{"steady period", steady, 64},
		// The live shape: 200 counters, five readings each, interleaved in
		// time order: names front-coded (pc-c-001, pc-c-002: two bytes
		// each), then count, first key and one step: about 1.6 bytes a reading.
		{"200 counters interleaved", live, 1600},
		{"jittered period", jittered, 0},
		{"interleaved counters, irregular", []rec{
			{"pc-asm-2", t0.Add(time.Second).UnixNano()}, {"pc-asm-1", t0.UnixNano()},
			{"pc-asm-2", t0.Add(61 * time.Second).UnixNano()}, {"pc-asm-1", t0.Add(-time.Hour).UnixNano()},
			{"pc-asm-2", t0.Add(62*time.Second + 7).UnixNano()},
		}, 0},
		{"sequence numbers", []rec{{"assembly", 1}, {"assembly", 2}, {"gowning", 1}, {"assembly", 9}}, 0},
		{"extremes", []rec{{"x", 0}, {"x", math.MaxInt64 - 1}, {"x", 0}, {"y", math.MaxInt64 - 1}}, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cov := newCoverage(coverReadings)
			for _, r := range c.recs {
				cov.add(r.name, nanosKey(r.key), []byte("v"))
			}
			d := cov.detail()
			if c.maxSize > 0 && len(d) > c.maxSize {
				t.Fatalf("detail %d bytes, want at most %d", len(d), c.maxSize)
			}
			got, err := decodeCoverage(d)
			if err != nil {
				t.Fatal(err)
			}
			if len(got.recs) != len(c.recs) {
				t.Fatalf("%d records back, %d in", len(got.recs), len(c.recs))
			}
			// Records come back per series, each series in the order written.
			want := map[string][]int64{}
			for _, r := range c.recs {
				want[r.name] = append(want[r.name], r.key)
			}
			back := map[string][]int64{}
			for _, r := range got.recs {
				back[got.names[r.name]] = append(back[got.names[r.name]], r.key)
			}
			if !reflect.DeepEqual(back, want) {
				t.Fatalf("records back %v, in %v", back, want)
			}
		})
	}
}

// FuzzDecodeCoverage: no Detail panics the decoder Verify runs on it.
func FuzzDecodeCoverage(f *testing.F) {
	cov := newCoverage(coverPressure)
	cov.add("dp-asm-gown", timeKey(t0), []byte("v"))
	cov.add("dp-asm-gown", timeKey(t0.Add(time.Second)), []byte("w"))
	f.Add(cov.detail())
	f.Add([]byte{coverJournal, 0xff, 0xff, 0xff, 0xff, 0x0f})
	f.Fuzz(func(t *testing.T, b []byte) {
		c, err := decodeCoverage(b)
		if err != nil {
			return
		}
		for _, r := range c.recs {
			if r.name >= len(c.names) {
				t.Fatalf("name index %d of %d names", r.name, len(c.names))
			}
		}
	})
}
