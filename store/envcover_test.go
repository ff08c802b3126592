package store

import (
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

// Environment samples are covered by the audit chain like readings: a
// sample changed, removed or added behind the store's back is named by
// Verify.
func TestEnvironmentTamperNamed(t *testing.T) {
	cases := []struct {
		name string
		edit func(b *bolt.Bucket) error
		want string
	}{
		{"changed", func(b *bolt.Bucket) error {
			k, v := b.Cursor().First()
			e, err := decodeEnv("th-asm", k, v)
			if err != nil {
				return err
			}
			e.TemperatureC += 3 // a warm minute made to look normal, or the reverse
			return b.Put(k, encodeEnv(k, &e))
		}, "were changed after they were stored"},
		{"removed", func(b *bolt.Bucket) error {
			k, _ := b.Cursor().Last()
			return b.Delete(k)
		}, `environment sample of sensor "th-asm" at`},
		{"added", func(b *bolt.Bucket) error {
			e := EnvSample{Sensor: "th-asm", Time: t0.Add(time.Hour), Has: EnvTemperature, TemperatureC: 21}
			k := timeKey(e.Time)
			return b.Put(k, encodeEnv(k, &e))
		}, `not covered by the audit chain`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			s := openTest(t, dir, Options{NoSync: true})
			var es []EnvSample
			for i := range 30 {
				es = append(es, EnvSample{Sensor: "th-asm", Time: t0.Add(time.Duration(i) * time.Minute), Has: EnvTemperature | EnvHumidity, TemperatureC: 21, HumidityPct: 45})
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
			editFile(t, dir, func(tx *bolt.Tx) error { return c.edit(tx.Bucket(bucketEnvironment).Bucket([]byte("th-asm"))) })
			problems, err := Verify(dir)
			if err != nil {
				t.Fatal(err)
			}
			if !strings.Contains(strings.Join(problems, "\n"), c.want) {
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
