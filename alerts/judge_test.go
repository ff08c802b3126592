package alerts

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"
)

// judgeHarness drives a Judge with the engine tests' zones, counters and
// sensors, a fake clock and an in-memory journal.
type judgeHarness struct {
	t   *testing.T
	clk *engClock
	j   *memJournal
	jd  *Judge
}

func newJudgeHarness(t *testing.T, mutate func(*EngineConfig)) *judgeHarness {
	t.Helper()
	cfg := engineConfig()
	if mutate != nil {
		mutate(&cfg)
	}
	h := &judgeHarness{t: t, clk: &engClock{t: engT0}, j: newMemJournal()}
	jd, err := NewJudge(cfg, h.j, h.clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	h.jd = jd
	return h
}

func (h *judgeHarness) observe(in Input) {
	h.t.Helper()
	if err := h.jd.Observe(context.Background(), in); err != nil {
		h.t.Fatal(err)
	}
}

func (h *judgeHarness) readings(obs ...Observation) {
	h.t.Helper()
	rs := make([]CounterReading, len(obs))
	for i, o := range obs {
		rs[i] = CounterReading{Observation: o, FlowLPM: 28.3}
	}
	h.observe(Input{Readings: rs})
}

func (h *judgeHarness) dp(sensor string, pa float64) {
	h.t.Helper()
	h.observe(Input{Pressure: []PressureObservation{{Sensor: sensor, Time: h.clk.Now(), Pa: pa}}})
}

// calm brings the assembly hall to a state where nothing needs a person:
// both locations fresh and clean, its DP sensor well above its minimum.
func (h *judgeHarness) calm() {
	h.t.Helper()
	for range 3 {
		h.readings(reading("pc-asm-1", h.clk.Now(), 20000, 100), reading("pc-asm-2", h.clk.Now(), 20000, 100))
		h.dp("dp-asm", 12)
		h.clk.Advance(20 * time.Second)
	}
}

func (h *judgeHarness) zone(id string) ZoneReport {
	h.t.Helper()
	r, ok := h.jd.Zone(id)
	if !ok {
		h.t.Fatalf("no zone %s", id)
	}
	return r
}

func (h *judgeHarness) alarms(kind string) []Alarm {
	var out []Alarm
	for _, a := range h.jd.Alarms(true) {
		if a.Kind == kind {
			out = append(out, a)
		}
	}
	return out
}

func TestAttention(t *testing.T) {
	cases := []struct {
		name   string
		then   func(h *judgeHarness)
		want   Attention
		reason string // a reason must contain this
	}{
		{name: "nothing needs a person", then: func(*judgeHarness) {}, want: AttentionNone},
		{name: "a DP reversal", then: func(h *judgeHarness) { h.dp("dp-asm", -3.5) }, want: AttentionAction, reason: "reversed"},
		{name: "a DP low within its delay", then: func(h *judgeHarness) { h.dp("dp-asm", 5) }, want: AttentionAlert, reason: "low"},
		{name: "a DP sensor silent", then: func(h *judgeHarness) {
			for range 4 { // dp-asm: 30 s allowed; the counters keep reporting
				h.clk.Advance(10 * time.Second)
				h.readings(reading("pc-asm-1", h.clk.Now(), 20000, 100), reading("pc-asm-2", h.clk.Now(), 20000, 100))
			}
		}, want: AttentionUnknown, reason: "silent"},
		{name: "an over-range reading", then: func(h *judgeHarness) {
			h.readings(reading("pc-asm-1", h.clk.Now(), 700000, 100)) // 0.3 µm: 2 100 000 ≥ the 2 000 000 maximum
		}, want: AttentionUnknown, reason: "maximum"},
		{name: "a latched action whose condition went", then: func(h *judgeHarness) {
			h.readings(reading("pc-asm-1", h.clk.Now(), 300000, 100))
			h.clk.Advance(time.Second)
			h.readings(reading("pc-asm-1", h.clk.Now(), 20000, 100))
		}, want: AttentionAction, reason: "waiting for its acknowledgement"},
		{name: "an alert excursion", then: func(h *judgeHarness) {
			h.readings(reading("pc-asm-2", h.clk.Now(), 150000, 100))
		}, want: AttentionAlert, reason: "alert excursion"},
		{name: "maintenance", then: func(h *judgeHarness) {
			if _, err := h.jd.SetOperatingState(context.Background(), OperatingChange{Zone: "assembly", State: Maintenance, By: "t.nakamura", Reason: "filter change"}, nil); err != nil {
				h.t.Fatal(err)
			}
		}, want: AttentionUnknown, reason: "maintenance"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newJudgeHarness(t, nil)
			h.calm()
			if z := h.zone("assembly"); z.Attention != AttentionNone || len(z.AttentionReasons) != 0 || z.State != StatusInClass {
				t.Fatalf("calm assembly: attention %s %q, state %s", z.Attention, z.AttentionReasons, z.State)
			}
			c.then(h)
			z := h.zone("assembly")
			if z.Attention != c.want {
				t.Fatalf("attention %s, want %s; reasons %q", z.Attention, c.want, z.AttentionReasons)
			}
			if c.reason != "" && !strings.Contains(strings.Join(z.AttentionReasons, "|"), c.reason) {
				t.Errorf("reasons %q lack %q", z.AttentionReasons, c.reason)
			}
			if c.want == AttentionNone {
				return
			}
			if len(z.AttentionReasons) == 0 {
				t.Error("attention without a reason")
			}
		})
	}
}

