package store

import (
	"bytes"
	"context"
	"encoding/binary"
	"math"
	"reflect"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// pressureInput builds time-ordered samples from fuzz bytes: steps and
// values vary, some values are whole millipascals and some are not.
func pressureInput(data []byte) []pchunkSample {
	var out []pchunkSample
	ns := int64(1_700_000_000) * int64(time.Second)
	for len(data) >= 10 && len(out) < maxChunkReadings {
		ns += int64(binary.LittleEndian.Uint16(data)) + 1
		var pa float64
		if data[2]&1 == 0 {
			pa = float64(int16(binary.LittleEndian.Uint16(data[3:]))) / 1000 // whole mPa
		} else {
			pa = math.Float64frombits(binary.LittleEndian.Uint64(data[2:]))
		}
		data = data[10:]
		if !finite(pa) {
			continue
		}
		out = append(out, pchunkSample{ns: ns, pa: pa})
	}
	return out
}

func FuzzChunkPressure(f *testing.F) {
	f.Add(bytes.Repeat([]byte{0x10, 0x27, 0x00, 0x7c, 0x30, 0, 0, 0, 0, 0}, 40))
	f.Add(bytes.Repeat([]byte{0x01, 0x00, 0x01, 0x9a, 0x99, 0x99, 0x99, 0x99, 0x99, 0x29}, 40))
	f.Add(append(make([]byte, 10), 1, 0, 0, 0, 0, 0, 0, 0, 0, 0x80)) // −0 after +0
	f.Fuzz(func(t *testing.T, data []byte) {
		ps := pressureInput(data)
		if len(ps) == 0 {
			return
		}
		key := nanosKey(ps[len(ps)-1].ns)
		got, tags, err := decodePChunk("dp-f", key, encodePChunk(key, ps))
		if err != nil || len(got) != len(ps) {
			t.Fatalf("decode: %d of %d, %v", len(got), len(ps), err)
		}
		for i := range ps {
			k := nanosKey(ps[i].ns)
			if got[i].ns != ps[i].ns || !bytes.Equal(got[i].v1Value(k), ps[i].v1Value(k)) || tags[i] != tagOf(ps[i].v1Value(k)) {
				t.Fatalf("sample %d: %+v, want %+v", i, got[i], ps[i])
			}
		}
	})
}

// TestPressureChunks: DP samples move into chunks like readings: every
// sample comes back once across chunk and head, duplicates are known,
// the latest is found, Sweep cuts a chunk, and Verify still names a
// changed or removed sample.
func TestPressureChunks(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1})
	ctx := context.Background()
	var ps []Pressure
	for i := range 5000 { // every 10 s; a door opening every 500 samples
		pa := 12.4 + float64(i%7)/10
		if i%500 == 250 {
			pa = -1.25 // a reversal is data too
		}
		ps = append(ps, Pressure{Sensor: "dp-asm-gown", Time: t0.Add(time.Duration(i) * 10 * time.Second), Pa: pa})
	}
	if _, _, err := s.AppendPressure(ctx, ps[:4000]); err != nil {
		t.Fatal(err)
	}
	if res := compactOK(t, s); res.Readings != 4000 {
		t.Fatalf("compaction %+v", res)
	}
	if acc, dup, err := s.AppendPressure(ctx, ps[3990:]); err != nil || acc != 1000 || dup != 10 {
		t.Fatalf("append across the chunk end: %d %d %v", acc, dup, err)
	}
	var got []Pressure
	if err := s.ScanPressure("dp-asm-gown", time.Time{}, time.Time{}, func(p Pressure) error { got = append(got, p); return nil }); err != nil || !reflect.DeepEqual(got, ps) {
		t.Fatalf("scan: %d samples, %v", len(got), err)
	}
	got = got[:0]
	from, to := ps[2047].Time, ps[4001].Time
	if err := s.ScanPressure("dp-asm-gown", from, to, func(p Pressure) error { got = append(got, p); return nil }); err != nil || !reflect.DeepEqual(got, ps[2047:4001]) {
		t.Fatalf("scan across chunk and head boundaries: %d samples, %v", len(got), err)
	}
	if p, ok, err := s.LatestPressure("dp-asm-gown"); err != nil || !ok || !p.Time.Equal(ps[4999].Time) {
		t.Fatalf("latest %+v %v %v", p, ok, err)
	}
	compactOK(t, s)
	if p, ok, err := s.LatestPressure("dp-asm-gown"); err != nil || !ok || p != ps[4999] {
		t.Fatalf("latest chunked %+v %v %v", p, ok, err)
	}
	if res, err := s.Sweep(ctx, ps[100].Time); err != nil || res.Pressure != 100 {
		t.Fatalf("sweep %+v %v", res, err)
	}
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
	// A sample removed from its chunk (after the sweep it starts at
	// sample 100, 10:16:40) is named by the audit chain.
	rawUpdate(t, dir+"/"+FileName, func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketPChunks).Bucket([]byte("dp-asm-gown"))
		k, v := b.Cursor().First()
		got, _, err := decodePChunk("dp-asm-gown", k, v)
		if err != nil {
			return err
		}
		got = append(got[:5], got[6:]...)
		return b.Put(append([]byte(nil), k...), encodePChunk(k, got))
	})
	problems, err := Verify(dir)
	if err != nil || !containsProblem(problems, `pressure of sensor "dp-asm-gown" at 2026-03-02T10:17:30Z is missing`) {
		t.Fatalf("Verify after a removal: %q %v", problems, err)
	}
}
