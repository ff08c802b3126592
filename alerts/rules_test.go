package alerts

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"
)

// The assembly zone's levels at 0.5 µm are alert 100 000 and action
// 250 000 /m³ (the demo site's configuration, engineZones), below the ISO 7
// limit of 352 000 /m³ (ISO 14644-1:2015 Table 1).

func TestExcursion(t *testing.T) {
	cases := []struct {
		name      string
		values    []float64 // asm-1 at 0.5 µm, one a minute
		latch     map[string]bool
		open      int    // open excursion alarms at the end
		level     string // of the open one
		gone      bool   // its condition has gone (latched)
		announced int    // excursion transitions sent to notifiers
		episodes  int    // distinct excursion alarm IDs journaled
	}{
		{name: "at the alert level is not above it", values: []float64{100000}, open: 0},
		{name: "alert, then back below", values: []float64{150000, 50000}, open: 0, announced: 2, episodes: 1},
		{name: "alert escalates to action in place", values: []float64{150000, 300000}, open: 1, level: LevelAction, announced: 2, episodes: 1},
		{name: "action then alert stays action", values: []float64{300000, 150000}, open: 1, level: LevelAction, announced: 1, episodes: 1},
		{name: "action latches after the condition goes", values: []float64{300000, 50000}, open: 1, level: LevelAction, gone: true, announced: 1, episodes: 1},
		{name: "an excursion after a return to normal is a new alarm while the first waits for its acknowledgement", values: []float64{300000, 50000, 260000}, open: 2, announced: 2, episodes: 2},
		{name: "latching switched off for the kind", values: []float64{300000, 50000}, latch: map[string]bool{KindExcursion: false}, open: 0, announced: 2, episodes: 1},
		{name: "latching switched on for alerts", values: []float64{150000, 50000}, latch: map[string]bool{KindExcursion: true}, open: 1, level: LevelAlert, gone: true, announced: 1, episodes: 1},
		{name: "a new episode is a new alarm", values: []float64{150000, 50000, 150000}, open: 1, level: LevelAlert, announced: 3, episodes: 2},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newHarness(t, func(cfg *EngineConfig) { cfg.Latch = c.latch })
			for _, v := range c.values {
				h.feed(reading("pc-asm-1", h.clk.Now(), v, 0))
			}
			as := h.open(KindExcursion)
			if len(as) != c.open {
				t.Fatalf("%d open excursion alarms, want %d: %+v", len(as), c.open, as)
			}
			if c.open == 1 {
				a := as[0]
				if a.Level != c.level || a.ConditionGone != c.gone || a.Location != "asm-1" || a.SizeUM == nil || *a.SizeUM != 0.5 || a.Zone != "assembly" {
					t.Errorf("alarm %+v, want level %s gone %v at asm-1 0.5 µm", a, c.level, c.gone)
				}
			}
			if n := len(h.j.announced(KindExcursion)); n != c.announced {
				t.Errorf("%d excursion transitions announced, want %d", n, c.announced)
			}
			ids := map[string]bool{}
			for _, r := range h.j.records(nil) {
				if r.T.Alarm.Kind == KindExcursion {
					ids[r.T.AlarmID] = true
				}
			}
			if len(ids) != c.episodes {
				t.Errorf("%d excursion alarm IDs, want %d: %v", len(ids), c.episodes, ids)
			}
		})
	}
}

func TestOneAlarmPerConditionOverManySamples(t *testing.T) {
	h := newHarness(t, nil)
	for range 1000 {
		h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0), reading("pc-asm-2", h.clk.Now(), 1000, 0))
	}
	for _, kind := range []string{KindExcursion, KindConsecutive} {
		if n := len(h.open(kind)); n != 1 {
			t.Errorf("%d open %s alarms after 1000 samples above the alert level, want 1", n, kind)
		}
		if n := len(h.j.records(func(r journalRec) bool { return r.T.Alarm.Kind == kind })); n != 1 {
			t.Errorf("%d %s transitions journaled, want 1", n, kind)
		}
	}
	if n := len(h.e.Alarms(true)); n != 2 {
		t.Errorf("%d alarms in all, want 2: %+v", n, h.e.Alarms(true))
	}
}

