package alerts

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// fakeClock is the injectable clock of the tests.
type fakeClock struct{ t time.Time }

func (c *fakeClock) Now() time.Time          { return c.t }
func (c *fakeClock) Advance(d time.Duration) { c.t = c.t.Add(d) }

var t0 = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)

func fp(v float64) *float64 { return &v }

// assemblyZone is an ISO 7 zone judged at 0.5 and 5 µm. Its limits, ISO
// 14644-1:2015 Table 1: 352 000 /m³ at ≥0.5 µm and 2 930 /m³ at ≥5 µm.
func assemblyZone() ZoneConfig {
	return ZoneConfig{
		ID: "assembly", Name: "Assembly hall", Class: fp(7), OperatingState: InOperation, AreaM2: 60,
		Sizes: []string{"0.5", "5"}, Window: model.Duration(10 * time.Minute), StaleAfter: model.Duration(3 * time.Minute),
		Levels:    map[string]Levels{"0.5": {Alert: fp(100000), Action: fp(250000)}},
		Locations: []LocationConfig{{ID: "asm-1"}, {ID: "asm-2"}},
	}
}

var asmBindings = []Binding{{"pc-asm-1", "assembly", "asm-1"}, {"pc-asm-2", "assembly", "asm-2"}}

func obs(counter string, at time.Time, p05, p5 float64) Observation {
	return Observation{Counter: counter, Time: at, VolumeL: 28.3, Status: "ok", Sizes: []float64{0.3, 0.5, 5}, PerM3: []float64{p05 * 3, p05, p5}}
}

func newTracker(t *testing.T, clk *fakeClock, zones []ZoneConfig, b []Binding) *ZoneTracker {
	t.Helper()
	tr, err := NewZoneTracker(zones, b, ZoneTrackerOptions{Now: clk.Now})
	if err != nil {
		t.Fatal(err)
	}
	return tr
}

