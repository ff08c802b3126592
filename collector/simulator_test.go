package collector

import (
	"context"
	"errors"
	"math"
	"reflect"
	"sort"
	"sync"
	"testing"
	"time"
)

var simStart = time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)

func newDemoSim(t testing.TB, opt SimOptions) *Simulator {
	t.Helper()
	s, err := NewSimulator(demoRegistry(t), demoLimits(), opt)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func collect(s *Simulator, from, to time.Time, window time.Duration) []Batch {
	var out []Batch
	for b := range s.Backfill(from, to, window) {
		out = append(out, b)
	}
	return out
}

func flatten(bs []Batch) ([]RawReading, []RawPressure) {
	var rs []RawReading
	var ps []RawPressure
	for _, b := range bs {
		rs = append(rs, b.Readings...)
		ps = append(ps, b.Pressure...)
	}
	return rs, ps
}

func TestSimulatorDeterministic(t *testing.T) {
	end := simStart.Add(6 * time.Hour)
	a := collect(newDemoSim(t, SimOptions{Seed: 7}), simStart, end, time.Hour)
	b := collect(newDemoSim(t, SimOptions{Seed: 7}), simStart, end, 7*time.Minute)
	ar, ap := flatten(a)
	br, bp := flatten(b)
	if len(ar) == 0 || len(ap) == 0 {
		t.Fatal("nothing simulated")
	}
	if !reflect.DeepEqual(ar, br) || !reflect.DeepEqual(ap, bp) {
		t.Fatal("same seed, different windows: different data")
	}
	cr, _ := flatten(collect(newDemoSim(t, SimOptions{Seed: 8}), simStart, end, time.Hour))
	if reflect.DeepEqual(ar, cr) {
		t.Fatal("another seed gives the same data")
	}
	// Continuing after a pause gives the same sequence as one long run.
	s := newDemoSim(t, SimOptions{Seed: 7})
	first := collect(s, simStart, simStart.Add(2*time.Hour), time.Hour)
	if !s.Cursor().Equal(simStart.Add(2 * time.Hour)) {
		t.Fatalf("cursor %v", s.Cursor())
	}
	rest := collect(s, simStart, end, time.Hour) // from before the cursor: continues at it
	dr, _ := flatten(append(first, rest...))
	if !reflect.DeepEqual(ar, dr) {
		t.Fatal("backfill in two parts differs from one")
	}
}

func TestSimulatorOrderAndValidity(t *testing.T) {
	end := simStart.Add(24 * time.Hour)
	batches := collect(newDemoSim(t, SimOptions{Seed: 1}), simStart, end, time.Hour)
	if len(batches) != 24 {
		t.Fatalf("%d batches for 24 h in 1 h windows", len(batches))
	}
	sink := newMemSink()
	in := NewIngest(demoRegistry(t), sink, IngestOptions{Now: func() time.Time { return end }})
	prevTo := simStart
	var last time.Time
	for i, b := range batches {
		if !b.From.Equal(prevTo) || !b.To.After(b.From) {
			t.Fatalf("batch %d covers %v–%v after %v", i, b.From, b.To, prevTo)
		}
		prevTo = b.To
		for _, r := range b.Readings {
			tm, err := time.Parse(time.RFC3339Nano, r.Time)
			if err != nil || tm.Before(b.From) || !tm.Before(b.To) || tm.Before(last) {
				t.Fatalf("batch %d: reading at %s outside [%v, %v) or out of order", i, r.Time, b.From, b.To)
			}
			last = tm
		}
		res, err := in.SubmitReadings(context.Background(), b.Readings)
		if err != nil || res.Duplicates != 0 || res.Accepted != len(b.Readings) {
			t.Fatalf("batch %d: %+v %v", i, res, err)
		}
		if _, err := in.SubmitPressure(context.Background(), b.Pressure); err != nil {
			t.Fatalf("batch %d pressure: %v", i, err)
		}
	}
	// 6 counters sampling each minute for 24 h, less the odd dropout.
	nr, np := sink.stored()
	if nr > 6*1440 || nr < 6*1440*97/100 {
		t.Errorf("%d readings in 24 h, want just under %d", nr, 6*1440)
	}
	// 4 sensors every 10 s (default interval), never silent.
	if np != 4*8640 {
		t.Errorf("%d DP samples, want %d", np, 4*8640)
	}
}

// simulated is ten days of the demo site, validated: readings per counter
// and DP samples per sensor, each in time order.
type simulated struct {
	readings map[string][]Reading
	pressure map[string][]Pressure
	samples  int // counter sample slots, heard or not
}

var (
	tenDaysOnce sync.Once
	tenDays     simulated
)

func simulateTenDays(t *testing.T) simulated {
	t.Helper()
	tenDaysOnce.Do(func() {
		const days = 10
		end := simStart.Add(days * 24 * time.Hour)
		s := newDemoSim(t, SimOptions{Seed: 42})
		in := NewIngest(demoRegistry(t), newMemSink(), IngestOptions{Now: func() time.Time { return end }})
		v := in.validator()
		sim := simulated{readings: map[string][]Reading{}, pressure: map[string][]Pressure{}, samples: 6 * days * 1440}
		for b := range s.Backfill(simStart, end, 6*time.Hour) {
			for i := range b.Readings {
				var r Reading
				if ie := v.reading(i, &b.Readings[i], &r); ie != nil {
					t.Fatalf("simulated reading refused: %v", ie)
				}
				sim.readings[r.Counter] = append(sim.readings[r.Counter], r)
			}
			for i := range b.Pressure {
				var p Pressure
				if ie := v.pressure(i, &b.Pressure[i], &p); ie != nil {
					t.Fatalf("simulated DP refused: %v", ie)
				}
				sim.pressure[p.Sensor] = append(sim.pressure[p.Sensor], p)
			}
		}
		tenDays = sim
	})
	if tenDays.readings == nil {
		t.Fatal("simulation failed")
	}
	return tenDays
}

// refChannel is the index of the smallest channel with a limit, and the
// limit (demoLimits, ISO 14644-1:2015 Table 1).
func refChannel(t *testing.T, ci *CounterInfo) (int, float64) {
	t.Helper()
	lim := demoLimits()[ci.ID]
	for i, s := range ci.SizesUM {
		if l, ok := lim[s]; ok {
			return i, l
		}
	}
	t.Fatalf("%s: no limit at its channels", ci.ID)
	return 0, 0
}

func median(v []float64) float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	return s[len(s)/2]
}

