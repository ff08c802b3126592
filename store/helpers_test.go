package store

import (
	"context"
	"errors"
	"math"
	"reflect"
	"testing"
	"time"
)

// Reference values used across the tests.
var (
	// Threshold sizes of ISO 14644-1:2015 Table 1 columns, µm.
	isoSizes = []float64{0.3, 0.5, 1, 5}
	// One minute at 28.3 L/min, the usual counter flow (EU GMP Annex 1,
	// from memory).
	oneMinuteL = 28.3
	t0         = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
)

func openTest(t testing.TB, dir string, opt Options) *Store {
	t.Helper()
	s, err := Open(dir, opt)
	if err != nil {
		t.Fatalf("Open(%s): %v", dir, err)
	}
	t.Cleanup(func() { _ = s.Close() })
	return s
}

// quick is a store for tests where durability is not the subject.
func quick(t testing.TB) *Store { return openTest(t, t.TempDir(), Options{NoSync: true}) }

// reading builds a cumulative reading of counter at t with counts that
// fall with size as real ones do.
func reading(counter string, t time.Time, base uint64) Reading {
	return Reading{
		Counter: counter, Time: t, VolumeL: oneMinuteL, FlowLPM: 28.3, SampleSeconds: 60, Status: "ok",
		Sizes:  append([]float64(nil), isoSizes...),
		Counts: []uint64{base * 10, base * 4, base, base / 10},
	}
}

// series is n one-minute readings of counter from start.
func series(counter string, start time.Time, n int) []Reading {
	rs := make([]Reading, n)
	for i := range rs {
		rs[i] = reading(counter, start.Add(time.Duration(i)*time.Minute), uint64(100+i%37))
	}
	return rs
}

func appendOK(t testing.TB, s *Store, rs []Reading) (int, int) {
	t.Helper()
	acc, dup, err := s.AppendReadings(context.Background(), rs)
	if err != nil {
		t.Fatalf("AppendReadings(%d readings): %v", len(rs), err)
	}
	return acc, dup
}

func scanAll(t testing.TB, s *Store, counter string, from, to time.Time) []Reading {
	t.Helper()
	var out []Reading
	if err := s.ScanReadings(counter, from, to, func(r Reading) error {
		out = append(out, r)
		return nil
	}); err != nil {
		t.Fatalf("ScanReadings(%q): %v", counter, err)
	}
	return out
}

func rollupsAll(t testing.TB, s *Store, counter string, step time.Duration) []Rollup {
	t.Helper()
	var out []Rollup
	if err := s.ScanRollups(counter, step, time.Time{}, time.Time{}, func(r Rollup) error {
		out = append(out, r)
		return nil
	}); err != nil {
		t.Fatalf("ScanRollups(%q, %s): %v", counter, step, err)
	}
	return out
}

func sameReading(a, b Reading) bool {
	return a.Counter == b.Counter && a.Time.Equal(b.Time) && a.VolumeL == b.VolumeL &&
		a.FlowLPM == b.FlowLPM && a.SampleSeconds == b.SampleSeconds && a.Status == b.Status &&
		a.Differential == b.Differential && reflect.DeepEqual(a.Sizes, b.Sizes) && reflect.DeepEqual(a.Counts, b.Counts)
}

func near(a, b float64) bool {
	return math.Abs(a-b) <= 1e-9*math.Max(1, math.Max(math.Abs(a), math.Abs(b)))
}

func wantErr(t testing.TB, err, target error) {
	t.Helper()
	if !errors.Is(err, target) {
		t.Fatalf("error = %v, want %v", err, target)
	}
}
