package alerts

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"
)

func TestAck(t *testing.T) {
	ctx := context.Background()
	cases := []struct {
		name    string
		prepare func(h *harness) string // returns the alarm ID to acknowledge
		by      string
		comment string
		want    error
		state   string // the alarm's state after a successful ack
	}{
		{name: "unknown alarm", prepare: func(*harness) string { return "assembly:asm-1:0.5:excursion:19990101T000000Z" }, by: "a", want: ErrNoAlarm},
		{name: "nobody", prepare: activeAction, by: "  ", want: ErrAck},
		{name: "comment too long", prepare: activeAction, by: "a", comment: strings.Repeat("x", maxAckComment+1), want: ErrAck},
		{name: "action without a comment", prepare: activeAction, by: "a", comment: "  ", want: ErrCommentRequired},
		{name: "delayed", prepare: func(h *harness) string { h.pressure("dp-asm", 2); return h.one(KindPressureLow).ID }, by: "a", want: ErrAlarmPending},
		{name: "twice", prepare: func(h *harness) string {
			id := activeAction(h)
			if _, err := h.e.Ack(ctx, id, "first", "seen"); err != nil {
				h.t.Fatal(err)
			}
			return id
		}, by: "second", want: ErrAlreadyAcked},
		{name: "cleared", prepare: func(h *harness) string {
			h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
			id := h.one(KindExcursion).ID
			h.feed(reading("pc-asm-1", h.clk.Now(), 1000, 0))
			return id
		}, by: "a", want: ErrAlarmCleared},
		{name: "condition present: acknowledged", prepare: activeAction, by: "r.okafor", comment: "door seal checked", state: StateAcknowledged},
		{name: "latched, condition gone: cleared", prepare: func(h *harness) string {
			id := activeAction(h)
			h.feed(reading("pc-asm-1", h.clk.Now(), 1000, 0))
			return id
		}, by: "r.okafor", comment: "cleaned bench", state: StateCleared},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			h := newHarness(t, nil)
			id := c.prepare(h)
			before := len(h.j.records(nil))
			a, err := h.e.Ack(ctx, id, c.by, c.comment)
			if c.want != nil {
				if !errors.Is(err, c.want) {
					t.Fatalf("err %v, want %v", err, c.want)
				}
				if n := len(h.j.records(nil)); n != before {
					t.Errorf("a refused ack journaled %d transitions", n-before)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if a.State != c.state || a.AcknowledgedBy != c.by || a.Comment != c.comment || a.AcknowledgedAt == nil || !a.AcknowledgedAt.Equal(h.clk.Now()) {
				t.Fatalf("after ack %+v, want state %s by %s", a, c.state, c.by)
			}
			got, ok := h.e.Alarm(id)
			if !ok || got.State != c.state {
				t.Fatalf("Alarm(%s) = %+v, %v", id, got, ok)
			}
			recs := h.j.records(func(r journalRec) bool { return r.T.AlarmID == id && r.T.To == StateAcknowledged })
			if len(recs) != 1 || recs[0].T.By != c.by || recs[0].T.Comment != c.comment || len(recs[0].Notifiers) == 0 {
				t.Fatalf("journaled ack %+v", recs)
			}
			if c.state == StateCleared {
				if n := len(h.open(KindExcursion)); n != 0 {
					t.Errorf("still open after the clearing ack")
				}
				if a.ClearedAt == nil {
					t.Errorf("cleared without ClearedAt")
				}
			}
		})
	}
}

// activeAction raises an action excursion at asm-1 and returns its ID.
func activeAction(h *harness) string {
	h.feed(reading("pc-asm-1", h.clk.Now(), 300000, 0))
	return h.one(KindExcursion).ID
}

func TestAcknowledgedThenConditionGoesClears(t *testing.T) {
	h := newHarness(t, nil)
	id := activeAction(h)
	if _, err := h.e.Ack(context.Background(), id, "r.okafor", "door seal checked"); err != nil {
		t.Fatal(err)
	}
	h.feed(reading("pc-asm-1", h.clk.Now(), 1000, 0))
	if a, _ := h.e.Alarm(id); a.State != StateCleared {
		t.Fatalf("acknowledged latched alarm after its condition went: %+v", a)
	}
}

func TestEscalationAfterAckNeedsNewAck(t *testing.T) {
	h := newHarness(t, nil)
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))
	id := h.one(KindExcursion).ID
	if _, err := h.e.Ack(context.Background(), id, "r.okafor", "watching"); err != nil {
		t.Fatal(err)
	}
	h.feed(reading("pc-asm-1", h.clk.Now(), 300000, 0))
	a := h.one(KindExcursion)
	if a.ID != id || a.State != StateActive || a.Level != LevelAction || a.AcknowledgedBy != "" || !a.Latched {
		t.Fatalf("after escalation: %+v", a)
	}
	if _, err := h.e.Ack(context.Background(), id, "k.vos", "filter change booked"); err != nil {
		t.Fatal(err)
	}
}

