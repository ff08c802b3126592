package alerts

import (
	"context"
	"errors"
	"fmt"
	"reflect"
	"slices"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// memJournal is an in-memory Journal: it keeps every transition with the
// notifiers it was recorded for (the outbox entries a store would create)
// and the latest form of every alarm, as the store does durably.
type memJournal struct {
	mu      sync.Mutex
	recs    []journalRec
	keys    map[string]Transition
	dupKeys []string
	latest  map[string]Alarm
	calls   int
	// failCall, when set, is asked before each call (numbered from 1) and
	// fails it with the error it returns.
	failCall func(call int, ts []Transition) error
}

type journalRec struct {
	T         Transition
	Notifiers []string
}

func newMemJournal() *memJournal {
	return &memJournal{keys: map[string]Transition{}, latest: map[string]Alarm{}}
}

func (j *memJournal) RecordTransitions(ctx context.Context, ts []Transition, notifiers []string) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	j.calls++
	if j.failCall != nil {
		if err := j.failCall(j.calls, ts); err != nil {
			return err
		}
	}
	for _, t := range ts {
		// Recording the same transition again (a call retried after a
		// failure) is a no-op; a different one under a used key is a bug.
		if prev, ok := j.keys[t.Key]; ok {
			if !reflect.DeepEqual(prev, t) {
				j.dupKeys = append(j.dupKeys, t.Key)
			}
			continue
		}
		j.keys[t.Key] = t
		j.latest[t.AlarmID] = cloneAlarm(t.Alarm)
		j.recs = append(j.recs, journalRec{T: t, Notifiers: slices.Clone(notifiers)})
	}
	return nil
}

func (j *memJournal) OpenAlarms(ctx context.Context) ([]Alarm, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	var out []Alarm
	for _, a := range j.latest {
		if a.State != StateCleared {
			out = append(out, cloneAlarm(a))
		}
	}
	sort.Slice(out, func(a, b int) bool { return out[a].ID < out[b].ID })
	return out, nil
}

// records returns the journaled transitions that match f.
func (j *memJournal) records(f func(journalRec) bool) []journalRec {
	j.mu.Lock()
	defer j.mu.Unlock()
	var out []journalRec
	for _, r := range j.recs {
		if f == nil || f(r) {
			out = append(out, r)
		}
	}
	return out
}

// announced are the records that went to the notifiers (outbox entries).
func (j *memJournal) announced(kind string) []journalRec {
	return j.records(func(r journalRec) bool { return len(r.Notifiers) > 0 && (kind == "" || r.T.Alarm.Kind == kind) })
}

func (j *memJournal) quiet(kind string) []journalRec {
	return j.records(func(r journalRec) bool { return len(r.Notifiers) == 0 && (kind == "" || r.T.Alarm.Kind == kind) })
}

// engClock is the injectable clock; a mutex because the concurrency test
// reads it from several goroutines.
type engClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *engClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *engClock) Advance(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

var engT0 = time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)

func ptrf(v float64) *float64 { return &v }

// engineZones is part of the invented demo site plus an invented
// grade B filling room. Limits, ISO 14644-1:2015 Table 1: ISO 7 352 000
// /m³ at ≥0.5 µm and 2 930 /m³ at ≥5 µm. Grade B at rest, EU GMP Annex 1
// (2022) monitoring: 3 520 /m³ and 29 /m³.
func engineZones() []ZoneConfig {
	return []ZoneConfig{
		{ID: "assembly", Name: "Assembly hall", Class: ptrf(7), OperatingState: InOperation, AreaM2: 60,
			Sizes: []string{"0.5", "5"}, Window: model.Duration(10 * time.Minute), StaleAfter: model.Duration(3 * time.Minute),
			Levels: map[string]Levels{
				"0.5": {Alert: ptrf(100000), Action: ptrf(250000)},
				"5":   {Alert: ptrf(1000), Action: ptrf(2000)},
			},
			Locations: []LocationConfig{{ID: "asm-1"}, {ID: "asm-2"}}},
		{ID: "gowning", Name: "Gowning room", Class: ptrf(8), OperatingState: AtRest, AreaM2: 12,
			Sizes: []string{"0.5", "5"}, Locations: []LocationConfig{{ID: "gown-1"}}},
		{ID: "filling", Name: "Filling room", Grade: "B", OperatingState: AtRest, AreaM2: 20,
			Sizes: []string{"0.5", "5"}, Locations: []LocationConfig{{ID: "fill-1"}}},
	}
}