func TestZoneStateTransitions(t *testing.T) {
	at := func(d time.Duration) time.Time { return t0.Add(d) }
	cases := []struct {
		name  string
		feed  []Observation
		now   time.Duration // clock offset from t0 when judged
		want  ZoneStatus
		note  string // a note that must be present
		means map[string]float64
	}{
		{name: "no data", now: 0, want: StatusUnknown, note: "no reading yet"},
		{name: "both fresh and low", now: time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 20000, 100), obs("pc-asm-2", at(0), 30000, 200)},
			want: StatusInClass},
		{name: "above alert level", now: time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 150000, 100), obs("pc-asm-2", at(0), 30000, 200)},
			want: StatusAlert},
		{name: "above action level", now: time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 20000, 100), obs("pc-asm-2", at(0), 300000, 200)},
			want: StatusAction},
		{name: "above class limit at 0.5 µm", now: time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 400000, 100), obs("pc-asm-2", at(0), 30000, 200)},
			want: StatusOutOfClass},
		{name: "above class limit at 5 µm, no levels there", now: time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 20000, 3000), obs("pc-asm-2", at(0), 30000, 200)},
			want: StatusOutOfClass},
		{name: "equal to the limit is in class", now: time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 100000, 2930), obs("pc-asm-2", at(0), 30000, 200)},
			want: StatusInClass},
		{name: "rolling mean of two readings", now: 2 * time.Minute,
			// mean of 100 000 and 500 000 = 300 000: above action (250 000), below limit
			feed: []Observation{obs("pc-asm-1", at(0), 100000, 0), obs("pc-asm-1", at(time.Minute), 500000, 0), obs("pc-asm-2", at(time.Minute), 1000, 0)},
			want: StatusAction, means: map[string]float64{"0.5": 300000, "5": 0}},
		{name: "reading out of the window is forgotten", now: 11 * time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 900000, 0), obs("pc-asm-1", at(10*time.Minute), 1000, 0), obs("pc-asm-2", at(10*time.Minute), 1000, 0)},
			want: StatusInClass, means: map[string]float64{"0.5": 1000, "5": 0}},
		{name: "one stale, fresh one in class: unknown", now: 4 * time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 1000, 0), obs("pc-asm-2", at(4*time.Minute), 1000, 0)},
			want: StatusUnknown, note: "location asm-1"},
		{name: "one stale, fresh one out of class: out-of-class", now: 4 * time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 1000, 0), obs("pc-asm-2", at(4*time.Minute), 500000, 0)},
			want: StatusOutOfClass},
		{name: "all stale", now: 4 * time.Minute,
			feed: []Observation{obs("pc-asm-1", at(0), 1000, 0), obs("pc-asm-2", at(0), 1000, 0)},
			want: StatusUnknown},
		{name: "fault readings are not trusted", now: time.Minute,
			feed: func() []Observation {
				a := obs("pc-asm-1", at(0), 1000, 0)
				a.Status = StatusFault
				return []Observation{a, obs("pc-asm-2", at(0), 1000, 0)}
			}(),
			want: StatusUnknown},
		{name: "duplicate reading counts once", now: 2 * time.Minute,
			// kept once: (100 000 + 500 000)/2 = 300 000 → action; kept
			// twice it would be 700 000/3 ≈ 233 333 → only alert.
			feed: []Observation{obs("pc-asm-1", at(0), 100000, 0), obs("pc-asm-1", at(0), 100000, 0), obs("pc-asm-1", at(time.Minute), 500000, 0), obs("pc-asm-2", at(time.Minute), 1000, 0)},
			want: StatusAction, means: map[string]float64{"0.5": 300000, "5": 0}},
		{name: "counter without a zone size is not judged", now: time.Minute,
			feed: []Observation{
				{Counter: "pc-asm-1", Time: at(0), VolumeL: 28.3, Status: "ok", Sizes: []float64{0.5}, PerM3: []float64{1000}},
				obs("pc-asm-2", at(0), 1000, 0)},
			want: StatusUnknown},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			clk := &fakeClock{t: t0.Add(c.now)}
			tr := newTracker(t, clk, []ZoneConfig{assemblyZone()}, asmBindings)
			tr.Observe(c.feed...)
			v, ok := tr.Zone("assembly")
			if !ok {
				t.Fatal("zone missing")
			}
			if v.State != c.want {
				t.Fatalf("state %s, want %s (notes %q)", v.State, c.want, v.Notes)
			}
			if c.note != "" && !strings.Contains(strings.Join(v.Notes, "|"), c.note) {
				t.Errorf("notes %q lack %q", v.Notes, c.note)
			}
			for size, want := range c.means {
				got := v.Locations[0].MeanPerM3[size]
				if math.Abs(got-want) > 1e-6 {
					t.Errorf("asm-1 mean at %s µm = %v, want %v", size, got, want)
				}
			}
		})
	}
}

func TestZoneStateOverTime(t *testing.T) {
	clk := &fakeClock{t: t0}
	tr := newTracker(t, clk, []ZoneConfig{assemblyZone()}, asmBindings)
	want := func(s ZoneStatus) {
		t.Helper()
		if v, _ := tr.Zone("assembly"); v.State != s {
			t.Fatalf("at %s: state %s, want %s (%q)", clk.t.Sub(t0), v.State, s, v.Notes)
		}
	}
	want(StatusUnknown)
	for i := 0; i < 10; i++ {
		tr.Observe(obs("pc-asm-1", clk.t, 10000, 10), obs("pc-asm-2", clk.t, 10000, 10))
		clk.Advance(time.Minute)
	}
	want(StatusInClass)
	// asm-2 falls silent: at 3 min past its last reading it is still fresh,
	// after that the zone can no longer be shown in class.
	for i := 0; i < 3; i++ {
		tr.Observe(obs("pc-asm-1", clk.t, 10000, 10))
		clk.Advance(time.Minute)
	}
	clk.Advance(-time.Minute)
	want(StatusInClass)
	clk.Advance(time.Minute + time.Second)
	want(StatusUnknown)
	tr.Observe(obs("pc-asm-2", clk.t, 10000, 10))
	want(StatusInClass)
	// An excursion at asm-1 pulls the rolling mean above the limit
	// (10 readings of 10 000 + one of 4 000 000 → mean ≈ 372 727 > 352 000).
	tr.Observe(obs("pc-asm-1", clk.t, 4_000_000, 10))
	want(StatusOutOfClass)
	// Ten minutes later the excursion has left the window.
	clk.Advance(10 * time.Minute)
	tr.Observe(obs("pc-asm-1", clk.t, 10000, 10), obs("pc-asm-2", clk.t, 10000, 10))
	want(StatusInClass)
}

