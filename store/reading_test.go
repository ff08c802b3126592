package store

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"
)

func TestReadingRoundTrip(t *testing.T) {
	s := quick(t)
	cases := []struct {
		name string
		r    Reading
	}{
		{"cumulative with flow", reading("pc-asm-1", t0, 120)},
		{"differential, nanosecond time, no flow", Reading{
			Counter: "pc-asm-1", Time: time.Date(2026, 3, 2, 10, 0, 1, 123456789, time.UTC), VolumeL: 28.3,
			Status: "warning", Differential: true, Sizes: isoSizes, Counts: []uint64{900, 300, 20, 1},
		}},
		{"sizes off the nanometre grid", Reading{
			Counter: "pc-met", Time: t0, VolumeL: 2.83, Status: "fault",
			Sizes: []float64{0.1 / 3, 0.5, 2.5}, Counts: []uint64{1, 0, math.MaxUint64},
		}},
		{"no status, large counts, local zone time", Reading{
			Counter: "pc-hood", Time: t0.In(time.FixedZone("CET", 3600)), VolumeL: 1000, FlowLPM: 100, SampleSeconds: 600,
			Sizes: []float64{0.1, 0.2, 0.3, 0.5, 1, 5}, Counts: []uint64{1 << 40, 1 << 30, 1 << 20, 1 << 10, 3, 0},
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if acc, dup := appendOK(t, s, []Reading{c.r}); acc != 1 || dup != 0 {
				t.Fatalf("accepted %d, duplicates %d, want 1, 0", acc, dup)
			}
			got := scanAll(t, s, c.r.Counter, c.r.Time, c.r.Time.Add(1))
			if len(got) != 1 || !sameReading(got[0], c.r) {
				t.Fatalf("stored %+v\n got %+v", c.r, got)
			}
			if got[0].Time.Location() != time.UTC {
				t.Errorf("Time location %v, want UTC", got[0].Time.Location())
			}
		})
	}
}

func TestReadingDerived(t *testing.T) {
	cases := []struct {
		name  string
		r     Reading
		cum   []uint64
		perM3 []float64
	}{
		// Arithmetic: 1 m³ = 1000 L; differential counts summed from the
		// largest channel down (the samples CSV).
		{"cumulative in 1 m³", Reading{VolumeL: 1000, Sizes: []float64{0.5, 5}, Counts: []uint64{3520, 29}},
			[]uint64{3520, 29}, []float64{3520, 29}},
		{"differential in 28.3 L", Reading{VolumeL: 28.3, Differential: true, Sizes: []float64{0.3, 0.5, 5}, Counts: []uint64{700, 290, 10}},
			[]uint64{1000, 300, 10}, []float64{1000 * 1000 / 28.3, 300 * 1000 / 28.3, 10 * 1000 / 28.3}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cum := c.r.Cumulative()
			per := c.r.PerM3()
			for i := range c.cum {
				if cum[i] != c.cum[i] || !near(per[i], c.perM3[i]) {
					t.Fatalf("channel %d: cumulative %d per m³ %v, want %d %v", i, cum[i], per[i], c.cum[i], c.perM3[i])
				}
			}
			cum[0] = 0 // must be a copy
			if c.r.Counts[0] == 0 {
				t.Fatal("Cumulative returned the Counts slice itself")
			}
		})
	}
}