func TestConsecutive(t *testing.T) {
	cases := []struct {
		name   string
		n      int
		values []float64
		raised bool
	}{
		{"three in a row above alert", 0, []float64{150000, 150000, 150000}, true},
		{"two are not enough", 0, []float64{150000, 150000}, false},
		{"a run broken at the alert level", 0, []float64{150000, 150000, 100000, 150000, 150000}, false},
		{"above action counts too", 0, []float64{150000, 300000, 150000}, true},
		{"N configured to 5", 5, []float64{150000, 150000, 150000, 150000}, false},
		{"N configured to 5, reached", 5, []float64{150000, 150000, 150000, 150000, 150000}, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newHarness(t, func(cfg *EngineConfig) { cfg.Consecutive = c.n })
			for _, v := range c.values {
				h.feed(reading("pc-asm-1", h.clk.Now(), v, 0))
			}
			as := h.open(KindConsecutive)
			if got := len(as) == 1; got != c.raised {
				t.Fatalf("consecutive raised %v, want %v: %+v", got, c.raised, as)
			}
			if c.raised && (as[0].Level != LevelAction || !as[0].Latched || as[0].Threshold != 100000) {
				t.Errorf("consecutive alarm %+v: want a latched action against the alert level", as[0])
			}
		})
	}
	// A fault reading is no sample: it neither counts nor breaks the run.
	h := newHarness(t, nil)
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
	f := reading("pc-asm-1", h.clk.Now(), 150000, 0)
	f.Status = StatusFault
	h.feed(f)
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
	if len(h.open(KindConsecutive)) != 0 {
		t.Fatal("a fault reading counted in the run")
	}
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
	h.one(KindConsecutive)
}

// The out-of-class alarm and the zone state agree: both are judged on the
// same rolling means. An independent ZoneTracker fed the same readings is
// the reference.
//
// With a shared tracker (EngineConfig.Tracker, as the daemon runs it) the
// owner feeds the tracker and the engine only reads it: the same alarms
// must follow.
func newRefTracker(t *testing.T, now func() time.Time) *ZoneTracker {
	t.Helper()
	ref, err := NewZoneTracker(engineZones(), []Binding{{"pc-asm-1", "assembly", "asm-1"}, {"pc-asm-2", "assembly", "asm-2"}}, ZoneTrackerOptions{Now: now})
	if err != nil {
		t.Fatal(err)
	}
	return ref
}

func TestOutOfClassAgreesWithZoneState(t *testing.T) {
	for _, shared := range []bool{false, true} {
		t.Run(map[bool]string{false: "own tracker", true: "shared tracker"}[shared], func(t *testing.T) { outOfClassAgrees(t, shared) })
	}
}

