package store

import (
	"context"
	"errors"
	"math"
	"testing"
	"time"
)

func TestPressure(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	// 12.4 Pa and a reversal of -3 Pa: EU GMP Annex 1 guidance, from memory (≥10 Pa between grades is
	// guidance, a negative DP is a reversal; from memory).
	ps := []Pressure{
		{Sensor: "dp-asm-gown", Time: t0, Pa: 12.4},
		{Sensor: "dp-asm-gown", Time: t0.Add(time.Second), Pa: -3},
		{Sensor: "dp-asm-gown", Time: t0.Add(time.Second), Pa: -3}, // repeated in the call
		{Sensor: "dp-hood-asm", Time: t0, Pa: 6.1},
	}
	acc, dup, err := s.AppendPressure(ctx, ps)
	if err != nil || acc != 3 || dup != 1 {
		t.Fatalf("accepted %d duplicates %d err %v, want 3 1 nil", acc, dup, err)
	}
	if acc, dup, _ = s.AppendPressure(ctx, ps[:1]); acc != 0 || dup != 1 {
		t.Fatalf("repeat: accepted %d duplicates %d", acc, dup)
	}
	var got []Pressure
	if err := s.ScanPressure("dp-asm-gown", time.Time{}, time.Time{}, func(p Pressure) error {
		got = append(got, p)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || got[0].Pa != 12.4 || got[1].Pa != -3 || !got[1].Time.Equal(t0.Add(time.Second)) {
		t.Fatalf("scan %+v", got)
	}
	last, ok, err := s.LatestPressure("dp-hood-asm")
	if err != nil || !ok || last.Pa != 6.1 || last.Sensor != "dp-hood-asm" {
		t.Fatalf("latest %+v %v %v", last, ok, err)
	}

	bad := []struct {
		name  string
		p     Pressure
		field string
	}{
		{"empty sensor", Pressure{Time: t0, Pa: 1}, "Sensor"},
		{"zero time", Pressure{Sensor: "dp-x", Pa: 1}, "Time"},
		{"NaN", Pressure{Sensor: "dp-x", Time: t0, Pa: math.NaN()}, "Pa"},
	}
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			_, _, err := s.AppendPressure(ctx, []Pressure{{Sensor: "dp-x", Time: t0, Pa: 1}, c.p})
			var re *RecordError
			if !errors.As(err, &re) || re.Index != 1 || re.Field != c.field {
				t.Fatalf("err %v, want index 1 field %s", err, c.field)
			}
			if _, ok, _ := s.LatestPressure("dp-x"); ok {
				t.Fatal("the good sample of a rejected call was stored")
			}
		})
	}
}

// Marked appends say per sample what became of it: a repeat with the same
// value is a duplicate, one with another value a conflict (the first
// stays), for DP and environment samples alike.
func TestSampleOutcomes(t *testing.T) {
	s := quick(t)
	ctx := context.Background()
	ps := []Pressure{
		{Sensor: "dp-asm-gown", Time: t0, Pa: 12.4},
		{Sensor: "dp-asm-gown", Time: t0, Pa: 12.4}, // repeated
		{Sensor: "dp-asm-gown", Time: t0, Pa: -3},   // same time, other value
		{Sensor: "dp-hood-asm", Time: t0, Pa: 6.1},
	}
	got, err := s.AppendPressureMarked(ctx, ps)
	want := []Outcome{Stored, Duplicate, Conflict, Stored}
	if err != nil || len(got) != len(want) {
		t.Fatalf("outcomes %v, %v", got, err)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("pressure sample %d: outcome %d, want %d", i, got[i], want[i])
		}
	}
	es := []EnvSample{
		{Sensor: "th-asm", Time: t0, Has: EnvTemperature, TemperatureC: 21.5},
		{Sensor: "th-asm", Time: t0, Has: EnvTemperature, TemperatureC: 23},
	}
	eg, err := s.AppendEnvironmentMarked(ctx, es)
	if err != nil || len(eg) != 2 || eg[0] != Stored || eg[1] != Conflict {
		t.Fatalf("environment outcomes %v, %v", eg, err)
	}
	if eg, err = s.AppendEnvironmentMarked(ctx, es[:1]); err != nil || len(eg) != 1 || eg[0] != Duplicate {
		t.Fatalf("environment repeat %v, %v", eg, err)
	}
}