func TestScanRange(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-asm-2", t0, 10)) // t0 … t0+9m
	m := func(i int) time.Time { return t0.Add(time.Duration(i) * time.Minute) }
	cases := []struct {
		name     string
		from, to time.Time
		first, n int
	}{
		{"unbounded", time.Time{}, time.Time{}, 0, 10},
		{"from inclusive", m(3), time.Time{}, 3, 7},
		{"to exclusive", time.Time{}, m(3), 0, 3},
		{"one nanosecond after a reading", m(3).Add(1), m(5), 4, 1},
		{"empty interval", m(4), m(4), 0, 0},
		{"before everything", time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC), t0, 0, 0},
		{"after everything", m(10), time.Date(2300, 1, 1, 0, 0, 0, 0, time.UTC), 0, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := scanAll(t, s, "pc-asm-2", c.from, c.to)
			if len(got) != c.n {
				t.Fatalf("%d readings, want %d", len(got), c.n)
			}
			for i, r := range got {
				if !r.Time.Equal(m(c.first + i)) {
					t.Fatalf("reading %d at %s, want %s", i, r.Time, m(c.first+i))
				}
			}
		})
	}
	if got := scanAll(t, s, "pc-unknown", time.Time{}, time.Time{}); len(got) != 0 {
		t.Fatalf("unknown counter gave %d readings", len(got))
	}
	err := s.ScanReadings("pc-asm-2", m(5), m(1), func(Reading) error { return nil })
	wantErr(t, err, ErrInvalid)
	err = s.ScanReadings("", time.Time{}, time.Time{}, func(Reading) error { return nil })
	wantErr(t, err, ErrInvalid)
}

func TestScanStopsOnError(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-gown", t0, 10))
	stop := errors.New("enough")
	n := 0
	err := s.ScanReadings("pc-gown", time.Time{}, time.Time{}, func(Reading) error {
		n++
		if n == 3 {
			return stop
		}
		return nil
	})
	if !errors.Is(err, stop) || n != 3 {
		t.Fatalf("err %v after %d calls, want %v after 3", err, n, stop)
	}
}

func TestScanCallbackPanicPropagates(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-gown", t0, 2))
	defer func() {
		if r := recover(); r != "callback bug" {
			t.Fatalf("recovered %v, want the callback's own panic", r)
		}
		// The read transaction was released: writes still work.
		appendOK(t, s, series("pc-gown", t0.Add(time.Hour), 1))
	}()
	_ = s.ScanReadings("pc-gown", time.Time{}, time.Time{}, func(Reading) error { panic("callback bug") })
}

func TestLatestReading(t *testing.T) {
	s := quick(t)
	if _, ok, err := s.LatestReading("pc-met"); ok || err != nil {
		t.Fatalf("empty store: ok %v err %v", ok, err)
	}
	rs := series("pc-met", t0, 5)
	// Appended newest first: Latest follows time, not arrival.
	for i := len(rs) - 1; i >= 0; i-- {
		appendOK(t, s, rs[i:i+1])
	}
	got, ok, err := s.LatestReading("pc-met")
	if err != nil || !ok || !sameReading(got, rs[4]) {
		t.Fatalf("latest %+v ok %v err %v, want %+v", got, ok, err, rs[4])
	}
}

func TestDuplicates(t *testing.T) {
	s := quick(t)
	first := series("pc-asm-3", t0, 3)
	if acc, dup := appendOK(t, s, first); acc != 3 || dup != 0 {
		t.Fatalf("first call: %d, %d", acc, dup)
	}
	changed := first[1]
	changed.Counts = []uint64{1, 1, 1, 1}
	cases := []struct {
		name     string
		rs       []Reading
		acc, dup int
	}{
		{"all repeated", first, 0, 3},
		{"repeated inside one call", []Reading{reading("pc-asm-3", t0.Add(time.Hour), 5), reading("pc-asm-3", t0.Add(time.Hour), 5)}, 1, 1},
		{"same time, other content: the stored one stays", []Reading{changed}, 0, 1},
		{"same time on another counter is not a duplicate", []Reading{reading("pc-asm-1", t0, 5)}, 1, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if acc, dup := appendOK(t, s, c.rs); acc != c.acc || dup != c.dup {
				t.Fatalf("accepted %d duplicates %d, want %d %d", acc, dup, c.acc, c.dup)
			}
		})
	}
	got := scanAll(t, s, "pc-asm-3", time.Time{}, time.Time{})
	if len(got) != 4 || !sameReading(got[1], first[1]) {
		t.Fatalf("stored %d readings (want 4), second %+v", len(got), got[1])
	}
	if r := rollupsAll(t, s, "pc-asm-3", time.Hour); len(r) != 2 || r[0].Samples != 3 || r[1].Samples != 1 {
		t.Fatalf("hour rollups %+v: duplicates were counted", r)
	}
}