func TestAttentionBeforeAnyData(t *testing.T) {
	h := newJudgeHarness(t, nil)
	for _, z := range h.jd.Zones() {
		if z.Attention == AttentionNone {
			t.Errorf("zone %s: attention none before any reading", z.ID)
		}
	}
}

func TestDoorDipLeavesNoRecord(t *testing.T) {
	h := newJudgeHarness(t, nil)
	h.calm()
	for range 3 { // three door openings of 20 s each, under the 30 s delay
		h.dp("dp-asm", 2)
		h.clk.Advance(10 * time.Second)
		if err := h.jd.Tick(context.Background()); err != nil {
			t.Fatal(err)
		}
		h.dp("dp-asm", 3)
		h.clk.Advance(10 * time.Second)
		h.dp("dp-asm", 12)
		h.clk.Advance(20 * time.Second)
		h.dp("dp-asm", 12)
	}
	if as := h.alarms(KindPressureLow); len(as) != 0 {
		t.Fatalf("door openings left alarms: %+v", as)
	}
	for _, r := range h.j.records(nil) {
		if r.T.Alarm.Kind == KindPressureLow {
			t.Errorf("door opening journaled: %+v", r.T)
		}
	}
	if n := h.jd.DoorOpenings()["dp-asm"]; n != 3 {
		t.Errorf("door openings %d, want 3", n)
	}
	z := h.zone("assembly")
	if len(z.Sensors) != 1 || z.Sensors[0].DoorOpenings != 3 || z.Sensors[0].Status != SensorOK {
		t.Errorf("zone sensors %+v", z.Sensors)
	}
}

func TestTwoExcursionsWithoutAckAreTwoAlarms(t *testing.T) {
	h := newJudgeHarness(t, nil)
	h.calm()
	// Action level 250 000 /m³ at 0.5 µm.
	for _, v := range []float64{300000, 420000, 20000, 20000, 260000, 310000, 280000, 20000} {
		h.readings(reading("pc-asm-1", h.clk.Now(), v, 100))
		h.clk.Advance(time.Minute)
	}
	as := h.alarms(KindExcursion)
	if len(as) != 2 {
		t.Fatalf("%d excursion alarms, want 2: %+v", len(as), as)
	}
	want := []struct {
		peak float64
		at   time.Time
	}{{420000, engT0.Add(time.Minute + 60*time.Second)}, {310000, engT0.Add(time.Minute + 5*60*time.Second)}}
	for i, a := range as {
		if a.Peak != want[i].peak || !a.PeakTime.Equal(want[i].at) || a.State != StateActive || !a.ConditionGone {
			t.Errorf("alarm %d: peak %v at %s, state %s gone %v; want peak %v at %s, active and gone", i, a.Peak, a.PeakTime, a.State, a.ConditionGone, want[i].peak, want[i].at)
		}
	}
	// Acknowledging an action alarm needs a comment.
	if _, err := h.jd.Ack(context.Background(), as[0].ID, "l.berg", " "); !errors.Is(err, ErrCommentRequired) || !errors.Is(err, ErrAck) {
		t.Errorf("ack without a comment: %v", err)
	}
	a, err := h.jd.Ack(context.Background(), as[0].ID, "l.berg", "bench wiped, source found")
	if err != nil || a.State != StateCleared {
		t.Fatalf("ack: %+v %v", a, err)
	}
	var open []string
	for _, a := range h.zone("assembly").ActiveAlarms {
		if a.Kind == KindExcursion {
			open = append(open, a.ID)
		}
	}
	if len(open) != 1 || open[0] != as[1].ID {
		t.Errorf("open excursion alarms of the zone %q, want the second only", open)
	}
}