func outOfClassAgrees(t *testing.T, shared bool) {
	// One clock for the reference tracker and the engine. A shared tracker
	// is made before the harness, so it gets a clock of its own, which the
	// engine then takes too.
	var ref *ZoneTracker
	clk := &engClock{t: engT0}
	h := newHarness(t, func(cfg *EngineConfig) {
		if shared {
			cfg.Tracker = newRefTracker(t, clk.Now)
			ref = cfg.Tracker
		}
	})
	if shared {
		h.clk = clk
		h.e.now = clk.Now
	} else {
		ref = newRefTracker(t, h.clk.Now)
	}
	// asm-1's mean over the 10-minute window: 300 000; (300 000 + 420 000)/2
	// = 360 000 > 352 000 (ISO 7 limit); (300 000 + 420 000 + 300 000)/3 =
	// 340 000, back in class (alarm latched: condition gone).
	steps := []struct {
		asm1 float64
		out  bool
	}{{300000, false}, {420000, true}, {300000, false}, {200000, false}}
	for i, s := range steps {
		obs := []Observation{reading("pc-asm-1", h.clk.Now(), s.asm1, 0), reading("pc-asm-2", h.clk.Now(), 1000, 0)}
		ref.Observe(obs...)
		if err := h.e.ObserveReadings(context.Background(), obs); err != nil {
			t.Fatal(err)
		}
		v, _ := ref.Zone("assembly")
		var present bool
		for _, a := range h.open(KindOutOfClass) {
			present = present || !a.ConditionGone
		}
		if present != s.out || (v.State == StatusOutOfClass) != s.out {
			t.Fatalf("step %d: alarm condition %v, zone state %s, want out-of-class %v", i, present, v.State, s.out)
		}
		h.clk.Advance(time.Minute)
	}
	a := h.one(KindOutOfClass)
	if a.Location != "asm-1" || *a.SizeUM != 0.5 || a.Level != LevelAction || a.Threshold != 352000 || !a.ConditionGone {
		t.Errorf("out-of-class alarm %+v", a)
	}
	if math.Abs(a.Value-340000) > 1e-6 {
		// The alarm keeps the mean of the transition that marked its
		// condition gone: (300 000 + 420 000 + 300 000)/3 = 340 000.
		t.Errorf("mean %v, want 340000", a.Value)
	}
}

func TestOutOfClassClearsWhenTheWindowMovesOn(t *testing.T) {
	h := newHarness(t, func(cfg *EngineConfig) {
		cfg.Latch = map[string]bool{KindOutOfClass: false}
		cfg.Counters[0].MaxPerM3 = 0 // no stated maximum: the high reading is trusted
	})
	// One reading of 4 000 000 and one of 10 000: mean 2 005 000 > 352 000.
	h.feed(reading("pc-asm-1", h.clk.Now(), 4_000_000, 0))
	h.feed(reading("pc-asm-1", h.clk.Now(), 10000, 0))
	h.one(KindOutOfClass)
	// Ten minutes after the high one it leaves the window; readings keep
	// the location fresh and Tick judges the mean again.
	for range 9 {
		h.feed(reading("pc-asm-1", h.clk.Now(), 10000, 0))
	}
	h.tick()
	if len(h.open(KindOutOfClass)) != 0 {
		t.Fatalf("out-of-class still open with the excursion out of the window: %+v", h.open(KindOutOfClass))
	}
}