// gradeB is a GMP grade B zone. Monitoring limits, EU GMP Annex 1 (2022)
// as recalled (from memory): at rest 3 520 /m³ (0.5 µm) and 29 /m³
// (5 µm); in operation 352 000 and 2 930.
func gradeB() ZoneConfig {
	return ZoneConfig{ID: "fill", Name: "Filling room", Grade: "B", OperatingState: AtRest, AreaM2: 20,
		Sizes: []string{"0.5", "5"}, Locations: []LocationConfig{{ID: "f-1"}}}
}

func TestOperatingStateChangesLimits(t *testing.T) {
	clk := &fakeClock{t: t0}
	tr := newTracker(t, clk, []ZoneConfig{gradeB()}, []Binding{{"pc-f", "fill", "f-1"}})
	tr.Observe(obs("pc-f", t0, 10000, 10))
	v, _ := tr.Zone("fill")
	if v.State != StatusOutOfClass || *v.Limits[0].Limit != 3520 {
		t.Fatalf("at rest: state %s limit %v, want out-of-class against 3520", v.State, *v.Limits[0].Limit)
	}
	var persisted []OperatingChange
	persist := func(ch OperatingChange) error { persisted = append(persisted, ch); return nil }
	clk.Advance(time.Second)
	v, err := tr.SetOperatingState(OperatingChange{Zone: "fill", State: InOperation, By: "j.marsh", Reason: "shift start"}, persist)
	if err != nil {
		t.Fatal(err)
	}
	// The in-operation window starts at the switch: the at-rest reading
	// is not judged against in-operation limits.
	if v.State != StatusUnknown || *v.Limits[0].Limit != 352000 || v.OperatingState != InOperation {
		t.Fatalf("in operation: %s %v %s", v.State, *v.Limits[0].Limit, v.OperatingState)
	}
	clk.t = clk.t.Add(time.Minute)
	tr.Observe(obs("pc-f", clk.t, 10000, 10))
	if v, _ = tr.Zone("fill"); v.State != StatusInClass {
		t.Fatalf("in operation after a reading: %s", v.State)
	}
	if len(persisted) != 1 || persisted[0].Time.IsZero() || persisted[0].By != "j.marsh" {
		t.Fatalf("persisted %+v", persisted)
	}
	// Maintenance judges nothing: the zone is unknown, the limits shown
	// are those of the state before.
	v, err = tr.SetOperatingState(OperatingChange{Zone: "fill", State: Maintenance, By: "j.marsh", Reason: "filter change"}, persist)
	if err != nil {
		t.Fatal(err)
	}
	if v.OperatingState != Maintenance || v.LimitsState != InOperation || v.State != StatusUnknown {
		t.Fatalf("maintenance: %s limits %s state %s", v.OperatingState, v.LimitsState, v.State)
	}
	if !strings.Contains(strings.Join(v.Notes, "|"), "maintenance") {
		t.Errorf("no maintenance note: %q", v.Notes)
	}
}

func TestSetOperatingStateRefusals(t *testing.T) {
	errPersist := errors.New("disk full")
	cases := []struct {
		name    string
		ch      OperatingChange
		persist func(OperatingChange) error
		want    error
	}{
		{"unknown zone", OperatingChange{Zone: "nope", State: AtRest, By: "x"}, nil, ErrUnknownZone},
		{"bad state", OperatingChange{Zone: "fill", State: "idle", By: "x"}, nil, ErrOperatingState},
		{"no author", OperatingChange{Zone: "fill", State: InOperation}, nil, ErrOperatingState},
		{"store refuses", OperatingChange{Zone: "fill", State: InOperation, By: "x"}, func(OperatingChange) error { return errPersist }, errPersist},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			clk := &fakeClock{t: t0}
			tr := newTracker(t, clk, []ZoneConfig{gradeB()}, nil)
			called := false
			persist := func(ch OperatingChange) error {
				called = true
				if c.persist != nil {
					return c.persist(ch)
				}
				return nil
			}
			_, err := tr.SetOperatingState(c.ch, persist)
			if !errors.Is(err, c.want) {
				t.Fatalf("err %v, want %v", err, c.want)
			}
			if c.persist == nil && called {
				t.Error("persisted a refused change")
			}
			if v, _ := tr.Zone("fill"); v.OperatingState != AtRest {
				t.Errorf("state changed to %s", v.OperatingState)
			}
		})
	}
}