func TestLateActionReadingRaisesItsAlarm(t *testing.T) {
	h := newJudgeHarness(t, nil)
	h.calm()
	// The counter's clock ran fast, or a gateway replays its buffer: a
	// reading taken two minutes ago arrives after newer clean ones.
	late := h.clk.Now().Add(-2 * time.Minute)
	h.readings(reading("pc-asm-1", late, 600000, 100))
	as := h.alarms(KindExcursion)
	if len(as) != 1 {
		t.Fatalf("%d excursion alarms after a late action-level reading, want 1", len(as))
	}
	a := as[0]
	if a.Level != LevelAction || !a.Since.Equal(late) || a.Peak != 600000 || a.State != StateActive || !a.ConditionGone {
		t.Errorf("late alarm %+v", a)
	}
	if n := len(h.j.announced(KindExcursion)); n != 1 {
		t.Errorf("%d excursion transitions announced, want 1", n)
	}
	// The window is recomputed with it: mean of asm-1 above its action
	// level, and the zone's attention shows it.
	if z := h.zone("assembly"); z.Attention.rank() < AttentionAction.rank() {
		t.Errorf("attention %s after a late action-level reading", z.Attention)
	}
	// A late reversal too.
	h.dp("dp-asm", 12)
	h.observe(Input{Pressure: []PressureObservation{{Sensor: "dp-asm", Time: h.clk.Now().Add(-time.Minute), Pa: -4}}})
	if rs := h.alarms(KindPressureReversal); len(rs) != 1 || rs[0].Peak != -4 {
		t.Errorf("late reversal: %+v", rs)
	}
}