func TestTrend(t *testing.T) {
	// Counts in 28.3 L: the 5 µm channel alternates 8 and 12 (c̄ = 10 per
	// sample, spread 2, UCL = 10 + 3√10 ≈ 19.5, by hand). The line a rise
	// must cross is the larger of 10 + 2·2 = 14 and halfway to the alert
	// level of 1 000 /m³ (28.3 counts): 10 + (28.3 − 10)/2 = 19.15 counts.
	// Then a steady rise 13, 16, … 28 counts (989 /m³, still below the
	// alert level). The 0.5 µm channel stays flat.
	perM3 := func(count float64) float64 { return count * 1000 / 28.3 }
	const base, run = 20, 6
	rise := []float64{13, 16, 19, 22, 25, 28}
	setup := func(t *testing.T) *harness {
		h := newHarness(t, func(cfg *EngineConfig) { cfg.TrendBaseline, cfg.TrendRun = base, run })
		for i := range base {
			c := 8.0
			if i%2 == 1 {
				c = 12
			}
			h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(c)))
		}
		return h
	}
	t.Run("a steady rise toward the alert level", func(t *testing.T) {
		h := setup(t)
		for i, c := range rise {
			if n := len(h.open(KindTrend)); n != 0 {
				t.Fatalf("trend raised after %d samples of the rise", i)
			}
			h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(c)))
		}
		a := h.one(KindTrend)
		if a.Level != LevelAlert || *a.SizeUM != 5 || math.Abs(a.Threshold-perM3(19.15)) > 1e-6 {
			t.Errorf("trend alarm %+v, want an alert at 5 µm against %v /m³", a, perM3(19.15))
		}
		if !strings.Contains(a.Message, "UCL 19.5") {
			t.Errorf("message %q should give the UCL 10 + 3√10 ≈ 19.5", a.Message)
		}
		for _, kind := range []string{KindExcursion, KindConsecutive, KindOutOfClass} {
			if n := len(h.open(kind)); n != 0 {
				t.Errorf("%d %s alarms: the trend should come before any level is crossed", n, kind)
			}
		}
		// It stays while the samples stay above the line, though the rise
		// has stopped; a sample at or below the line ends it (no latch).
		h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(27)))
		h.one(KindTrend)
		h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(9)))
		if n := len(h.open(KindTrend)); n != 0 {
			t.Fatalf("trend still open after the samples fell back")
		}
	})
	t.Run("a broken rise raises nothing", func(t *testing.T) {
		h := setup(t)
		for _, c := range []float64{13, 16, 19, 19, 22, 25, 28} {
			h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(c)))
		}
		if n := len(h.open(KindTrend)); n != 0 {
			t.Fatal("trend raised on a broken rise")
		}
	})
	t.Run("a rise that stays below the line raises nothing", func(t *testing.T) {
		h := setup(t)
		for _, c := range []float64{12.5, 13, 14, 15, 16, 17, 18} {
			h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(c)))
		}
		if n := len(h.open(KindTrend)); n != 0 {
			t.Fatal("trend raised below the line")
		}
	})
	t.Run("primed from history after a restart", func(t *testing.T) {
		h := newHarness(t, func(cfg *EngineConfig) { cfg.TrendBaseline, cfg.TrendRun = base, run })
		var hist []Observation
		for i := range base {
			c := 8.0
			if i%2 == 1 {
				c = 12
			}
			hist = append(hist, reading("pc-asm-1", engT0.Add(time.Duration(i-base)*time.Minute), perM3(500), perM3(c)))
		}
		if err := h.e.Prime(hist); err != nil {
			t.Fatal(err)
		}
		if n := len(h.j.records(nil)); n != 0 {
			t.Fatalf("Prime journaled %d transitions", n)
		}
		for _, c := range rise {
			h.feed(reading("pc-asm-1", h.clk.Now(), perM3(500), perM3(c)))
		}
		h.one(KindTrend)
	})
}