func TestRestoreOperatingState(t *testing.T) {
	clk := &fakeClock{t: t0}
	tr := newTracker(t, clk, []ZoneConfig{gradeB()}, nil)
	since := t0.Add(-time.Hour)
	if err := tr.RestoreOperatingState(OperatingChange{Zone: "fill", State: Maintenance, By: "k", Reason: "r", Time: since}); err != nil {
		t.Fatal(err)
	}
	v, _ := tr.Zone("fill")
	if v.OperatingState != Maintenance || !v.StateSince.Equal(since) || v.StateBy != "k" || v.LimitsState != AtRest {
		t.Fatalf("restored %+v", v)
	}
	if err := tr.RestoreOperatingState(OperatingChange{Zone: "gone", State: AtRest}); !errors.Is(err, ErrUnknownZone) {
		t.Fatalf("unknown zone: %v", err)
	}
}

func TestUnclassifiedAndGradeDInOperation(t *testing.T) {
	clk := &fakeClock{t: t0}
	corridor := ZoneConfig{ID: "corridor", Name: "Corridor", Sizes: []string{"0.5"}, Locations: []LocationConfig{{ID: "c-1"}},
		Levels: map[string]Levels{"0.5": {Action: fp(1e6)}}}
	// Grade D in operation: "not predetermined" (EU GMP Annex 1 (2022),
	// from memory), so only levels are judged.
	gradeD := ZoneConfig{ID: "pack", Grade: "D", OperatingState: InOperation, AreaM2: 30, Sizes: []string{"0.5", "5"}, Locations: []LocationConfig{{ID: "p-1"}}}
	tr := newTracker(t, clk, []ZoneConfig{corridor, gradeD, {ID: "empty"}}, []Binding{{"pc-c", "corridor", "c-1"}, {"pc-p", "pack", "p-1"}})
	tr.Observe(obs("pc-c", t0, 5000, 1), obs("pc-p", t0, 5000, 1))
	zs := tr.Zones()
	if len(zs) != 3 || zs[0].ID != "corridor" || zs[1].ID != "pack" || zs[2].ID != "empty" {
		t.Fatalf("zones %v", zs)
	}
	for _, z := range zs {
		if z.State != StatusUnknown {
			t.Errorf("%s: state %s, want unknown", z.ID, z.State)
		}
	}
	if zs[0].Class != nil || zs[0].Grade != "" {
		t.Errorf("corridor classified: %+v", zs[0])
	}
	if zs[1].Limits[0].Limit != nil || !strings.Contains(zs[1].Limits[0].Note, "not predetermined") {
		t.Errorf("grade D in operation limit %+v", zs[1].Limits[0])
	}
	tr.Observe(obs("pc-c", t0, 2e6, 1))
	if z, _ := tr.Zone("corridor"); z.State != StatusAction {
		t.Errorf("corridor above its action level: %s", z.State)
	}
}

func TestNewZoneTrackerRefusesBadBindings(t *testing.T) {
	for _, b := range []Binding{{"pc", "nowhere", "asm-1"}, {"pc", "assembly", "nowhere"}} {
		if _, err := NewZoneTracker([]ZoneConfig{assemblyZone()}, []Binding{b}, ZoneTrackerOptions{}); !errors.Is(err, ErrZoneConfig) {
			t.Errorf("%+v: err %v", b, err)
		}
	}
	bad := assemblyZone()
	bad.Class = fp(12)
	if _, err := NewZoneTracker([]ZoneConfig{bad}, nil, ZoneTrackerOptions{}); !errors.Is(err, ErrZoneConfig) || !strings.Contains(err.Error(), "zones[0].class") {
		t.Errorf("bad class: %v", err)
	}
}

