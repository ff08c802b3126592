package collector

import (
	"context"
	"reflect"
	"sort"
	"strings"
	"testing"
	"time"
)

func backfillEnv(t *testing.T, seed uint64, days int) []RawEnvironment {
	t.Helper()
	s, err := NewSimulator(demoEnvRegistry(t), demoLimits(), SimOptions{Seed: seed})
	if err != nil {
		t.Fatal(err)
	}
	from := time.Date(2026, 2, 1, 0, 0, 0, 0, time.UTC)
	var out []RawEnvironment
	for b := range s.Backfill(from, from.Add(time.Duration(days)*24*time.Hour), 6*time.Hour) {
		out = append(out, b.Environment...)
	}
	return out
}

// The demo's environment as simulated: every sample passes the same
// validation as a pushed one; each band holds most of the time; the
// occasional excursion crosses the action band and comes back.
func TestSimulatorEnvironmentPlausible(t *testing.T) {
	const days = 3
	raws := backfillEnv(t, 7, days)
	reg := demoEnvRegistry(t)
	// One sample a minute per sensor (the default interval).
	if want := days * 24 * 60 * len(reg.EnvironmentSensors()); len(raws) != want {
		t.Fatalf("%d samples, want %d", len(raws), want)
	}
	sink := newMemEnvSink()
	in := NewEnvironmentIngest(reg, sink, IngestOptions{Now: func() time.Time { return time.Date(2026, 2, 10, 0, 0, 0, 0, time.UTC) }})
	if res, err := in.SubmitEnvironment(context.Background(), raws); err != nil || res.Accepted != len(raws) {
		t.Fatalf("simulated samples refused: %v (%+v)", err, res)
	}
	type key struct{ sensor, ch string }
	vals := map[key][]float64{}
	levels := map[key]map[string]int{}
	for _, e := range sink.rows {
		ei, _ := reg.EnvironmentSensor(e.Sensor)
		for _, ch := range ei.Channels() {
			v, ok := e.Value(ch)
			if !ok {
				t.Fatalf("%s sample without %s", e.Sensor, ch)
			}
			k := key{e.Sensor, ch}
			vals[k] = append(vals[k], v)
			if levels[k] == nil {
				levels[k] = map[string]int{}
			}
			levels[k][ei.Judge(ch, v)]++
		}
	}
	// Medians at the centre of the demo's bands (Veldmark Photonics,
	// building C: th-asm 21 °C and 45 %, th-met 20 °C, av-hood the middle
	// of 0.36–0.54 m/s), within a tenth of the band.
	for k, want := range map[key]float64{
		{"th-asm", ChanTemperature}: 21, {"th-asm", ChanHumidity}: 45,
		{"th-met", ChanTemperature}: 20, {"av-hood", ChanVelocity}: 0.45,
	} {
		v := vals[k]
		sort.Float64s(v)
		ei, _ := reg.EnvironmentSensor(k.sensor)
		act := ei.Limits(k.ch).Action
		tol := (*act.High - *act.Low) / 10
		if med := v[len(v)/2]; abs(med-want) > tol {
			t.Errorf("%v: median %g, want %g ± %g", k, med, want, tol)
		}
		n := len(v)
		if in := levels[k][""]; float64(in) < 0.9*float64(n) {
			t.Errorf("%v: inside every band only %d of %d samples", k, in, n)
		}
		if levels[k]["action"] == 0 {
			t.Errorf("%v: no excursion beyond the action band in %d days", k, days)
		}
		if v[0] < 0 && k.ch != ChanTemperature {
			t.Errorf("%v: negative value %g", k, v[0])
		}
	}
	// th-met has no humidity band: simulated around the default 45 %.
	if v := vals[key{"th-met", ChanHumidity}]; len(v) == 0 {
		t.Error("th-met humidity not simulated")
	}
}

func TestSimulatorEnvironmentDeterministic(t *testing.T) {
	a, b, c := backfillEnv(t, 3, 1), backfillEnv(t, 3, 1), backfillEnv(t, 4, 1)
	if !reflect.DeepEqual(a, b) {
		t.Error("same seed, different samples")
	}
	if reflect.DeepEqual(a, c) {
		t.Error("different seeds, same samples")
	}
}

func TestSimulatorRunNeedsEnvironmentSubmitter(t *testing.T) {
	s, err := NewSimulator(demoEnvRegistry(t), demoLimits(), SimOptions{})
	if err != nil {
		t.Fatal(err)
	}
	err = s.Run(context.Background(), 1, newTestIngest(t, newMemSink(), IngestOptions{}))
	if err == nil || !strings.Contains(err.Error(), "SimOptions.Environment") {
		t.Fatalf("error %v, want one asking for an environment submitter", err)
	}
}

// Run hands the environment samples to its environment submitter, which
// stores what validation accepts.
func TestSimulatorRunEnvironment(t *testing.T) {
	reg := demoEnvRegistry(t)
	now := func() time.Time { return simStart }
	esink := newMemEnvSink()
	env := NewEnvironmentIngest(reg, esink, IngestOptions{Now: now, MaxFuture: 24 * time.Hour})
	s, err := NewSimulator(reg, demoLimits(), SimOptions{Seed: 5, Now: now, Environment: env})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 300*time.Millisecond)
	defer cancel()
	if err := s.Run(ctx, 3600, NewIngest(reg, newMemSink(), IngestOptions{Now: now, MaxFuture: 24 * time.Hour})); err != nil {
		t.Fatalf("Run: %v", err)
	}
	// Every simulated minute up to the cursor, for each of three sensors.
	want := 3 * int(s.Cursor().Sub(simStart)/time.Minute)
	if got := esink.len(); got < want-3 || got == 0 {
		t.Errorf("%d environment samples stored, want about %d", got, want)
	}
}
