package store

import (
	"context"
	"path/filepath"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Environment samples are covered by the audit chain like readings: a
// sample changed, removed or added behind the store's back is named by
// Verify, whether it is still in the head or compacted into a chunk.
func TestEnvironmentTamperNamed(t *testing.T) {
	head := func(edit func(b *bolt.Bucket) error) func(tx *bolt.Tx) error {
		return func(tx *bolt.Tx) error { return edit(tx.Bucket(bucketEnvironment).Bucket([]byte("th-asm"))) }
	}
	// chunk rewrites the sensor's one chunk with what edit makes of it.
	chunk := func(edit func(es []echunkSample) []echunkSample) func(tx *bolt.Tx) error {
		return func(tx *bolt.Tx) error {
			b := tx.Bucket(bucketEChunks).Bucket([]byte("th-asm"))
			k, v := b.Cursor().First()
			es, _, err := decodeEChunk("th-asm", k, v)
			if err != nil {
				return err
			}
			k = append([]byte(nil), k...)
			if err := b.Delete(k); err != nil {
				return err
			}
			es = edit(es)
			nk := nanosKey(es[len(es)-1].ns)
			return b.Put(nk, encodeEChunk(nk, es))
		}
	}
	at := func(i int) string { return t0.Add(time.Duration(i) * time.Minute).Format(time.RFC3339Nano) }
	cases := []struct {
		name    string
		compact bool // Close moves the samples into a chunk before the edit
		edit    func(tx *bolt.Tx) error
		want    string
	}{
		{"head: changed", false, head(func(b *bolt.Bucket) error {
			k, v := b.Cursor().First()
			e, err := decodeEnv("th-asm", k, v)
			if err != nil {
				return err
			}
			e.TemperatureC += 3 // a warm minute made to look normal, or the reverse
			return b.Put(k, encodeEnv(k, &e))
		}), "were changed after they were stored"},
		{"head: removed", false, head(func(b *bolt.Bucket) error {
			k, _ := b.Cursor().Last()
			return b.Delete(k)
		}), `environment sample of sensor "th-asm" at ` + at(29) + " is missing"},
		{"head: added", false, head(func(b *bolt.Bucket) error {
			e := EnvSample{Sensor: "th-asm", Time: t0.Add(time.Hour), Has: EnvTemperature, TemperatureC: 21}
			k := timeKey(e.Time)
			return b.Put(k, encodeEnv(k, &e))
		}), `not covered by the audit chain`},
		{"chunk: changed, chunk re-encoded", true, chunk(func(es []echunkSample) []echunkSample {
			es[12].vals[0] += 3
			return es
		}), "were changed after they were stored"},
		{"chunk: changed in place, checksum left", true, func(tx *bolt.Tx) error {
			// The last byte before the tags is the last sample's humidity
			// delta: flipping its low bit changes that sample only.
			b := tx.Bucket(bucketEChunks).Bucket([]byte("th-asm"))
			k, v := b.Cursor().First()
			nv := append([]byte(nil), v...)
			nv[len(nv)-crcLen-30-1] ^= 0x01
			return b.Put(append([]byte(nil), k...), nv)
		}, `environment sample of sensor "th-asm" at ` + at(29) + ": changed after it was stored"},
		{"chunk: removed", true, chunk(func(es []echunkSample) []echunkSample {
			return append(es[:7], es[8:]...)
		}), `environment sample of sensor "th-asm" at ` + at(7) + " is missing"},
		{"chunk: added", true, chunk(func(es []echunkSample) []echunkSample {
			extra := es[0]
			extra.ns -= int64(time.Hour)
			return append([]echunkSample{extra}, es...)
		}), `1 of 31 records in the environment samples of sensor "th-asm" are not covered by the audit chain`},
		{"chunk: a sample back in the head", true, func(tx *bolt.Tx) error {
			b, err := tx.Bucket(bucketEnvironment).CreateBucketIfNotExists([]byte("th-asm"))
			if err != nil {
				return err
			}
			e := EnvSample{Sensor: "th-asm", Time: t0.Add(5 * time.Minute), Has: EnvTemperature | EnvHumidity, TemperatureC: 21, HumidityPct: 45.5}
			k := timeKey(e.Time)
			return b.Put(k, encodeEnv(k, &e))
		}, `environment sample of sensor "th-asm" at ` + at(5) + " is both in the head and in a chunk"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1, keepHead: !c.compact})
			var es []EnvSample
			for i := range 30 {
				es = append(es, EnvSample{Sensor: "th-asm", Time: t0.Add(time.Duration(i) * time.Minute), Has: EnvTemperature | EnvHumidity, TemperatureC: 21, HumidityPct: 45 + float64(i%3)/2})
			}
			if _, _, err := s.AppendEnvironment(context.Background(), es); err != nil {
				t.Fatal(err)
			}
			if err := s.Close(); err != nil {
				t.Fatal(err)
			}
			if problems, err := Verify(dir); err != nil || len(problems) != 0 {
				t.Fatalf("before: %q %v", problems, err)
			}
			chunked := false
			editFile(t, dir, func(tx *bolt.Tx) error {
				chunked = tx.Bucket(bucketEChunks).Bucket([]byte("th-asm")) != nil
				return c.edit(tx)
			})
			if chunked != c.compact {
				t.Fatalf("samples in a chunk: %v, want %v", chunked, c.compact)
			}
			problems, err := Verify(dir)
			if err != nil {
				t.Fatal(err)
			}
			if !containsProblem(problems, c.want) {
				t.Errorf("Verify says %q, want %q", problems, c.want)
			}
		})
	}
}

// A file whose chain began before environment samples were covered gets
// one entry recording what it held, on its next start: its older samples
// are not named as uncovered, and samples added outside the store after
// it are.
func TestEnvironmentCoverStartsOnce(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	// The file as the previous version left it: samples stored, no
	// cover of them, no marker.
	editFile(t, dir, func(tx *bolt.Tx) error {
		b, err := tx.Bucket(bucketEnvironment).CreateBucketIfNotExists([]byte("th-old"))
		if err != nil {
			return err
		}
		for i := range 5 {
			e := EnvSample{Sensor: "th-old", Time: t0.Add(time.Duration(i) * time.Minute), Has: EnvHumidity, HumidityPct: 40}
			k := timeKey(e.Time)
			if err := b.Put(k, encodeEnv(k, &e)); err != nil {
				return err
			}
		}
		return tx.Bucket(bucketMeta).Delete(metaEnvCovered)
	})
	for range 2 { // the second start adds nothing
		s = openTest(t, dir, Options{NoSync: true})
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
	}
	problems, err := Verify(dir)
	if err != nil || len(problems) != 0 {
		t.Fatalf("older samples: %q %v", problems, err)
	}
	n := 0
	s = openTest(t, dir, Options{NoSync: true})
	_ = s.ScanAudit(1, 0, func(e AuditEntry) error {
		if e.Action == AuditEnvStart {
			n++
		}
		return nil
	})
	_ = s.Close()
	if n != 1 {
		t.Errorf("%d %s entries, want 1", n, AuditEnvStart)
	}
}

// editFile changes the closed store in dir directly, as someone with
// write access to the data directory could.
func editFile(t *testing.T, dir string, edit func(tx *bolt.Tx) error) {
	t.Helper()
	db, err := bolt.Open(filepath.Join(dir, FileName), 0o600, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.Update(edit); err != nil {
		t.Fatal(err)
	}
}