func TestLatestReadingShown(t *testing.T) {
	clk := &fakeClock{t: t0.Add(time.Hour)}
	tr := newTracker(t, clk, []ZoneConfig{assemblyZone()}, asmBindings)
	// Older than the window: not in the mean, but still the latest reading.
	tr.Observe(obs("pc-asm-1", t0, 1234, 5), obs("pc-asm-1", t0.Add(-time.Minute), 99, 1))
	v, _ := tr.Zone("assembly")
	l := v.Locations[0]
	if !l.Time.Equal(t0) || l.PerM3["0.5"] != 1234 || l.PerM3["0.3"] != 3702 || l.Samples != 0 || l.Fresh || l.Counter != "pc-asm-1" {
		t.Fatalf("latest %+v", l)
	}
	if v.Locations[1].Counter != "pc-asm-2" || !v.Locations[1].Time.IsZero() {
		t.Fatalf("asm-2 %+v", v.Locations[1])
	}
}

func TestMaxSamplesBound(t *testing.T) {
	clk := &fakeClock{t: t0.Add(time.Minute)}
	tr, err := NewZoneTracker([]ZoneConfig{assemblyZone()}, asmBindings, ZoneTrackerOptions{Now: clk.Now, MaxSamples: 5})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 20; i++ {
		tr.Observe(obs("pc-asm-1", t0.Add(time.Duration(i)*time.Second), float64(i), 0))
	}
	v, _ := tr.Zone("assembly")
	// The five newest (15..19) remain: mean 17.
	if v.Locations[0].Samples != 5 || v.Locations[0].MeanPerM3["0.5"] != 17 {
		t.Fatalf("samples %d mean %v", v.Locations[0].Samples, v.Locations[0].MeanPerM3["0.5"])
	}
}

// BenchmarkObserve measures the zone state's share of the ingest path: a
// batch of 1 000 one-second readings spread over the three counters of a
// zone, as the collector hands them over after a commit.
func BenchmarkObserve(b *testing.B) {
	z := assemblyZone()
	z.Locations = append(z.Locations, LocationConfig{ID: "asm-3"})
	bind := append(append([]Binding(nil), asmBindings...), Binding{"pc-asm-3", "assembly", "asm-3"})
	clk := &fakeClock{t: t0}
	tr, err := NewZoneTracker([]ZoneConfig{z}, bind, ZoneTrackerOptions{Now: clk.Now})
	if err != nil {
		b.Fatal(err)
	}
	counters := []string{"pc-asm-1", "pc-asm-2", "pc-asm-3"}
	batch := make([]Observation, 1000)
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		for j := range batch {
			batch[j] = obs(counters[j%3], clk.t.Add(time.Duration(j)*time.Millisecond), 10000, 10)
		}
		tr.Observe(batch...)
		clk.Advance(time.Second)
	}
	b.ReportMetric(float64(b.N*len(batch))/b.Elapsed().Seconds(), "readings/s")
}

// Readings taken in maintenance stay out of every mean, also of the
// clean-up that follows it, which is judged against the limits of the
// state before the maintenance.
func TestMaintenanceReadingsLeftOutOfTheMean(t *testing.T) {
	clk := &fakeClock{t: t0}
	z := gradeB()
	z.OperatingState = InOperation
	tr := newTracker(t, clk, []ZoneConfig{z}, []Binding{{"pc-f", "fill", "f-1"}})
	set := func(state string) {
		t.Helper()
		if _, err := tr.SetOperatingState(OperatingChange{Zone: "fill", State: state, By: "l.berg", Reason: "test"}, nil); err != nil {
			t.Fatal(err)
		}
	}
	step := func(p05 float64) {
		tr.Observe(obs("pc-f", clk.t, p05, 0))
		clk.Advance(time.Minute)
	}
	step(10000)
	step(20000)
	set(Maintenance)
	step(900000) // a filter change: kept, not judged
	step(800000)
	set(AtRest)
	step(30000)
	v, _ := tr.Zone("fill")
	if v.LimitsState != InOperation || v.CleanUpUntil.IsZero() {
		t.Fatalf("clean-up: limits %s until %s", v.LimitsState, v.CleanUpUntil)
	}
	// (10 000 + 20 000 + 30 000) / 3 = 20 000 /m³, in class against the
	// grade B in-operation 352 000 /m³ (EU GMP Annex 1 (2022), from memory).
	l := v.Locations[0]
	if l.Samples != 3 || l.MeanPerM3["0.5"] != 20000 || v.State != StatusInClass {
		t.Errorf("location %+v, zone %s: want the mean of the three judged readings", l, v.State)
	}
}