func TestSimulatorPlausible(t *testing.T) {
	sim := simulateTenDays(t)
	reg := demoRegistry(t)
	for _, ci := range reg.Counters() {
		rs := sim.readings[ci.ID]
		ref, limit := refChannel(t, ci)
		var shares []float64
		counts := make([]uint64, len(ci.SizesUM)) // cumulative, summed over ten days
		for _, r := range rs {
			shares = append(shares, r.PerM3[ref]/limit)
			for i, c := range r.Cumulative() {
				counts[i] += c
			}
			// ISO 21501-4 keeps the flow within ±5 % of nominal.
			if math.Abs(r.FlowLPM-ci.FlowLPM) > 0.05*ci.FlowLPM {
				t.Fatalf("%s: flow %g L/min, nominal %g", ci.ID, r.FlowLPM, ci.FlowLPM)
			}
			if want := r.FlowLPM * r.SampleSeconds / 60; math.Abs(r.VolumeL-want) > 1e-3 {
				t.Fatalf("%s: volume %g L, flow × time gives %g", ci.ID, r.VolumeL, want)
			}
		}
		// The background median is 5–20 % of the limit (the simulator's
		// stated model); allow for the sampling spread of ten days.
		if m := median(shares); m < 0.05*0.85 || m > 0.20*1.15 {
			t.Errorf("%s: median at %g µm is %.3f of the limit, want 0.05–0.20", ci.ID, ci.SizesUM[ref], m)
		}
		// The size distribution falls roughly as the class formula,
		// (D1/D2)^2.08 (ISO 14644-1), ±0.15 on the exponent.
		// Ratios of summed counts, so that channels with a fraction of a
		// particle per sample still count.
		for i := 1; i < len(ci.SizesUM); i++ {
			if counts[i] < 400 {
				t.Errorf("%s: only %d particles ≥%g µm in ten days", ci.ID, counts[i], ci.SizesUM[i])
				continue
			}
			ratio := float64(counts[i]) / float64(counts[i-1])
			want := math.Pow(ci.SizesUM[i-1]/ci.SizesUM[i], simSizeSlope)
			lo := math.Pow(ci.SizesUM[i-1]/ci.SizesUM[i], simSizeSlope+0.2)
			hi := math.Pow(ci.SizesUM[i-1]/ci.SizesUM[i], simSizeSlope-0.2)
			if ratio < lo || ratio > hi {
				t.Errorf("%s: ≥%g/≥%g µm ratio %.4f, want about %.4f", ci.ID, ci.SizesUM[i], ci.SizesUM[i-1], ratio, want)
			}
		}
	}
	for _, si := range reg.Sensors() {
		nominal := si.MinPa + simDPOffset
		for _, p := range sim.pressure[si.ID] {
			switch {
			case p.Pa >= si.MinPa && math.Abs(p.Pa-nominal) > 2:
				t.Fatalf("%s: %g Pa, nominal %g", si.ID, p.Pa, nominal)
			case p.Pa < si.MinPa && (p.Pa < 0.19*si.MinPa || p.Pa > 0.81*si.MinPa):
				t.Fatalf("%s: dip to %g Pa, want 20–80 %% of the %g Pa minimum", si.ID, p.Pa, si.MinPa)
			}
		}
	}
}

