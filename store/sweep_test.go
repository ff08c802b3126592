package store

import (
	"context"
	"testing"
	"time"
)

func TestSweep(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	// 3 days of one-minute readings from two counters, 30 s pressure.
	const days = 3
	for _, c := range []string{"pc-asm-1", "pc-asm-2"} {
		appendOK(t, s, series(c, t0, days*24*60))
	}
	compactOK(t, s) // into chunks and hourly rollups, which the sweep cuts
	var ps []Pressure
	for i := 0; i < days*24*120; i++ {
		ps = append(ps, Pressure{Sensor: "dp-asm-gown", Time: t0.Add(time.Duration(i) * 30 * time.Second), Pa: 11})
	}
	if _, _, err := s.AppendPressure(ctx, ps); err != nil {
		t.Fatal(err)
	}
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: StateAtRest, Time: t0}); err != nil {
		t.Fatal(err)
	}
	// Mid-hour, mid-minute cut: 1 day, 2 h, 30 min and 30 s after t0.
	before := t0.Add(26*time.Hour + 30*time.Minute + 30*time.Second)
	res, err := s.Sweep(ctx, before)
	if err != nil {
		t.Fatal(err)
	}
	// Readings at t0+0 … t0+1590 min are older: 1591 per counter.
	wantReadings := 2 * 1591
	// Pressure every 30 s up to and including 26:30:00: 3181 samples.
	wantPressure := 3181
	// Rollups wholly older: 26 hour buckets per counter (the 27th
	// straddles; no minute rollups are kept).
	wantRollups := 2 * 26
	if res.Readings != wantReadings || res.Pressure != wantPressure || res.Rollups != wantRollups || !res.Before.Equal(before) {
		t.Fatalf("swept %+v, want readings %d pressure %d rollups %d", res, wantReadings, wantPressure, wantRollups)
	}
	left := scanAll(t, s, "pc-asm-1", time.Time{}, time.Time{})
	if len(left) != days*24*60-1591 || left[0].Time.Before(before) {
		t.Fatalf("%d readings left, first %s", len(left), left[0].Time)
	}
	if r := rollupsAll(t, s, "pc-asm-1", time.Hour); r[0].Start != t0.Add(26*time.Hour) || r[0].Samples != 60 {
		t.Fatalf("first hour rollup kept %+v: the straddling bucket must stay whole", r[0])
	}
	if st, _ := s.OperatingStates(); len(st) != 1 {
		t.Fatal("sweep removed operating-state history")
	}
	// A second sweep at the same horizon finds nothing; one past the end empties everything.
	if res, err = s.Sweep(ctx, before); err != nil || res.Readings+res.Pressure+res.Rollups != 0 {
		t.Fatalf("repeat sweep %+v %v", res, err)
	}
	if res, err = s.Sweep(ctx, t0.Add(days*24*time.Hour+time.Hour)); err != nil || res.Readings != 2*(days*24*60-1591) {
		t.Fatalf("final sweep %+v %v", res, err)
	}
	if _, ok, _ := s.LatestReading("pc-asm-1"); ok {
		t.Fatal("readings left after sweeping past the end")
	}
	path := s.Path()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if problems, err := Verify(path); err != nil || len(problems) != 0 {
		t.Fatalf("Verify after sweeps: %v %v", problems, err)
	}
}

func TestSweepCanceled(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-asm-1", t0, 100))
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	res, err := s.Sweep(ctx, t0.Add(time.Hour))
	wantErr(t, err, context.Canceled)
	if res.Readings != 0 || len(scanAll(t, s, "pc-asm-1", time.Time{}, time.Time{})) != 100 {
		t.Fatalf("canceled sweep deleted %+v", res)
	}
	_, err = s.Sweep(context.Background(), time.Time{})
	wantErr(t, err, ErrInvalid)
}