func TestInstrument(t *testing.T) {
	// Flow tolerance ±5 % of nominal, ISO 21501-4; nominal 28.3 L/min.
	cases := []struct {
		name    string
		counter string
		flow    float64
		status  string
		p05     float64
		cause   string // "" when no instrument alarm
		level   string
	}{
		{name: "flow 27.5 L/min is -2.8 %", counter: "pc-asm-1", flow: 27.5},
		{name: "flow 29.6 L/min is +4.6 %", counter: "pc-asm-1", flow: 29.6},
		{name: "flow 26.0 L/min is -8.1 %", counter: "pc-asm-1", flow: 26.0, cause: "flow", level: LevelAlert},
		{name: "flow 29.9 L/min is +5.7 %", counter: "pc-asm-1", flow: 29.9, cause: "flow", level: LevelAlert},
		{name: "no flow reported", counter: "pc-asm-1", flow: 0},
		{name: "fault status", counter: "pc-asm-1", status: StatusFault, cause: "fault", level: LevelAlert},
		{name: "warning status is no fault", counter: "pc-asm-1", status: "warning"},
		// pc-asm-1's stated maximum is 2 000 000 /m³; the 0.3 µm channel
		// holds 3 × the 0.5 µm concentration.
		{name: "at the counter's maximum", counter: "pc-asm-1", p05: 2e6 / 3, cause: "overrange", level: LevelAlert},
		{name: "below the counter's maximum", counter: "pc-asm-1", p05: 6e5},
		{name: "grade B counter: action", counter: "pc-fill", flow: 26.0, cause: "flow", level: LevelAction},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newHarness(t, nil)
			o := reading(c.counter, h.clk.Now(), c.p05, 0)
			if c.status != "" {
				o.Status = c.status
			}
			if err := h.e.ObserveCounterReadings(context.Background(), []CounterReading{{Observation: o, FlowLPM: c.flow}}); err != nil {
				t.Fatal(err)
			}
			as := h.open(KindInstrument)
			if c.cause == "" {
				if len(as) != 0 {
					t.Fatalf("instrument alarms %+v, want none", as)
				}
				return
			}
			if len(as) != 1 || !strings.Contains(as[0].ID, ":instrument:"+c.cause+":") || as[0].Level != c.level || as[0].Counter != c.counter {
				t.Fatalf("instrument alarms %+v, want one %s %s", as, c.cause, c.level)
			}
			// A good reading clears it (alerts do not latch).
			if c.level == LevelAlert {
				h.clk.Advance(time.Minute)
				good := CounterReading{Observation: reading(c.counter, h.clk.Now(), 1000, 0), FlowLPM: 28.3}
				if err := h.e.ObserveCounterReadings(context.Background(), []CounterReading{good}); err != nil {
					t.Fatal(err)
				}
				if n := len(h.open(KindInstrument)); n != 0 {
					t.Fatalf("%d instrument alarms after a good reading", n)
				}
			}
		})
	}
	// A fault reading is not judged for excursions.
	h := newHarness(t, nil)
	f := reading("pc-asm-1", h.clk.Now(), 300000, 0)
	f.Status = StatusFault
	h.feed(f)
	if n := len(h.open(KindExcursion)); n != 0 {
		t.Fatal("an untrusted reading raised an excursion")
	}
	// DP above the sensor's range (MaxPa 200).
	h.pressure("dp-asm", 250)
	var ranged int
	for _, a := range h.open(KindInstrument) {
		if a.Sensor == "dp-asm" && strings.Contains(a.ID, ":instrument:range:") {
			ranged++
		}
	}
	if ranged != 1 {
		t.Fatalf("range alarms %+v", h.open(KindInstrument))
	}
}

func TestStale(t *testing.T) {
	t.Run("counter silent past 3 × its interval", func(t *testing.T) {
		h := newHarness(t, func(cfg *EngineConfig) { cfg.Counters = cfg.Counters[:1]; cfg.Sensors = nil })
		h.feed(reading("pc-asm-1", engT0, 1000, 0)) // clock now t0+1m
		h.clk.Advance(2 * time.Minute)              // t0+3m: silent exactly 3m
		h.tick()
		if n := len(h.open(KindStale)); n != 0 {
			t.Fatalf("stale at exactly the allowed gap")
		}
		h.clk.Advance(time.Second)
		h.tick()
		a := h.one(KindStale)
		if a.Level != LevelAlert || a.Counter != "pc-asm-1" || a.Threshold != 180 || !a.Since.Equal(engT0.Add(3*time.Minute)) {
			t.Fatalf("stale alarm %+v", a)
		}
		// An old reading from a backlog does not make it current: at
		// t0+10m the newest reading is from t0+2m.
		h.clk.Advance(10*time.Minute - 3*time.Minute - time.Second)
		h.feed(reading("pc-asm-1", engT0.Add(2*time.Minute), 1000, 0))
		h.one(KindStale)
		h.feed(reading("pc-asm-1", h.clk.Now(), 1000, 0))
		if n := len(h.open(KindStale)); n != 0 {
			t.Fatalf("stale open after a current reading")
		}
	})
	t.Run("never heard of since the start", func(t *testing.T) {
		h := newHarness(t, nil)
		h.clk.Advance(3*time.Minute + time.Second)
		h.tick()
		got := map[string]string{}
		for _, a := range h.open(KindStale) {
			got[a.Counter+a.Sensor] = a.Level
		}
		// Grade B: action (continuous monitoring, EU GMP Annex 1, from
		// memory); dp-gown's own stale_after is 1m, dp-asm's 3 × 10 s.
		want := map[string]string{"pc-asm-1": LevelAlert, "pc-asm-2": LevelAlert, "pc-gown": LevelAlert, "pc-fill": LevelAction, "dp-asm": LevelAlert, "dp-gown": LevelAlert}
		if len(got) != len(want) {
			t.Fatalf("stale %v, want %v", got, want)
		}
		for k, v := range want {
			if got[k] != v {
				t.Errorf("%s: %q, want %q", k, got[k], v)
			}
		}
	})
	t.Run("sensor", func(t *testing.T) {
		h := newHarness(t, nil)
		h.pressure("dp-asm", 12)
		h.clk.Advance(30 * time.Second)
		h.tick()
		if n := len(h.open(KindStale)); n != 0 {
			t.Fatalf("dp-asm stale at its gap of 3 × 10 s")
		}
		h.clk.Advance(time.Second)
		h.tick()
		var found bool
		for _, a := range h.open(KindStale) {
			found = found || a.Sensor == "dp-asm"
		}
		if !found {
			t.Fatalf("dp-asm not stale after 31 s: %+v", h.open(KindStale))
		}
	})
}