func engineConfig() EngineConfig {
	return EngineConfig{
		Zones: engineZones(),
		Counters: []CounterRule{
			{ID: "pc-asm-1", Zone: "assembly", Location: "asm-1", NominalFlowLPM: 28.3, MaxPerM3: 2e6, Interval: time.Minute},
			{ID: "pc-asm-2", Zone: "assembly", Location: "asm-2", NominalFlowLPM: 28.3, Interval: time.Minute},
			{ID: "pc-gown", Zone: "gowning", Location: "gown-1", Interval: time.Minute},
			{ID: "pc-fill", Zone: "filling", Location: "fill-1", NominalFlowLPM: 28.3, Interval: time.Minute},
		},
		Sensors: []SensorRule{
			{ID: "dp-asm", High: "assembly", Low: "gowning", MinPa: 8, MaxPa: 200},
			{ID: "dp-gown", High: "gowning", Low: "corridor", MinPa: 8, Delay: time.Minute, StaleAfter: time.Minute},
		},
		Notifiers: []string{"log", "webhook"},
	}
}

// reading is a reading of the 0.3/0.5/5 µm channels in 28.3 L, given as
// concentrations at 0.5 and 5 µm (the 0.3 µm channel three times 0.5).
func reading(counter string, at time.Time, p05, p5 float64) Observation {
	return Observation{Counter: counter, Time: at, VolumeL: 28.3, Status: "ok", Sizes: []float64{0.3, 0.5, 5}, PerM3: []float64{p05 * 3, p05, p5}}
}

type harness struct {
	t   *testing.T
	clk *engClock
	j   *memJournal
	e   *Engine
}