func TestIDsAndKeys(t *testing.T) {
	h := newHarness(t, nil)
	// Two episodes within the same second get different IDs.
	at := h.clk.Now()
	for _, v := range []float64{150000, 1000, 150000} {
		if err := h.e.ObserveReadings(context.Background(), []Observation{reading("pc-asm-1", at, v, 0)}); err != nil {
			t.Fatal(err)
		}
		at = at.Add(100 * time.Millisecond)
	}
	ids := map[string]bool{}
	for _, a := range h.e.Alarms(true) {
		if a.Kind == KindExcursion {
			ids[a.ID] = true
			if strings.ContainsAny(a.ID, "/?# ") {
				t.Errorf("id %q would not be one path segment", a.ID)
			}
		}
	}
	want := []string{"assembly:asm-1:0.5:excursion:20260302T100000Z", "assembly:asm-1:0.5:excursion:20260302T100000Z-2"}
	for _, w := range want {
		if !ids[w] {
			t.Errorf("ids %v lack %s", ids, w)
		}
	}
	// Transition keys are unique (the harness checks on cleanup) and name
	// the alarm and the target state.
	for _, r := range h.j.records(nil) {
		if !strings.HasPrefix(r.T.Key, r.T.AlarmID+"/") || !strings.HasSuffix(r.T.Key, "/"+r.T.To) {
			t.Errorf("key %q for %s → %s", r.T.Key, r.T.AlarmID, r.T.To)
		}
	}
}

func TestRestoreAfterRestart(t *testing.T) {
	ctx := context.Background()
	h := newHarness(t, nil)
	h.feed(reading("pc-asm-1", h.clk.Now(), 300000, 0))                                            // excursion action, latched
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0), reading("pc-asm-2", h.clk.Now(), 1000, 0)) // run of 2 above alert
	h.feed(reading("pc-asm-1", h.clk.Now(), 150000, 0))                                            // consecutive raised
	h.pressure("dp-asm", 2)                                                                        // delayed pressure-low: memory only
	if len(h.e.Alarms(false)) != 3 {
		t.Fatalf("before the restart: %+v", h.e.Alarms(false))
	}
	var before []Alarm
	for _, a := range h.e.Alarms(false) {
		if a.State != StateDelayed {
			before = append(before, a)
		}
	}

	// A new engine on the same journal, as after a restart.
	clk := &engClock{t: h.clk.Now().Add(5 * time.Second)}
	e2, err := NewEngine(engineConfig(), h.j, clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	if err := e2.Restore(ctx); err != nil {
		t.Fatal(err)
	}
	after := e2.Alarms(false)
	if len(after) != len(before) {
		t.Fatalf("restored %d alarms, had %d", len(after), len(before))
	}
	for i := range before {
		b, a := before[i], after[i]
		if a.ID != b.ID || a.State != b.State || a.Level != b.Level || a.Latched != b.Latched || !a.Since.Equal(b.Since) {
			t.Errorf("restored %+v, was %+v", a, b)
		}
	}
	// The consecutive run goes on: one more sample above alert keeps the
	// alarm as it is instead of marking its condition gone.
	at := clk.Now()
	if err := e2.ObserveReadings(ctx, []Observation{reading("pc-asm-1", at, 150000, 0)}); err != nil {
		t.Fatal(err)
	}
	for _, a := range e2.Alarms(false) {
		if a.Kind == KindConsecutive && a.ConditionGone {
			t.Errorf("restored consecutive alarm lost its run: %+v", a)
		}
	}
	// The delayed pressure-low was never journaled: its delay (30 s)
	// starts again with the first low reading after the restart.
	for _, a := range e2.Alarms(false) {
		if a.Kind == KindPressureLow {
			t.Errorf("a delayed alarm came back from the journal: %+v", a)
		}
	}
	for i, d := range []time.Duration{0, 31 * time.Second} {
		clk.Advance(d)
		if err := e2.ObservePressure(ctx, []PressureObservation{{Sensor: "dp-asm", Time: clk.Now(), Pa: 2}}); err != nil {
			t.Fatal(err)
		}
		want := []string{StateDelayed, StateActive}[i]
		for _, a := range e2.Alarms(false) {
			if a.Kind == KindPressureLow && a.State != want {
				t.Errorf("pressure-low %s after the restart: %+v, want %s", d, a, want)
			}
		}
	}
	// Acknowledging a restored alarm works and is journaled.
	id := before[0].ID
	if _, err := e2.Ack(ctx, id, "r.okafor", "after restart"); err != nil {
		t.Fatal(err)
	}
	// Restoring twice, or after observing, is refused.
	if err := e2.Restore(ctx); !errors.Is(err, ErrRestore) {
		t.Errorf("second restore: %v", err)
	}
}