func TestSwitchToAtRestRaisesNothingDuringCleanUp(t *testing.T) {
	ctx := context.Background()
	h := newJudgeHarness(t, nil)
	if _, err := h.jd.SetOperatingState(ctx, OperatingChange{Zone: "filling", State: InOperation, By: "l.berg", Reason: "shift"}, nil); err != nil {
		t.Fatal(err)
	}
	// In operation: 100 000 /m³ at 0.5 µm and 300 /m³ at 5 µm are within
	// the grade B in-operation limits (352 000 and 2 930, EU GMP Annex 1
	// (2022), from memory) and far above the at-rest ones (3 520, 29).
	for range 10 {
		h.readings(reading("pc-fill", h.clk.Now(), 100000, 300))
		h.clk.Advance(time.Minute)
	}
	switched := h.clk.Now()
	r, err := h.jd.SetOperatingState(ctx, OperatingChange{Zone: "filling", State: AtRest, By: "l.berg", Reason: "end of shift"}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !r.CleanUpUntil.Equal(switched.Add(DefaultCleanUp)) || r.LimitsState != InOperation {
		t.Fatalf("after the switch: clean-up until %s, limits %s", r.CleanUpUntil, r.LimitsState)
	}
	// The room cleans up over 15 minutes.
	for i := range 19 {
		v := 100000 / float64(int(1)<<min(i, 16))
		h.readings(reading("pc-fill", h.clk.Now(), v, 0))
		h.clk.Advance(time.Minute)
		if err := h.jd.Tick(ctx); err != nil {
			t.Fatal(err)
		}
	}
	for _, a := range h.jd.Alarms(true) {
		if a.Zone == "filling" {
			t.Fatalf("alarm during the clean-up: %+v", a)
		}
	}
	if z := h.zone("filling"); z.CleanUpUntil.IsZero() || z.State == StatusOutOfClass {
		t.Fatalf("during the clean-up: %+v", z.ZoneView)
	}
	// After it the at-rest window starts empty, then fills.
	h.clk.Advance(time.Minute)
	if z := h.zone("filling"); !z.CleanUpUntil.IsZero() || z.LimitsState != AtRest || z.State != StatusUnknown {
		t.Fatalf("right after the clean-up: until %s limits %s state %s", z.CleanUpUntil, z.LimitsState, z.State)
	}
	h.readings(reading("pc-fill", h.clk.Now(), 500, 0))
	if z := h.zone("filling"); z.State != StatusInClass || z.Attention != AttentionNone {
		t.Fatalf("at rest: state %s attention %s %q", z.State, z.Attention, z.AttentionReasons)
	}
	// And at rest the at-rest limits apply.
	h.clk.Advance(time.Minute)
	h.readings(reading("pc-fill", h.clk.Now(), 5000, 0))
	if as := h.alarms(KindExcursion); len(as) != 1 || as[0].Threshold != 3520 {
		t.Fatalf("at-rest excursion: %+v", as)
	}
}

func TestUntrustedReadings(t *testing.T) {
	cases := []struct {
		name string
		obs  func(at time.Time) CounterReading
		why  string
	}{
		{"at the counter's maximum", func(at time.Time) CounterReading {
			return CounterReading{Observation: reading("pc-asm-1", at, 2e6/3, 100), FlowLPM: 28.3}
		}, "maximum"},
		{"fault status", func(at time.Time) CounterReading {
			o := reading("pc-asm-1", at, 20000, 100)
			o.Status = StatusFault
			return CounterReading{Observation: o, FlowLPM: 28.3}
		}, "fault"},
		// ISO 21501-4: flow within ±5 % of nominal (from memory): 28.3 ×
		// 0.95 = 26.885 L/min is the edge; 26.8 is outside.
		{"flow 5.3 % low", func(at time.Time) CounterReading {
			return CounterReading{Observation: reading("pc-asm-1", at, 20000, 100), FlowLPM: 26.8}
		}, "flow"},
		// A counter configured without a flow gets the 28.3 L/min default:
		// pc-gown reporting 31 L/min is outside.
		{"default nominal flow", func(at time.Time) CounterReading {
			return CounterReading{Observation: reading("pc-gown", at, 20000, 100), FlowLPM: 31}
		}, "flow"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newJudgeHarness(t, nil)
			h.calm()
			r := c.obs(h.clk.Now())
			zone := "assembly"
			if r.Counter == "pc-gown" {
				zone = "gowning"
			}
			h.observe(Input{Readings: []CounterReading{r}})
			z := h.zone(zone)
			var loc LocationView
			for _, l := range z.Locations {
				if l.Counter == r.Counter {
					loc = l
				}
			}
			if loc.Trusted || !strings.Contains(loc.Untrusted, c.why) || loc.State != StatusUnknown || z.State != StatusUnknown {
				t.Fatalf("location %+v, zone %s: want untrusted (%s) and unknown", loc, z.State, c.why)
			}
			if z.Attention.rank() < AttentionUnknown.rank() {
				t.Errorf("attention %s", z.Attention)
			}
			// The untrusted reading is in no mean: a trusted one follows
			// and the mean is that of the trusted readings alone.
			if zone != "assembly" {
				return
			}
			h.clk.Advance(time.Second)
			h.readings(reading("pc-asm-1", h.clk.Now(), 20000, 100))
			z = h.zone(zone)
			for _, l := range z.Locations {
				if l.ID == "asm-1" && (!l.Trusted || l.MeanPerM3["0.5"] != 20000 || l.State != StatusInClass) {
					t.Errorf("after a trusted reading: %+v", l)
				}
			}
		})
	}
}

func TestCountRuleGradeAAndBAtRest(t *testing.T) {
	// Grade B at rest, ≥5 µm: 29 /m³ (EU GMP Annex 1 (2022), from memory);
	// one particle in 28.3 L is 35.3 /m³.
	one := 1000 / 28.3
	cases := []struct {
		name   string
		counts []float64 // particles per 28.3 L sample at ≥5 µm
		action bool
	}{
		{"a single count is no action", []float64{1, 0, 0, 0}, false},
		{"counts far apart are no action", []float64{1, 0, 0, 1, 0, 0, 1}, false},
		{"two consecutive counts are", []float64{1, 1}, true},
		{"two counts within three samples are", []float64{1, 0, 1}, true},
		{"two particles in one sample are", []float64{2}, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newJudgeHarness(t, nil)
			for range 10 { // a clean window first
				h.readings(reading("pc-fill", h.clk.Now(), 500, 0))
				h.clk.Advance(time.Minute)
			}
			for _, n := range c.counts {
				h.readings(reading("pc-fill", h.clk.Now(), 500, n*one))
				h.clk.Advance(time.Minute)
			}
			var action bool
			for _, a := range h.jd.Alarms(true) {
				if a.Level == LevelAction && a.SizeUM != nil && *a.SizeUM == 5 {
					action = true
					if a.Kind != KindConsecutive {
						t.Errorf("action of kind %s: %+v", a.Kind, a)
					}
				}
			}
			if action != c.action {
				t.Errorf("action alarm %v, want %v: %+v", action, c.action, h.jd.Alarms(true))
			}
		})
	}
}