// within5Sigma checks a count against a Poisson/binomial expectation.
func within5Sigma(t *testing.T, what string, got int, want float64) {
	t.Helper()
	if d := math.Abs(float64(got) - want); d > 5*math.Sqrt(want) {
		t.Errorf("%s: %d, expected %.0f ± %.0f", what, got, want, 5*math.Sqrt(want))
	} else {
		t.Logf("%s: %d, expected %.0f", what, got, want)
	}
}

func TestSimulatorRates(t *testing.T) {
	sim := simulateTenDays(t)
	reg := demoRegistry(t)
	excursions, dropouts := 0, 0
	for _, ci := range reg.Counters() {
		rs := sim.readings[ci.ID]
		ref, limit := refChannel(t, ci)
		step := time.Duration(ci.Interval)
		above := false
		for i, r := range rs {
			if i > 0 {
				if gap := int(r.Time.Sub(rs[i-1].Time)/step) - 1; gap > 0 {
					dropouts++
					// A dropout silences 3–8 samples; two in a row are
					// rarer than the rate test's tolerance.
					if gap < simDropMin || gap > 2*simDropMax {
						t.Errorf("%s: %d samples missing before %v", ci.ID, gap, r.Time)
					}
				}
			}
			share := r.PerM3[ref] / limit
			if share > 1 && !above {
				excursions++
				// An excursion lifts the smallest limited size to 1.5–6×
				// its limit (Poisson spread aside).
				if share < 1.3 || share > 6.6 {
					t.Errorf("%s: excursion at %v reaches %.2f× the limit", ci.ID, r.Time, share)
				}
			}
			above = share > 1
		}
	}
	within5Sigma(t, "excursions", excursions, float64(sim.samples)*DefaultExcursionRate)
	within5Sigma(t, "dropouts", dropouts, float64(sim.samples)*DefaultDropoutRate)

	for _, si := range reg.Sensors() {
		ps := sim.pressure[si.ID]
		dips := 0
		var dipStart, prevStart time.Time
		for i, p := range ps {
			below := p.Pa < si.MinPa
			if below && (i == 0 || ps[i-1].Pa >= si.MinPa) {
				dips++
				if !prevStart.IsZero() {
					// Openings 2–6 min apart, start to start (one sample
					// of rounding either way).
					if g := p.Time.Sub(prevStart); g < DefaultDoorGapMin-time.Duration(si.Interval) || g > DefaultDoorGapMax+time.Duration(si.Interval) {
						t.Errorf("%s: door openings %s apart", si.ID, g)
					}
				}
				dipStart, prevStart = p.Time, p.Time
			}
			// Every dip recovers within the sensor's delay: no alarm due.
			if below && p.Time.Sub(dipStart) >= time.Duration(si.Delay) {
				t.Errorf("%s: still below %g Pa %s after the dip began", si.ID, si.MinPa, p.Time.Sub(dipStart))
			}
		}
		// One opening every 4 min on average (uniform 2–6 min).
		span := ps[len(ps)-1].Time.Sub(ps[0].Time)
		want := float64(span) / float64((DefaultDoorGapMin+DefaultDoorGapMax)/2)
		if math.Abs(float64(dips)-want) > 0.05*want {
			t.Errorf("%s: %d door dips in %s, want about %.0f", si.ID, dips, span, want)
		}
	}
}