func TestPressure(t *testing.T) {
	t.Run("a door dip shorter than the delay is never announced", func(t *testing.T) {
		h := newHarness(t, nil)
		h.pressure("dp-asm", 12)
		h.clk.Advance(time.Second)
		h.pressure("dp-asm", 3)
		for range 25 {
			h.clk.Advance(time.Second)
			h.tick()
		}
		if a := h.one(KindPressureLow); a.State != StateDelayed {
			t.Fatalf("during the delay: %+v", a)
		}
		h.pressure("dp-asm", 11)
		if n := len(h.open(KindPressureLow)); n != 0 {
			t.Fatalf("pending alarm left open after the DP recovered")
		}
		if n := len(h.j.announced(KindPressureLow)); n != 0 {
			t.Errorf("%d pressure-low transitions went to the notifiers", n)
		}
		if q := h.j.quiet(KindPressureLow); len(q) != 0 {
			t.Errorf("journal %+v, want no record of a dip shorter than its delay", q)
		}
		if n := h.e.DoorOpenings()["dp-asm"]; n != 1 {
			t.Errorf("door openings of dp-asm %d, want 1", n)
		}
	})
	t.Run("a DP low for longer than the delay", func(t *testing.T) {
		h := newHarness(t, nil)
		h.pressure("dp-asm", 3)
		start := h.clk.Now()
		h.clk.Advance(29 * time.Second)
		h.pressure("dp-asm", 3)
		h.tick()
		if a := h.one(KindPressureLow); a.State != StateDelayed {
			t.Fatalf("before the delay ran out: %+v", a)
		}
		h.clk.Advance(time.Second)
		h.pressure("dp-asm", 4) // still low 30 s after the first low sample
		a := h.one(KindPressureLow)
		if a.State != StateActive || a.Level != LevelAction || !a.Latched || !a.ActiveSince.Equal(start.Add(DefaultPressureDelay)) {
			t.Fatalf("after the delay: %+v", a)
		}
		ann := h.j.announced(KindPressureLow)
		if len(ann) != 1 || ann[0].T.From != "" || ann[0].T.To != StateActive || len(ann[0].Notifiers) != 2 {
			t.Fatalf("announced %+v", ann)
		}
		h.clk.Advance(10 * time.Second)
		h.pressure("dp-asm", 12)
		if a := h.one(KindPressureLow); !a.ConditionGone || a.State != StateActive {
			t.Fatalf("latched alarm after recovery: %+v", a)
		}
	})
	t.Run("a late replay of a recovered dip raises nothing", func(t *testing.T) {
		// A gateway replays its buffer after an outage: the dip's samples
		// arrive long after they were taken, with a tick in between. The
		// delay runs in the samples' own time, so the dip is judged by
		// what the sensor saw, not by when its report arrived.
		h := newHarness(t, nil)
		h.pressureAt("dp-asm", 3, h.clk.Now().Add(-time.Hour))
		h.tick()
		if a := h.one(KindPressureLow); a.State != StateDelayed {
			t.Fatalf("replayed dip before its recovery: %+v", a)
		}
		h.pressureAt("dp-asm", 11, h.clk.Now().Add(-time.Hour+10*time.Second))
		if n := len(h.open(KindPressureLow)); n != 0 || len(h.j.announced(KindPressureLow)) != 0 {
			t.Fatalf("a recovered dip was raised: %d open", n)
		}
	})
	t.Run("the configured delay", func(t *testing.T) {
		h := newHarness(t, nil)
		h.pressure("dp-gown", 2)
		h.clk.Advance(59 * time.Second)
		h.pressure("dp-gown", 2)
		if h.one(KindPressureLow).State != StateDelayed {
			t.Fatal("dp-gown active before its 1m delay")
		}
		h.clk.Advance(time.Second)
		h.pressure("dp-gown", 2)
		if a := h.one(KindPressureLow); a.State != StateActive || a.Zone != "gowning" {
			t.Fatalf("dp-gown after 1m: %+v", a)
		}
	})
	t.Run("a reversal is an action at once", func(t *testing.T) {
		h := newHarness(t, nil)
		h.pressure("dp-asm", -1.5)
		a := h.one(KindPressureReversal)
		if a.State != StateActive || a.Level != LevelAction || a.Value != -1.5 || !strings.Contains(a.Message, "from gowning into assembly") {
			t.Fatalf("reversal %+v", a)
		}
	})
	t.Run("no reversal where the DP may be negative", func(t *testing.T) {
		no := false
		h := newHarness(t, func(cfg *EngineConfig) { cfg.Sensors[0].MustBePositive = &no })
		h.pressure("dp-asm", -1.5)
		if n := len(h.open(KindPressureReversal)); n != 0 {
			t.Fatal("reversal raised on a sensor allowed to be negative")
		}
	})
}