func newHarness(t *testing.T, mutate func(*EngineConfig)) *harness {
	t.Helper()
	cfg := engineConfig()
	if mutate != nil {
		mutate(&cfg)
	}
	h := &harness{t: t, clk: &engClock{t: engT0}, j: newMemJournal()}
	e, err := NewEngine(cfg, h.j, h.clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	h.e = e
	t.Cleanup(func() {
		if len(h.j.dupKeys) > 0 {
			t.Errorf("transition keys journaled twice: %q", h.j.dupKeys)
		}
	})
	return h
}

// feed observes readings taken now, then advances the clock a minute.
func (h *harness) feed(obs ...Observation) {
	h.t.Helper()
	if err := h.e.ObserveReadings(context.Background(), obs); err != nil {
		h.t.Fatal(err)
	}
	h.clk.Advance(time.Minute)
}

func (h *harness) pressure(sensor string, pa float64) {
	h.t.Helper()
	h.pressureAt(sensor, pa, h.clk.Now())
}

func (h *harness) pressureAt(sensor string, pa float64, at time.Time) {
	h.t.Helper()
	if err := h.e.ObservePressure(context.Background(), []PressureObservation{{Sensor: sensor, Time: at, Pa: pa}}); err != nil {
		h.t.Fatal(err)
	}
}

func (h *harness) tick() {
	h.t.Helper()
	if err := h.e.Tick(context.Background()); err != nil {
		h.t.Fatal(err)
	}
}

// open returns the open alarms of a kind.
func (h *harness) open(kind string) []Alarm {
	var out []Alarm
	for _, a := range h.e.Alarms(false) {
		if a.Kind == kind {
			out = append(out, a)
		}
	}
	return out
}

func (h *harness) one(kind string) Alarm {
	h.t.Helper()
	as := h.open(kind)
	if len(as) != 1 {
		h.t.Fatalf("%d open %s alarms, want 1: %+v", len(as), kind, as)
	}
	return as[0]
}

func TestNewEngineRefusesBadConfig(t *testing.T) {
	cases := []struct {
		name   string
		mutate func(*EngineConfig)
		want   []string // paths named in the error
	}{
		{"no journal", nil, []string{"no journal"}},
		{"bad zone", func(c *EngineConfig) { c.Zones[0].Class = ptrf(12) }, []string{"zones[0].class"}},
		{"counter without id", func(c *EngineConfig) { c.Counters[0].ID = "" }, []string{"counters[0].id"}},
		{"counter id with a colon", func(c *EngineConfig) { c.Counters[0].ID = "pc:1" }, []string{"counters[0].id"}},
		{"duplicate counter", func(c *EngineConfig) { c.Counters[1].ID = "pc-asm-1" }, []string{"counters[1].id"}},
		{"sensor named like a counter", func(c *EngineConfig) { c.Sensors[0].ID = "pc-gown" }, []string{"sensors[0].id"}},
		{"unknown zone", func(c *EngineConfig) { c.Counters[0].Zone = "cellar" }, []string{"counters[0].zone"}},
		{"unknown location", func(c *EngineConfig) { c.Counters[0].Location = "asm-9" }, []string{"counters[0].location"}},
		{"negative flow and maximum", func(c *EngineConfig) { c.Counters[0].NominalFlowLPM, c.Counters[0].MaxPerM3 = -1, -2 },
			[]string{"counters[0].nominal_flow_lpm", "counters[0].max_per_m3"}},
		{"negative durations", func(c *EngineConfig) {
			c.Counters[0].Interval, c.Sensors[0].Delay, c.Sensors[0].StaleAfter = -time.Second, -time.Second, -time.Second
		}, []string{"counters[0].interval", "sensors[0].delay", "sensors[0].stale_after"}},
		{"sensor high side unknown", func(c *EngineConfig) { c.Sensors[0].High = "roof" }, []string{"sensors[0].high"}},
		{"sensor low side same", func(c *EngineConfig) { c.Sensors[0].Low = "assembly" }, []string{"sensors[0].low"}},
		{"max below min", func(c *EngineConfig) { c.Sensors[0].MaxPa = 5 }, []string{"sensors[0].max_pa"}},
		{"consecutive of one", func(c *EngineConfig) { c.Consecutive = 1 }, []string{"consecutive"}},
		{"trend run of one, tiny baseline", func(c *EngineConfig) { c.TrendRun, c.TrendBaseline = 1, 3 }, []string{"trend_run", "trend_baseline"}},
		{"empty and repeated notifier", func(c *EngineConfig) { c.Notifiers = []string{"log", "", "log"} }, []string{"notifiers[1]", "notifiers[2]"}},
		{"latch of an unknown kind", func(c *EngineConfig) { c.Latch = map[string]bool{"smoke": true} }, []string{"latch.smoke"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := engineConfig()
			var j Journal = newMemJournal()
			if c.mutate == nil {
				j = nil
			} else {
				c.mutate(&cfg)
			}
			e, err := NewEngine(cfg, j, nil)
			if !errors.Is(err, ErrEngineConfig) || e != nil {
				t.Fatalf("err %v, want ErrEngineConfig", err)
			}
			for _, w := range c.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q does not name %q", err, w)
				}
			}
		})
	}
}

func TestObserveRefusesBadInputAndChangesNothing(t *testing.T) {
	good := reading("pc-asm-1", engT0, 300000, 0)
	cases := []struct {
		name string
		obs  Observation
		want string
	}{
		{"no counter", Observation{Time: engT0}, "reading 1: counter"},
		{"no time", Observation{Counter: "pc-asm-1"}, "reading 1 (pc-asm-1): time"},
		{"negative volume", Observation{Counter: "pc-asm-1", Time: engT0, VolumeL: -1}, "volume_l"},
		{"sizes and values differ", Observation{Counter: "pc-asm-1", Time: engT0, VolumeL: 1, Sizes: []float64{0.5}}, "1 sizes but 0 concentrations"},
		{"negative concentration", Observation{Counter: "pc-asm-1", Time: engT0, VolumeL: 1, Sizes: []float64{0.5}, PerM3: []float64{-3}}, "concentration at 0.5 µm"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newHarness(t, nil)
			err := h.e.ObserveReadings(context.Background(), []Observation{good, c.obs})
			if !errors.Is(err, ErrObservation) || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("err %v, want ErrObservation naming %q", err, c.want)
			}
			if n := len(h.e.Alarms(true)); n != 0 {
				t.Errorf("%d alarms after refused input", n)
			}
			if n := len(h.j.records(nil)); n != 0 {
				t.Errorf("%d transitions journaled after refused input", n)
			}
		})
	}
	h := newHarness(t, nil)
	err := h.e.ObservePressure(context.Background(), []PressureObservation{{Sensor: "dp-asm", Time: engT0, Pa: -3}, {Sensor: "dp-asm", Pa: 1}})
	if !errors.Is(err, ErrObservation) || !strings.Contains(err.Error(), "pressure reading 1 (dp-asm): time") || len(h.e.Alarms(true)) != 0 {
		t.Fatalf("pressure: err %v, alarms %v", err, h.e.Alarms(true))
	}
	err = h.e.ObserveCounterReadings(context.Background(), []CounterReading{{Observation: good, FlowLPM: -1}})
	if !errors.Is(err, ErrObservation) || !strings.Contains(err.Error(), "reading 0: flow_lpm") {
		t.Fatalf("flow: err %v", err)
	}
}