// recorder is a Submitter that validates through a real Ingest and keeps
// what it was given. It commits without Run's context, so that the batch
// in flight when the test's deadline ends Run is stored like the rest.
type recorder struct {
	in       *Ingest
	readings []RawReading
	pressure []RawPressure
	calls    int
}

func (r *recorder) SubmitReadings(ctx context.Context, raws []RawReading) (Result, error) {
	r.calls++
	r.readings = append(r.readings, raws...)
	return r.in.SubmitReadings(context.WithoutCancel(ctx), raws)
}

func (r *recorder) SubmitPressure(ctx context.Context, raws []RawPressure) (Result, error) {
	r.calls++
	r.pressure = append(r.pressure, raws...)
	return r.in.SubmitPressure(context.WithoutCancel(ctx), raws)
}

func TestSimulatorRun(t *testing.T) {
	opt := SimOptions{Seed: 3, Now: func() time.Time { return simStart }}
	s := newDemoSim(t, opt)
	sink := newMemSink()
	// Simulated time runs 3600× ahead of the clock here, so the ingest's
	// future allowance is widened.
	rec := &recorder{in: NewIngest(demoRegistry(t), sink, IngestOptions{Now: func() time.Time { return simStart }, MaxFuture: 24 * time.Hour})}
	ctx, cancel := context.WithTimeout(context.Background(), 400*time.Millisecond)
	defer cancel()
	if err := s.Run(ctx, 3600, rec); err != nil {
		t.Fatalf("Run: %v", err)
	}
	if rec.calls < 2 || len(rec.readings) == 0 {
		t.Fatalf("%d submissions, %d readings", rec.calls, len(rec.readings))
	}
	if nr, np := sink.stored(); nr != len(rec.readings) || np != len(rec.pressure) {
		t.Errorf("stored %d/%d of %d/%d", nr, np, len(rec.readings), len(rec.pressure))
	}
	// What Run emitted is exactly the backfill of the same span.
	br, bp := flatten(collect(newDemoSim(t, opt), simStart, s.Cursor(), time.Hour))
	if !reflect.DeepEqual(rec.readings, br) || !reflect.DeepEqual(rec.pressure, bp) {
		t.Errorf("Run emitted %d readings, %d DP samples; backfill of the span gives %d, %d", len(rec.readings), len(rec.pressure), len(br), len(bp))
	}
	if err := s.Run(ctx, 0, rec); !errors.Is(err, ErrSimulator) {
		t.Errorf("speed 0: %v", err)
	}
}

func TestSimulatorRunStopsOnSubmitFailure(t *testing.T) {
	s := newDemoSim(t, SimOptions{Now: func() time.Time { return simStart }})
	sink := newMemSink()
	sink.fail = errDiskFull
	in := NewIngest(demoRegistry(t), sink, IngestOptions{Now: func() time.Time { return simStart }, MaxFuture: 24 * time.Hour})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	err := s.Run(ctx, 3600, in)
	if !errors.Is(err, ErrSimulator) || !errors.Is(err, errDiskFull) {
		t.Fatalf("Run: %v, want the sink's failure", err)
	}
	if ctx.Err() != nil {
		t.Fatal("Run did not stop before the deadline")
	}
}

func TestNewSimulatorRefuses(t *testing.T) {
	reg := demoRegistry(t)
	noHood := demoLimits()
	delete(noHood, "pc-hood")
	badLimit := demoLimits()
	badLimit["pc-met"] = map[float64]float64{0.5: -1}
	cases := []struct {
		name   string
		limits map[string]map[float64]float64
		opt    SimOptions
	}{
		{"counter without limits", noHood, SimOptions{}},
		{"negative limit", badLimit, SimOptions{}},
		{"door gaps reversed", demoLimits(), SimOptions{DoorGapMin: 5 * time.Minute, DoorGapMax: time.Minute}},
		{"rate above 1", demoLimits(), SimOptions{ExcursionRate: 2}},
	}
	for _, c := range cases {
		if _, err := NewSimulator(reg, c.limits, c.opt); !errors.Is(err, ErrSimulator) {
			t.Errorf("%s: %v", c.name, err)
		}
	}
}
