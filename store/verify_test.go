package store

import (
	"bytes"
	"os"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// verifyFixture is a closed store with readings, pressure, rollups and
// operating state.
func verifyFixture(t *testing.T) string {
	t.Helper()
	s := openTest(t, t.TempDir(), Options{NoSync: true})
	appendOK(t, s, series("pc-asm-1", t0, 300))
	met := series("pc-met", t0, 50)
	for i := range met {
		met[i].VolumeL, met[i].FlowLPM = 2.83, 2.83 // its 2.83 L/min (DESIGN §6)
	}
	appendOK(t, s, met)
	ctx := t.Context()
	if _, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp-asm-gown", Time: t0, Pa: 12.4}, {Sensor: "dp-asm-gown", Time: t0.Add(time.Minute), Pa: 9.8}}); err != nil {
		t.Fatal(err)
	}
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: StateInOperation, By: "op", Reason: "shift", Time: t0}); err != nil {
		t.Fatal(err)
	}
	path := s.Path()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestVerifyGoodFile(t *testing.T) {
	path := verifyFixture(t)
	problems, err := Verify(path)
	if err != nil || len(problems) != 0 {
		t.Fatalf("Verify(good file) = %q, %v", problems, err)
	}
	if _, err := Verify(t.TempDir() + "/missing.db"); err == nil {
		t.Fatal("Verify of a missing file did not fail")
	}
}

func rawValue(t *testing.T, path string, bucket [][]byte, key []byte) []byte {
	t.Helper()
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var out []byte
	_ = db.View(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucket[0])
		for _, n := range bucket[1:] {
			b = b.Bucket(n)
		}
		out = append([]byte(nil), b.Get(key)...)
		return nil
	})
	if out == nil {
		t.Fatalf("no value at %q %x", bucket, key)
	}
	return out
}

func TestVerifyFlippedByte(t *testing.T) {
	at := t0.Add(17 * time.Minute)
	key := timeKey(at)
	cases := []struct {
		name   string
		bucket [][]byte
		key    []byte
		want   string
	}{
		{"reading", [][]byte{bucketReadings, []byte("pc-asm-1")}, key, `reading of counter "pc-asm-1" at 2026-03-02T10:17:00Z: checksum mismatch`},
		{"minute rollup", [][]byte{bucketRollup1m, []byte("pc-met")}, key, `1m0s rollup of counter "pc-met" at 2026-03-02T10:17:00Z: checksum mismatch`},
		{"pressure", [][]byte{bucketPressure, []byte("dp-asm-gown")}, timeKey(t0.Add(time.Minute)), `pressure of sensor "dp-asm-gown" at 2026-03-02T10:01:00Z: checksum mismatch`},
		{"operating state", [][]byte{bucketOpState, []byte("assembly")}, nanosKey(1), `operating state of zone "assembly"`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := verifyFixture(t)
			val := rawValue(t, path, c.bucket, c.key)
			file, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			// The value may also survive in freed pages; flip the same
			// byte in every copy so the live one is surely hit.
			hits := 0
			for off := 0; ; {
				i := bytes.Index(file[off:], val)
				if i < 0 {
					break
				}
				file[off+i+len(val)/2] ^= 0x10
				off += i + len(val)
				hits++
			}
			if hits == 0 {
				t.Fatal("value not found in the file")
			}
			if err := os.WriteFile(path, file, 0o600); err != nil {
				t.Fatal(err)
			}
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(problems) != 1 || !strings.Contains(problems[0], c.want) {
				t.Fatalf("problems %q, want one naming %q", problems, c.want)
			}
		})
	}
}

func TestVerifyInvariants(t *testing.T) {
	hour := nanosKey(t0.UnixNano())
	cases := []struct {
		name   string
		change func(tx *bolt.Tx) error
		want   string
	}{
		{"rollup count off by one", func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketRollup1h).Bucket([]byte("pc-asm-1"))
			acc, err := decodeRollup("pc-asm-1", time.Hour, hour, b.Get(hour))
			if err != nil {
				return err
			}
			acc.samples++
			return b.Put(hour, encodeRollup(hour, acc))
		}, `1h0m0s rollup of counter "pc-asm-1" at 2026-03-02T10:00:00Z counts 61 samples, the bucket holds 60 readings`},
		{"reading deleted behind the rollups' back", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketReadings).Bucket([]byte("pc-met")).Delete(timeKey(t0.Add(5 * time.Minute)))
		}, `1m0s rollup of counter "pc-met" at 2026-03-02T10:05:00Z has no readings in its bucket`},
		{"rollup missing", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketRollup1h).Bucket([]byte("pc-met")).Delete(hour)
		}, `1h0m0s rollup of counter "pc-met" at 2026-03-02T10:00:00Z is missing (50 readings)`},
		{"short key", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketPressure).Bucket([]byte("dp-asm-gown")).Put([]byte{1, 2, 3}, []byte{1})
		}, `pressure/dp-asm-gown: key 010203 is not 8 bytes`},
		{"value where a series bucket belongs", func(tx *bolt.Tx) error {
			return tx.Bucket(bucketReadings).Put([]byte("stray"), []byte{1})
		}, `readings: entry "stray" is a value, not a bucket`},
		{"unknown top-level bucket", func(tx *bolt.Tx) error {
			_, err := tx.CreateBucket([]byte("scratch"))
			return err
		}, `unknown top-level bucket "scratch"`},
		{"value copied under another key", func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketReadings).Bucket([]byte("pc-asm-1"))
			v := append([]byte(nil), b.Get(timeKey(t0))...)
			return b.Put(timeKey(t0.Add(time.Minute)), v)
		}, `reading of counter "pc-asm-1" at 2026-03-02T10:01:00Z: checksum mismatch`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := verifyFixture(t)
			db, err := bolt.Open(path, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := db.Update(c.change); err != nil {
				t.Fatal(err)
			}
			_ = db.Close()
			problems, err := Verify(path)
			if err != nil {
				t.Fatal(err)
			}
			found := false
			for _, p := range problems {
				found = found || strings.Contains(p, c.want)
			}
			if !found {
				t.Fatalf("problems %q, want one containing %q", problems, c.want)
			}
		})
	}
}

func TestVerifyDamagedFile(t *testing.T) {
	_, path, size := damagedFixture(t)
	if err := os.Truncate(path, size/2); err != nil {
		t.Fatal(err)
	}
	problems, err := Verify(path)
	wantErr(t, err, ErrCorrupt)
	if len(problems) != 1 || !strings.Contains(problems[0], "truncated") {
		t.Fatalf("problems %q", problems)
	}
}