func TestJournalFailureLeavesEngineAsBefore(t *testing.T) {
	errDisk := errors.New("disk full")
	t.Run("reading retried after a failure raises its alarm once", func(t *testing.T) {
		h := newHarness(t, nil)
		h.j.failCall = func(int, []Transition) error { return errDisk }
		obs := reading("pc-asm-1", h.clk.Now(), 300000, 0)
		err := h.e.ObserveReadings(context.Background(), []Observation{obs})
		if !errors.Is(err, ErrJournal) || !errors.Is(err, errDisk) {
			t.Fatalf("err %v, want ErrJournal wrapping the journal's error", err)
		}
		if as := h.e.Alarms(true); len(as) != 0 {
			t.Fatalf("alarms visible after the journal failed: %+v", as)
		}
		// Had the engine kept the reading as judged, the retry would be
		// history and raise nothing.
		h.j.failCall = nil
		if err := h.e.ObserveReadings(context.Background(), []Observation{obs}); err != nil {
			t.Fatal(err)
		}
		if a := h.one(KindExcursion); a.Level != LevelAction || a.State != StateActive {
			t.Fatalf("after retry: %+v", a)
		}
	})
	t.Run("announced part fails after the quiet part", func(t *testing.T) {
		h := newHarness(t, nil)
		h.pressure("dp-asm", 12)
		// -2 Pa makes a delayed pressure-low (memory only) and a reversal
		// (announced) in one call; fail the journal call.
		calls := h.j.calls
		h.j.failCall = func(call int, ts []Transition) error {
			if call == calls+1 {
				return errDisk
			}
			return nil
		}
		h.clk.Advance(time.Second)
		err := h.e.ObservePressure(context.Background(), []PressureObservation{{Sensor: "dp-asm", Time: h.clk.Now(), Pa: -2}})
		if !errors.Is(err, errDisk) {
			t.Fatalf("err %v", err)
		}
		if as := h.e.Alarms(true); len(as) != 0 {
			t.Fatalf("alarms visible after the journal failed: %+v", as)
		}
		h.j.failCall = nil
		if err := h.e.ObservePressure(context.Background(), []PressureObservation{{Sensor: "dp-asm", Time: h.clk.Now(), Pa: -2}}); err != nil {
			t.Fatal(err)
		}
		if h.one(KindPressureReversal).State != StateActive || h.one(KindPressureLow).State != StateDelayed {
			t.Fatalf("after retry: %+v", h.e.Alarms(false))
		}
	})
	t.Run("acknowledgement", func(t *testing.T) {
		h := newHarness(t, nil)
		h.feed(reading("pc-asm-1", h.clk.Now(), 300000, 0))
		id := h.one(KindExcursion).ID
		h.j.failCall = func(int, []Transition) error { return errDisk }
		if _, err := h.e.Ack(context.Background(), id, "r.okafor", "checked"); !errors.Is(err, errDisk) {
			t.Fatalf("err %v", err)
		}
		if a, _ := h.e.Alarm(id); a.State != StateActive || a.AcknowledgedBy != "" {
			t.Fatalf("ack visible after the journal failed: %+v", a)
		}
	})
}