func TestMaintenance(t *testing.T) {
	ctx := context.Background()
	h := newHarness(t, nil)
	// An alert (not latched) and an action (latched) before maintenance.
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0), reading("pc-asm-2", h.clk.Now(), 300000, 0))
	if err := h.e.SetOperatingState(ctx, "assembly", Maintenance); err != nil {
		t.Fatal(err)
	}
	ex := h.open(KindExcursion)
	if len(ex) != 1 || ex[0].Location != "asm-2" || ex[0].Level != LevelAction {
		t.Fatalf("after entering maintenance: %+v, want only the latched action at asm-2", ex)
	}
	cl := h.j.announced(KindExcursion)
	last := cl[len(cl)-1]
	if last.T.To != StateCleared || last.T.Alarm.Location != "asm-1" || !strings.Contains(last.T.Comment, "maintenance") {
		t.Fatalf("the alert's clearing: %+v", last.T)
	}
	// In maintenance: readings above every level raise nothing.
	entered := h.clk.Now()
	before := len(h.j.announced(""))
	for range 5 {
		o := reading("pc-asm-1", h.clk.Now(), 400000, 0)
		h.feed(o, reading("pc-asm-2", h.clk.Now(), 1000, 0))
	}
	for _, kind := range []string{KindConsecutive, KindOutOfClass} {
		if n := len(h.open(kind)); n != 0 {
			t.Errorf("%d %s alarms raised in maintenance", n, kind)
		}
	}
	if n := len(h.open(KindExcursion)); n != 1 {
		t.Errorf("%d excursion alarms, want only the one from before", n)
	}
	if n := len(h.j.announced("")) - before; n != 0 {
		t.Errorf("%d transitions announced in maintenance", n)
	}
	// Readings taken in maintenance are kept, not judged: no record of a
	// particle rule at all, not even a suppressed one.
	for _, r := range h.j.records(nil) {
		if r.T.Time.After(entered) && suppressible(r.T.Alarm.Kind) {
			t.Errorf("a particle rule judged a maintenance reading: %+v", r.T)
		}
	}
	// Instrument and pressure rules keep running.
	f := reading("pc-asm-1", h.clk.Now(), 1000, 0)
	f.Status = StatusFault
	h.feed(f)
	h.one(KindInstrument)
	h.pressure("dp-asm", -1)
	h.one(KindPressureReversal)
	// The zone state says so.
	if v, _ := h.e.tracker.Zone("assembly"); !strings.Contains(strings.Join(v.Notes, "|"), "maintenance") {
		t.Errorf("zone notes %q do not mention maintenance", v.Notes)
	}
	// Back in operation the rules raise again.
	if err := h.e.SetOperatingState(ctx, "assembly", InOperation); err != nil {
		t.Fatal(err)
	}
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
	var asm1 bool
	for _, a := range h.open(KindExcursion) {
		asm1 = asm1 || a.Location == "asm-1"
	}
	if !asm1 {
		t.Fatal("no excursion at asm-1 after maintenance ended")
	}
	if err := h.e.SetOperatingState(ctx, "assembly", "idle"); err == nil {
		t.Error("a bad operating state was accepted")
	}
	if err := h.e.SetOperatingState(ctx, "cellar", Maintenance); err == nil {
		t.Error("an unknown zone was accepted")
	}
}