func TestJudgeMetrics(t *testing.T) {
	h := newJudgeHarness(t, nil)
	h.calm()
	h.dp("dp-asm", 3) // below the 8 Pa minimum: a door, for now
	h.clk.Advance(10 * time.Second)
	h.dp("dp-asm", 12)
	got := ntGather(t, NewJudgeCollector(h.jd))
	for key, want := range map[string]float64{
		`cleanmon_zone_attention{level="none",zone="assembly"}`:        1,
		`cleanmon_zone_attention{level="unknown",zone="assembly"}`:     0,
		`cleanmon_zone_attention{level="unknown",zone="gowning"}`:      1, // no reading yet
		`cleanmon_zone_attention{level="out-of-class",zone="filling"}`: 0,
		`cleanmon_door_openings_total{sensor="dp-asm"}`:                1,
		`cleanmon_door_openings_total{sensor="dp-gown"}`:               0,
	} {
		if v, ok := got[key]; !ok || v != want {
			t.Errorf("%s = %v (present %v), want %v", key, v, ok, want)
		}
	}
	if n := len(got); n != 3*len(AttentionLevels)+2 {
		t.Errorf("%d series, want one per zone and level and one per sensor", n)
	}
	ntLint(t, NewJudgeCollector(h.jd))
}

func TestRestoreKeepsEpisodesApart(t *testing.T) {
	ctx := context.Background()
	h := newJudgeHarness(t, nil)
	h.calm()
	for _, v := range []float64{300000, 20000, 260000} { // two episodes, the first waiting for its acknowledgement
		h.readings(reading("pc-asm-1", h.clk.Now(), v, 100))
		h.clk.Advance(time.Minute)
	}
	before := h.alarms(KindExcursion)
	if len(before) != 2 || !before[0].ConditionGone || before[1].ConditionGone {
		t.Fatalf("before the restart: %+v", before)
	}
	again, err := NewJudge(engineConfig(), h.j, h.clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	if err := again.Restore(ctx, nil); err != nil {
		t.Fatal(err)
	}
	h.jd = again
	// Still high: the open episode goes on, no third alarm.
	h.readings(reading("pc-asm-1", h.clk.Now(), 270000, 100))
	after := h.alarms(KindExcursion)
	if len(after) != 2 || after[0].ID != before[0].ID || after[1].ID != before[1].ID {
		t.Fatalf("after the restart: %+v", after)
	}
	// Back to normal: the second waits for its acknowledgement too; the
	// first is cleared by its own.
	h.clk.Advance(time.Minute)
	h.readings(reading("pc-asm-1", h.clk.Now(), 20000, 100))
	if a, err := again.Ack(ctx, before[0].ID, "l.berg", "seen: door seal"); err != nil || a.State != StateCleared {
		t.Fatalf("ack of the first: %+v %v", a, err)
	}
	if a, _ := again.Alarm(before[1].ID); a.State != StateActive || !a.ConditionGone {
		t.Errorf("second episode %+v", a)
	}
}

// Zone reports read after a year of shift changes (three a day): every
// sample of every window is judged by the state of its time.
func BenchmarkJudgeZones(b *testing.B) {
	clk := &engClock{t: engT0}
	jd, err := NewJudge(engineConfig(), newMemJournal(), clk.Now)
	if err != nil {
		b.Fatal(err)
	}
	var hist []OperatingChange
	for i := range 3 * 365 {
		state := []string{InOperation, AtRest, Maintenance}[i%3]
		hist = append(hist, OperatingChange{Zone: "assembly", State: state, Time: engT0.Add(time.Duration(i-3*365) * 8 * time.Hour)})
	}
	hist = append(hist, OperatingChange{Zone: "assembly", State: InOperation, Time: engT0.Add(-time.Hour)})
	if err := jd.Restore(context.Background(), hist); err != nil {
		b.Fatal(err)
	}
	for range 10 {
		rs := []CounterReading{{Observation: reading("pc-asm-1", clk.Now(), 20000, 100), FlowLPM: 28.3}, {Observation: reading("pc-asm-2", clk.Now(), 20000, 100), FlowLPM: 28.3}}
		if err := jd.Observe(context.Background(), Input{Readings: rs}); err != nil {
			b.Fatal(err)
		}
		clk.Advance(time.Minute - time.Second)
	}
	b.ResetTimer()
	for range b.N {
		if zs := jd.Zones(); zs[0].State != StatusInClass {
			b.Fatalf("assembly %s", zs[0].State)
		}
	}
}