func TestRestoredStaleWaitsForAReading(t *testing.T) {
	ctx := context.Background()
	h := newHarness(t, nil)
	h.clk.Advance(4 * time.Minute)
	h.tick()
	var staleIDs []string
	for _, a := range h.open(KindStale) {
		staleIDs = append(staleIDs, a.ID)
	}
	if len(staleIDs) != 6 {
		t.Fatalf("stale before the restart: %v", staleIDs)
	}
	// Restart an hour later; history from before the stop is primed.
	clk := &engClock{t: h.clk.Now().Add(time.Hour)}
	e2, err := NewEngine(engineConfig(), h.j, clk.Now)
	if err != nil {
		t.Fatal(err)
	}
	if err := e2.Restore(ctx); err != nil {
		t.Fatal(err)
	}
	if err := e2.Prime([]Observation{reading("pc-asm-2", engT0.Add(-time.Minute), 1000, 0)}); err != nil {
		t.Fatal(err)
	}
	clk.Advance(time.Minute)
	if err := e2.Tick(ctx); err != nil {
		t.Fatal(err)
	}
	if n := len(e2.Alarms(false)); n != 6 {
		t.Fatalf("%d open alarms after the restart, want the 6 stale ones kept", n)
	}
	if err := e2.ObserveReadings(ctx, []Observation{reading("pc-asm-1", clk.Now(), 1000, 0)}); err != nil {
		t.Fatal(err)
	}
	for _, a := range e2.Alarms(false) {
		if a.Counter == "pc-asm-1" {
			t.Fatalf("pc-asm-1 reported, yet %+v", a)
		}
	}
}

func TestRestartDoesNotMakeEveryCounterStale(t *testing.T) {
	// History ends an hour before the start: silence counts from the start.
	h := newHarness(t, nil)
	if err := h.e.Prime([]Observation{reading("pc-asm-1", engT0.Add(-time.Hour), 1000, 0)}); err != nil {
		t.Fatal(err)
	}
	// 20 s: within every gap of the configuration (dp-asm's is 3 × 10 s).
	h.clk.Advance(20 * time.Second)
	h.tick()
	if n := len(h.open(KindStale)); n != 0 {
		t.Fatalf("%d stale alarms 20 s after the start: %+v", n, h.open(KindStale))
	}
}

func TestRestoreRefusesBadRecords(t *testing.T) {
	cases := []struct {
		name   string
		alarms []Alarm
	}{
		{"not an engine id", []Alarm{{ID: "x", State: StateActive}}},
		{"cleared is not open", []Alarm{{ID: "assembly:asm-1:0.5:excursion:20260302T100000Z", State: StateCleared}}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			j := fixedOpenJournal(c.alarms)
			e, err := NewEngine(engineConfig(), j, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := e.Restore(context.Background()); !errors.Is(err, ErrRestore) {
				t.Fatalf("err %v, want ErrRestore", err)
			}
			if n := len(e.Alarms(true)); n != 0 {
				t.Errorf("%d alarms restored from a bad journal", n)
			}
		})
	}
}

// fixedOpenJournal is a memJournal whose open alarms are given.
type fixedOpen struct {
	*memJournal
	open []Alarm
}

func (f fixedOpen) OpenAlarms(context.Context) ([]Alarm, error) { return f.open, nil }

func fixedOpenJournal(as []Alarm) Journal { return fixedOpen{newMemJournal(), as} }

func TestOrphanAlarmClearsOnAck(t *testing.T) {
	// An alarm of a counter that is no longer configured.
	orphan := Alarm{ID: "assembly:pc-asm-9:stale:20260302T090000Z", Zone: "assembly", Kind: KindStale, Level: LevelAlert,
		State: StateActive, Counter: "pc-asm-9", Since: engT0.Add(-time.Hour)}
	e, err := NewEngine(engineConfig(), fixedOpenJournal([]Alarm{orphan}), func() time.Time { return engT0 })
	if err != nil {
		t.Fatal(err)
	}
	if err := e.Restore(context.Background()); err != nil {
		t.Fatal(err)
	}
	a, err := e.Ack(context.Background(), orphan.ID, "r.okafor", "counter removed")
	if err != nil || a.State != StateCleared {
		t.Fatalf("ack of an orphan: %+v, %v", a, err)
	}
}

// TestRestoreKeepsTwoOpenForOneCondition: a journal left by a daemon that
// died between two transitions may hold two open alarms of one condition.
// Refusing it would leave the site unmonitored, so both are restored and
// shown; the newer owns the condition and the older only waits for its
// acknowledgement.
func TestRestoreKeepsTwoOpenForOneCondition(t *testing.T) {
	older := "assembly:asm-1:0.5:excursion:20260302T100000Z"
	newer := "assembly:asm-1:0.5:excursion:20260302T110000Z"
	j := fixedOpenJournal([]Alarm{{ID: newer, State: StateActive}, {ID: older, State: StateActive}})
	e, err := NewEngine(engineConfig(), j, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := e.Restore(context.Background()); err != nil {
		t.Fatalf("restore: %v", err)
	}
	if n := len(e.Alarms(false)); n != 2 {
		t.Fatalf("%d open alarms restored, want both", n)
	}
	a, _ := e.Alarm(older)
	b, _ := e.Alarm(newer)
	if !a.ConditionGone || b.ConditionGone {
		t.Errorf("older condition gone %v, newer %v: want the newer to own the condition", a.ConditionGone, b.ConditionGone)
	}
}