func TestLimitsFollowOperatingState(t *testing.T) {
	// Grade B monitoring limits at 0.5 µm, EU GMP Annex 1 (2022) as recalled
	// in EU GMP Annex 1 (2022): 3 520 /m³ at rest, 352 000 /m³ in operation.
	h := newHarness(t, nil)
	h.feed(reading("pc-fill", h.clk.Now(), 10000, 0))
	if a := h.one(KindExcursion); a.Threshold != 3520 || a.Level != LevelAction {
		t.Fatalf("at rest: %+v", a)
	}
	if _, err := h.e.Ack(context.Background(), h.one(KindExcursion).ID, "l.berg", "start of shift"); err != nil {
		t.Fatal(err)
	}
	if err := h.e.SetOperatingState(context.Background(), "filling", InOperation); err != nil {
		t.Fatal(err)
	}
	h.feed(reading("pc-fill", h.clk.Now(), 10000, 0))
	if n := len(h.open(KindExcursion)); n != 0 {
		t.Fatalf("10 000 /m³ in operation is within 352 000 /m³, yet %+v", h.open(KindExcursion))
	}
}

func TestDeviceFault(t *testing.T) {
	// A poller reports a counter it cannot reach, then reaching it again:
	// one instrument alarm of cause "device", alert level in an ISO zone
	// (action only in grade A/B, the engine's documented rule), cleared on
	// recovery when not latched.
	h := newHarness(t, nil)
	ctx := context.Background()
	if err := h.e.ObserveDevice(ctx, "pc-asm-1", true, "connection refused", h.clk.Now()); err != nil {
		t.Fatal(err)
	}
	a := h.one(KindInstrument)
	if a.State != StateActive || a.Counter != "pc-asm-1" || a.Level != LevelAlert || !strings.Contains(a.Message, "connection refused") {
		t.Fatalf("device fault: %+v", a)
	}
	h.e.ObserveDevice(ctx, "pc-asm-1", true, "connection refused", h.clk.Now().Add(time.Second))
	if n := len(h.open(KindInstrument)); n != 1 {
		t.Errorf("%d instrument alarms for one fault, want one per condition", n)
	}
	h.clk.Advance(time.Minute)
	if err := h.e.ObserveDevice(ctx, "pc-asm-1", false, "", h.clk.Now()); err != nil {
		t.Fatal(err)
	}
	if n := len(h.open(KindInstrument)); n != 0 {
		t.Errorf("alarm still open after recovery: %d", n)
	}
	if err := h.e.ObserveDevice(ctx, "no-such-device", true, "x", h.clk.Now()); err != nil || len(h.open(KindInstrument)) != 0 {
		t.Errorf("an unknown device raised something: %v", err)
	}
}