func TestSubscribersSeeJournaledTransitions(t *testing.T) {
	h := newHarness(t, nil)
	var got []Transition
	h.e.Subscribe(func(ts []Transition) {
		for _, tr := range ts {
			if len(h.j.records(func(r journalRec) bool { return r.T.Key == tr.Key })) != 1 {
				t.Errorf("transition %s reached a subscriber before the journal", tr.Key)
			}
		}
		// Reading the engine from a subscriber must not deadlock.
		_ = h.e.Alarms(true)
		got = append(got, ts...)
	})
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
	h.feed(reading("pc-asm-1", h.clk.Now(), 300000, 0))
	h.feed(reading("pc-asm-1", h.clk.Now(), 1000, 0))
	var path []string
	for _, tr := range got {
		if tr.Alarm.Kind == KindExcursion {
			path = append(path, tr.From+"→"+tr.To+"/"+tr.Alarm.Level)
		}
	}
	want := []string{"→active/alert", "active→active/action", "active→active/action"}
	if !slices.Equal(path, want) {
		t.Fatalf("excursion transitions %q, want %q", path, want)
	}
	if !got[len(got)-1].Alarm.ConditionGone {
		t.Errorf("last transition should mark the latched condition gone: %+v", got[len(got)-1])
	}
}

func TestConcurrentUse(t *testing.T) {
	h := newHarness(t, nil)
	ctx := context.Background()
	var wg sync.WaitGroup
	errs := make(chan error, 16)
	for g, counter := range []string{"pc-asm-1", "pc-asm-2"} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range 200 {
				v := float64((i*37+g*11)%7) * 60000
				if err := h.e.ObserveReadings(ctx, []Observation{reading(counter, engT0.Add(time.Duration(i)*time.Second), v, 0)}); err != nil {
					errs <- err
					return
				}
			}
		}()
	}
	wg.Add(3)
	go func() {
		defer wg.Done()
		for i := range 200 {
			if err := h.e.ObservePressure(ctx, []PressureObservation{{Sensor: "dp-asm", Time: engT0.Add(time.Duration(i) * time.Second), Pa: float64(i%20) - 2}}); err != nil {
				errs <- err
				return
			}
			h.clk.Advance(time.Second)
			if err := h.e.Tick(ctx); err != nil {
				errs <- err
				return
			}
		}
	}()
	go func() {
		defer wg.Done()
		for range 200 {
			for _, a := range h.e.Alarms(false) {
				_, err := h.e.Ack(ctx, a.ID, "night shift", "seen")
				if err != nil && !errors.Is(err, ErrAlreadyAcked) && !errors.Is(err, ErrAlarmPending) && !errors.Is(err, ErrAlarmCleared) && !errors.Is(err, ErrNoAlarm) {
					errs <- err
					return
				}
			}
		}
	}()
	go func() {
		defer wg.Done()
		for i := range 50 {
			state := InOperation
			if i%2 == 0 {
				state = Maintenance
			}
			if err := h.e.SetOperatingState(ctx, "assembly", state); err != nil {
				errs <- err
				return
			}
		}
	}()
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
	// The journal's latest forms and the engine's open alarms agree.
	open, _ := h.j.OpenAlarms(ctx)
	mine := h.e.Alarms(false)
	if len(open) != len(mine) {
		t.Fatalf("journal has %d open alarms, engine %d", len(open), len(mine))
	}
	for _, a := range mine {
		if j := h.j.latest[a.ID]; j.State != a.State || j.Level != a.Level {
			t.Errorf("%s: engine %s/%s, journal %s/%s", a.ID, a.State, a.Level, j.State, j.Level)
		}
	}
}

func BenchmarkObserveReadings(b *testing.B) {
	clk := &engClock{t: engT0}
	e, err := NewEngine(engineConfig(), newMemJournal(), clk.Now)
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		at := engT0.Add(time.Duration(i) * time.Second)
		clk.Advance(time.Second)
		if err := e.ObserveReadings(ctx, []Observation{reading("pc-asm-1", at, float64(20000+i%50), float64(i%5))}); err != nil {
			b.Fatal(err)
		}
	}
}

func ExampleEngine_Alarms() {
	clk := &engClock{t: engT0}
	e, err := NewEngine(engineConfig(), newMemJournal(), clk.Now)
	if err != nil {
		panic(err)
	}
	ctx := context.Background()
	_ = e.ObserveReadings(ctx, []Observation{reading("pc-asm-1", engT0, 300000, 0)})
	for _, a := range e.Alarms(false) {
		fmt.Println(a.ID, a.Level, a.State)
		fmt.Println(a.Message)
	}
	// Output:
	// assembly:asm-1:0.5:excursion:20260302T100000Z action active
	// 0.5 µm at asm-1 (pc-asm-1): 300000 /m³ is above the action level 250000 /m³
}
