package store

import (
	"context"
	"errors"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func envSample(sensor string, at time.Time, tc, rh float64) EnvSample {
	return EnvSample{Sensor: sensor, Time: at, TemperatureC: tc, HumidityPct: rh, HasTemperature: true, HasHumidity: true}
}

// TestEnvironmentCommitScanReopen: samples are stored once (a resent
// sample is a duplicate), scanned in [from, to) in time order with only
// their own channels, and are still there after the store is reopened.
func TestEnvironmentCommitScanReopen(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{})
	ctx := context.Background()
	batch := []EnvSample{
		envSample("th-asm", t0.Add(2*time.Minute), 21.3, 44.5),
		envSample("th-asm", t0, 21.1, 45.0),
		{Sensor: "av-hood", Time: t0, VelocityMS: 0.45, HasVelocity: true},
		envSample("th-asm", t0.Add(time.Minute), 21.2, 44.8),
	}
	if acc, dup, err := s.CommitEnvironment(ctx, batch); err != nil || acc != 4 || dup != 0 {
		t.Fatalf("commit: %d accepted, %d duplicates, %v; want 4, 0", acc, dup, err)
	}
	if acc, dup, err := s.CommitEnvironment(ctx, batch[1:2]); err != nil || acc != 0 || dup != 1 {
		t.Fatalf("resend: %d accepted, %d duplicates, %v; want 0, 1", acc, dup, err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s = openTest(t, dir, Options{})
	var got []EnvSample
	if err := s.ScanEnvironment("th-asm", t0, t0.Add(2*time.Minute), func(e EnvSample) error { got = append(got, e); return nil }); err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || !got[0].Time.Equal(t0) || got[1].TemperatureC != 21.2 || got[1].HasVelocity {
		t.Fatalf("scan [t0, t0+2m) = %+v, want the samples at t0 and t0+1m only", got)
	}
	av, ok, err := s.LatestEnvironment("av-hood")
	if err != nil || !ok || av.VelocityMS != 0.45 || av.HasTemperature || av.HasHumidity {
		t.Fatalf("latest av-hood = %+v %v %v", av, ok, err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if problems, err := Verify(filepath.Join(dir, FileName)); err != nil || len(problems) != 0 {
		t.Fatalf("verify of a good file: %q, %v", problems, err)
	}
}

// TestEnvironmentRefusesWhole: one bad sample refuses the batch, naming
// it, and stores nothing.
func TestEnvironmentRefusesWhole(t *testing.T) {
	s := quick(t)
	_, _, err := s.CommitEnvironment(context.Background(), []EnvSample{
		envSample("th-asm", t0, 21, 45),
		{Sensor: "th-asm", Time: t0.Add(time.Minute)},
	})
	var re *RecordError
	if !errors.As(err, &re) || re.Index != 1 {
		t.Fatalf("err %v, want a RecordError at index 1", err)
	}
	n := 0
	_ = s.ScanEnvironment("th-asm", t0, t0.Add(time.Hour), func(EnvSample) error { n++; return nil })
	if n != 0 {
		t.Fatalf("%d samples stored from a refused batch", n)
	}
}

// TestVerifyFindsChangedEnvironmentSample: a flipped byte in a stored
// sample is named by verify.
func TestVerifyFindsChangedEnvironmentSample(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{})
	if _, _, err := s.CommitEnvironment(context.Background(), []EnvSample{envSample("th-met", t0, 20.1, 41)}); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, FileName)
	flipValue(t, path, rawValue(t, path, [][]byte{bucketEnvironment, []byte("th-met")}, timeKey(t0)))
	problems, err := Verify(path)
	if err != nil {
		t.Fatal(err)
	}
	want := `environment sample of sensor "th-met" at 2026-03-02T10:00:00Z: checksum mismatch`
	if len(problems) != 1 || !strings.Contains(problems[0], want) {
		t.Fatalf("problems %q, want one naming %q", problems, want)
	}
}
