package store

import (
	"context"
	"errors"
	"math"
	"reflect"
	"testing"
	"time"
)

func TestEnvironmentSamples(t *testing.T) {
	dir := t.TempDir()
	s := openTest(t, dir, Options{NoSync: true})
	ctx := context.Background()
	var th []EnvSample
	for i := range 180 { // three hours of a T/RH probe, one sample a minute
		th = append(th, EnvSample{Sensor: "th-asm", Time: t0.Add(time.Duration(i) * time.Minute), Has: EnvTemperature | EnvHumidity,
			TemperatureC: 21 + float64(i%7)/10, HumidityPct: 45 - float64(i%5)})
	}
	av := []EnvSample{{Sensor: "av-hood", Time: t0, Has: EnvVelocity, VelocityMS: 0.45}, {Sensor: "av-hood", Time: t0.Add(time.Second), Has: EnvVelocity, VelocityMS: 0}}
	if acc, dup, err := s.AppendEnvironment(ctx, append(th, av...)); err != nil || acc != 182 || dup != 0 {
		t.Fatalf("append: %d %d %v", acc, dup, err)
	}
	if acc, dup, err := s.AppendEnvironment(ctx, av[:1]); err != nil || acc != 0 || dup != 1 {
		t.Fatalf("repeat: %d %d %v", acc, dup, err)
	}
	bad := []struct {
		e     EnvSample
		field string
	}{
		{EnvSample{Sensor: "th", Time: t0}, "Has"},
		{EnvSample{Sensor: "th", Time: t0, Has: EnvHumidity, HumidityPct: 101}, "HumidityPct"},
		{EnvSample{Sensor: "th", Time: t0, Has: EnvTemperature, TemperatureC: math.NaN()}, "TemperatureC"},
		{EnvSample{Sensor: "av", Time: t0, Has: EnvVelocity, VelocityMS: -0.1}, "VelocityMS"},
		{EnvSample{Sensor: "", Time: t0, Has: EnvVelocity}, "Sensor"},
	}
	for _, b := range bad {
		_, _, err := s.AppendEnvironment(ctx, []EnvSample{av[0], b.e})
		var re *RecordError
		if !errors.As(err, &re) || re.Index != 1 || re.Field != b.field {
			t.Fatalf("%+v: %v, want a RecordError at index 1 field %s", b.e, err, b.field)
		}
	}
	var got []EnvSample
	if err := s.ScanEnvironment("av-hood", time.Time{}, time.Time{}, func(e EnvSample) error { got = append(got, e); return nil }); err != nil || !reflect.DeepEqual(got, av) {
		t.Fatalf("scan %+v %v", got, err)
	}
	// Hourly rows over [10:30, 12:30): clipped at both edges, three rows.
	var rows []EnvRollup
	from, to := t0.Add(30*time.Minute), t0.Add(150*time.Minute)
	if err := s.ScanEnvironmentRollups("th-asm", time.Hour, from, to, func(r EnvRollup) error { rows = append(rows, r); return nil }); err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 || !rows[0].Start.Equal(from) || !rows[2].End.Equal(to) || rows[0].Samples != 30 || rows[1].Samples != 60 || rows[2].Samples != 30 {
		t.Fatalf("rows %+v", rows)
	}
	// Reference: the mean of the samples in the middle hour, summed here.
	var sum float64
	for _, e := range th[60:120] {
		sum += e.TemperatureC
	}
	if m := rows[1].Temperature; m.N != 60 || !near(m.Mean, sum/60) || m.Min != 21 || m.Max != 21.6 || rows[1].Velocity.N != 0 {
		t.Fatalf("middle hour %+v", rows[1])
	}
	if e, ok, err := s.LatestEnvironment("th-asm"); err != nil || !ok || !e.Time.Equal(th[179].Time) {
		t.Fatalf("latest %+v %v %v", e, ok, err)
	}
	res, err := s.Sweep(ctx, t0.Add(time.Hour))
	if err != nil || res.Environment != 62 {
		t.Fatalf("sweep %+v %v", res, err)
	}
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
}
