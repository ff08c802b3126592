package store

import (
	"context"
	"errors"
	"testing"
	"time"
)

func TestOperatingState(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{})
	ctx := context.Background()
	changes := []OperatingState{
		{Zone: "assembly", State: StateAtRest, By: "night shift", Reason: "end of shift", Time: t0},
		{Zone: "assembly", State: StateInOperation, By: "a.vries", Reason: "shift start", Time: t0.Add(8 * time.Hour)},
		// Recorded last with an earlier Time: still the current state.
		{Zone: "assembly", State: StateMaintenance, By: "facilities", Reason: "filter change", Time: t0.Add(time.Hour)},
		{Zone: "gowning", State: StateAtRest, By: "a.vries", Time: t0},
	}
	for _, c := range changes {
		if err := s.SetOperatingState(ctx, c); err != nil {
			t.Fatal(err)
		}
	}
	before := time.Now()
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "metrology", State: StateInOperation, By: "b.smit"}); err != nil {
		t.Fatal(err)
	}
	bad := []struct {
		st    OperatingState
		field string
	}{
		{OperatingState{State: StateAtRest}, "Zone"},
		{OperatingState{Zone: "assembly", State: "running"}, "State"},
		{OperatingState{Zone: "assembly", State: StateAtRest, Time: time.Date(1960, 1, 1, 0, 0, 0, 0, time.UTC)}, "Time"},
	}
	for _, c := range bad {
		var re *RecordError
		if err := s.SetOperatingState(ctx, c.st); !errors.As(err, &re) || re.Field != c.field {
			t.Fatalf("SetOperatingState(%+v) = %v, want field %s", c.st, err, c.field)
		}
	}
	check := func(s *Store) {
		t.Helper()
		latest, err := s.OperatingStates()
		if err != nil {
			t.Fatal(err)
		}
		if len(latest) != 3 || latest["assembly"] != changes[2] || latest["gowning"] != changes[3] {
			t.Fatalf("latest %+v", latest)
		}
		if m := latest["metrology"]; m.Time.Before(before.Add(-time.Second)) || m.Time.After(time.Now()) {
			t.Fatalf("zero Time was not set to now: %v", m.Time)
		}
		var hist []OperatingState
		if err := s.OperatingStateHistory("assembly", func(st OperatingState) error {
			hist = append(hist, st)
			return nil
		}); err != nil {
			t.Fatal(err)
		}
		if len(hist) != 3 || hist[0] != changes[0] || hist[1] != changes[1] || hist[2] != changes[2] {
			t.Fatalf("history %+v", hist)
		}
	}
	check(s)
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	check(openTest(t, dir, Options{}))
}