func TestAllOrNothing(t *testing.T) {
	good := reading("pc-asm-1", t0, 100)
	cases := []struct {
		name   string
		mutate func(r *Reading)
		field  string
	}{
		{"counts not aligned", func(r *Reading) { r.Counts = r.Counts[:3] }, "Counts"},
		{"empty counter", func(r *Reading) { r.Counter = "" }, "Counter"},
		{"zero time", func(r *Reading) { r.Time = time.Time{} }, "Time"},
		{"before 1970", func(r *Reading) { r.Time = time.Date(1969, 12, 31, 0, 0, 0, 0, time.UTC) }, "Time"},
		{"zero volume", func(r *Reading) { r.VolumeL = 0 }, "VolumeL"},
		{"NaN volume", func(r *Reading) { r.VolumeL = math.NaN() }, "VolumeL"},
		{"negative flow", func(r *Reading) { r.FlowLPM = -1 }, "FlowLPM"},
		{"infinite sample time", func(r *Reading) { r.SampleSeconds = math.Inf(1) }, "SampleSeconds"},
		{"unknown status", func(r *Reading) { r.Status = "broken" }, "Status"},
		{"no channels", func(r *Reading) { r.Sizes, r.Counts = nil, nil }, "Sizes"},
		{"sizes not ascending", func(r *Reading) { r.Sizes = []float64{0.3, 1, 0.5, 5} }, "Sizes[2]"},
		{"repeated size", func(r *Reading) { r.Sizes = []float64{0.3, 0.5, 0.5, 5} }, "Sizes[2]"},
		{"negative size", func(r *Reading) { r.Sizes = []float64{-0.3, 0.5, 1, 5} }, "Sizes[0]"},
		{"differential overflow", func(r *Reading) {
			r.Differential = true
			r.Counts = []uint64{math.MaxUint64, 1, 0, 0}
		}, "Counts[1]"},
		{"counter name too long", func(r *Reading) { r.Counter = strings.Repeat("x", 200) }, "Counter"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := quick(t)
			bad := good
			bad.Sizes = append([]float64(nil), good.Sizes...)
			bad.Counts = append([]uint64(nil), good.Counts...)
			c.mutate(&bad)
			batch := []Reading{good, reading("pc-asm-2", t0, 1), bad}
			acc, dup, err := s.AppendReadings(context.Background(), batch)
			var re *RecordError
			if !errors.As(err, &re) || !errors.Is(err, ErrInvalid) {
				t.Fatalf("err %v, want a *RecordError", err)
			}
			if re.Index != 2 || re.Field != c.field || acc != 0 || dup != 0 {
				t.Fatalf("index %d field %q (acc %d dup %d), want index 2 field %q: %v", re.Index, re.Field, acc, dup, err, c.field)
			}
			for _, counter := range []string{"pc-asm-1", "pc-asm-2"} {
				if n := len(scanAll(t, s, counter, time.Time{}, time.Time{})); n != 0 {
					t.Fatalf("%s: %d readings stored after a rejected call", counter, n)
				}
				if n := len(rollupsAll(t, s, counter, time.Minute)); n != 0 {
					t.Fatalf("%s: %d rollups stored after a rejected call", counter, n)
				}
			}
		})
	}
}

func TestAppendCanceledContext(t *testing.T) {
	s := quick(t)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, _, err := s.AppendReadings(ctx, series("pc-hood", t0, 3))
	wantErr(t, err, context.Canceled)
	if n := len(scanAll(t, s, "pc-hood", time.Time{}, time.Time{})); n != 0 {
		t.Fatalf("%d readings stored by a canceled call", n)
	}
}
