package alerts

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"
)

// The alarm lifecycle.
//
// One condition (a kind on one subject: a location and size, a counter, a
// sensor) has at most one open alarm whose condition is present. Its ID is
// the condition key and the time the episode began, e.g.
// "assembly:asm-1:0.5:excursion:20260302T100000Z" or
// "assembly:dp-asm:pressure-low:20260302T101500Z"; ':' separates the parts
// so that an ID is a single segment of an API path. Each return of the
// condition after it went is a new episode with a new ID, also while the
// alarm of the earlier episode waits for its acknowledgement.
//
//	""      → delayed       condition seen, its delay running: in memory
//	                        only, never journaled
//	""      → active        condition seen, no delay, or a delayed one whose
//	                        delay ran out with the condition still there
//	delayed → (nothing)     the condition went before the delay ran out: no
//	                        record; a pressure-low dip is counted as a door
//	                        opening of its sensor
//	active  → active        escalated from alert to action; or, latched, the
//	                        condition went (quiet): the alarm leaves its
//	                        condition and waits for its acknowledgement
//	active  → acknowledged  someone acknowledged it (an action alarm with a
//	                        comment)
//	acknowledged → active   escalated after the acknowledgement: the new
//	                        urgency needs its own acknowledgement
//	active, acknowledged → cleared
//	                        the condition went (a latched alarm once it is
//	                        acknowledged too), or maintenance suspended its
//	                        rule (not latched)
//
// A level never falls within an episode: an alarm that reached action stays
// action until it clears, and it clears only when the observation is back
// at or below the lowest level of its rule. Every alarm keeps the worst
// value of its episode (Peak, PeakTime). Quiet transitions are journaled
// with no notifier.

// txn gathers the changes of one engine call. The engine is changed in
// place under its lock, each change with its undo, so that a journal
// failure puts everything back as it was.
type txn struct {
	e    *Engine
	now  time.Time
	undo []func()
	ts   []Transition
	loud []bool
}

func (e *Engine) begin() *txn { return &txn{e: e, now: e.now()} }

func setUndo[K comparable, V any](t *txn, m map[K]V, k K, v V) {
	old, had := m[k]
	t.undo = append(t.undo, func() {
		if had {
			m[k] = old
		} else {
			delete(m, k)
		}
	})
	m[k] = v
}

func delUndo[K comparable, V any](t *txn, m map[K]V, k K) {
	old, had := m[k]
	if !had {
		return
	}
	t.undo = append(t.undo, func() { m[k] = old })
	delete(m, k)
}

// commit journals the transitions: the quiet ones first, with no
// notifier, then the announced ones. A failure undoes every change.
func (t *txn) commit(ctx context.Context) error {
	if len(t.ts) == 0 {
		return nil
	}
	var quiet, loud []Transition
	for i, tr := range t.ts {
		if t.loud[i] {
			loud = append(loud, tr)
		} else {
			quiet = append(quiet, tr)
		}
	}
	if len(quiet) > 0 {
		if err := t.e.j.RecordTransitions(ctx, quiet, nil); err != nil {
			t.rollback()
			return fmt.Errorf("%w: %w", ErrJournal, err)
		}
	}
	if len(loud) > 0 {
		if err := t.e.j.RecordTransitions(ctx, loud, t.e.notifiers); err != nil {
			t.rollback()
			return fmt.Errorf("%w: %w", ErrJournal, err)
		}
	}
	return nil
}

func (t *txn) rollback() {
	for i := len(t.undo) - 1; i >= 0; i-- {
		t.undo[i]()
	}
	t.undo, t.ts, t.loud = nil, nil, nil
}

// nextStamp numbers transitions: nanoseconds of the clock, but always
// increasing, so that keys stay unique across restarts and with a clock
// that stands still.
func (t *txn) nextStamp() int64 {
	e := t.e
	old := e.stamp
	s := max(old+1, t.now.UnixNano())
	t.undo = append(t.undo, func() { e.stamp = old })
	e.stamp = s
	return s
}

// record puts an alarm's new form in place and adds its transition.
func (t *txn) record(a Alarm, from, by, comment string, loud bool) Alarm {
	e := t.e
	key, _ := conditionKey(a.ID)
	a.Updated = t.now
	tr := Transition{
		Key:     a.ID + "/" + strconv.FormatInt(t.nextStamp(), 10) + "/" + a.State,
		AlarmID: a.ID, Time: t.now, From: from, To: a.State, By: by, Comment: comment,
		Alarm: cloneAlarm(a),
	}
	if a.State == StateCleared {
		delUndo(t, e.alarms, a.ID)
		if e.conds[key] == a.ID {
			delUndo(t, e.conds, key)
		}
		old := e.cleared
		t.undo = append(t.undo, func() { e.cleared = old })
		e.cleared = append(e.cleared, a)
		if n := len(e.cleared); n > ClearedKept {
			e.cleared = e.cleared[n-ClearedKept:]
		}
	} else {
		setUndo(t, e.alarms, a.ID, a)
		if !a.ConditionGone {
			setUndo(t, e.conds, key, a.ID)
		}
	}
	t.ts = append(t.ts, tr)
	t.loud = append(t.loud, loud)
	return a
}

// clear ends an announced alarm.
func (t *txn) clear(a Alarm, comment string) Alarm {
	from := a.State
	a.State = StateCleared
	at := t.now
	a.ClearedAt = &at
	return t.record(a, from, "", comment, true)
}

// newID names a new episode of a condition.
func (t *txn) newID(key string, since time.Time) string {
	id := key + ":" + since.UTC().Format("20060102T150405Z")
	if last := t.e.lastID[key]; last == id || strings.HasPrefix(last, id+"-") {
		n := 2
		if k, err := strconv.Atoi(strings.TrimPrefix(last, id+"-")); err == nil {
			n = k + 1
		}
		id = fmt.Sprintf("%s-%d", id, n)
	}
	setUndo(t, t.e.lastID, key, id)
	return id
}

// conditionKey is an alarm ID without its episode part.
func conditionKey(id string) (string, bool) {
	i := strings.LastIndexByte(id, ':')
	if i <= 0 || i == len(id)-1 {
		return "", false
	}
	return id[:i], true
}

// condition is one rule's judgement of one subject.
type condition struct {
	key     string
	present bool
	level   string
	// tmpl carries the subject (Zone, Kind, Location, Counter, Sensor,
	// SizeUM) and the measurement (Value, Threshold, Unit, Message).
	tmpl Alarm
	// since is when the condition began, at the time of the observation
	// judged.
	since, at time.Time
	// delay, when positive, keeps a new alarm delayed until the condition
	// has lasted that long.
	delay time.Duration
	// msg, when set, writes tmpl.Message. It runs only when the condition
	// touches an alarm: most readings raise nothing and clear nothing, and
	// formatting a message for each of them was most of the rules' cost.
	msg func() string
}

func levelRank(l string) int {
	switch l {
	case LevelAlert:
		return 1
	case LevelAction:
		return 2
	}
	return 0
}

func (e *Engine) latches(kind, level string) bool {
	if v, ok := e.latch[kind]; ok {
		return v
	}
	return level == LevelAction
}

// suppressible kinds raise nothing while their zone is in maintenance.
func suppressible(kind string) bool {
	switch kind {
	case KindExcursion, KindConsecutive, KindOutOfClass, KindTrend:
		return true
	}
	return false
}

func measure(a *Alarm, c condition) {
	a.Value, a.Threshold, a.Unit, a.Message = c.tmpl.Value, c.tmpl.Threshold, c.tmpl.Unit, c.tmpl.Message
	if c.tmpl.Counter != "" {
		a.Counter = c.tmpl.Counter
	}
}

// judge applies one condition to the lifecycle of its alarm.
func (t *txn) judge(c condition) {
	e := t.e
	if c.since.IsZero() {
		c.since = c.at
	}
	id, open := e.conds[c.key]
	var a Alarm
	if open {
		a = e.alarms[id]
	}
	if c.msg != nil && (c.present || open) {
		c.tmpl.Message = c.msg()
	}
	if !c.present {
		if e.suppressed[c.key] {
			delUndo(t, e.suppressed, c.key)
		}
		if open {
			t.conditionGone(a, c)
		}
		return
	}
	z := e.zones[c.tmpl.Zone]
	suppressed := z != nil && suppressible(c.tmpl.Kind) && e.maintenanceAt(z.id, c.at)
	if !open {
		t.open(c, suppressed)
		return
	}
	if suppressed {
		// An alarm raised before maintenance (a latched one) waits for its
		// acknowledgement; its rule is suspended meanwhile.
		return
	}
	t.peak(&a, c)
	switch a.State {
	case StateDelayed:
		c.since = a.Since
		if t.elapsed(c) < c.delay {
			t.hold(a)
			return
		}
		a.State = StateActive
		act := a.Since.Add(c.delay)
		a.ActiveSince = &act
		if levelRank(c.level) > levelRank(a.Level) {
			a.Level = c.level
		}
		a.Latched = a.Latched || e.latches(a.Kind, a.Level)
		measure(&a, c)
		t.record(a, "", "", fmt.Sprintf("condition lasted longer than %s", c.delay), true)
	case StateActive, StateAcknowledged:
		if levelRank(c.level) <= levelRank(a.Level) {
			t.hold(a)
			return
		}
		from := a.State
		a.Level = c.level
		a.Latched = a.Latched || e.latches(a.Kind, a.Level)
		measure(&a, c)
		comment := "escalated to " + c.level
		if a.State == StateAcknowledged {
			a.State = StateActive
			a.AcknowledgedBy, a.AcknowledgedAt, a.Comment = "", nil, ""
			comment += ": the new level needs its own acknowledgement"
		}
		t.record(a, from, "", comment, true)
	}
}

// conditionGone ends the episode of an open alarm whose condition went.
func (t *txn) conditionGone(a Alarm, c condition) {
	e := t.e
	switch {
	case a.State == StateDelayed:
		// Gone before its delay ran out: no record. A DP dip shorter
		// than its delay is a door opened and shut.
		delUndo(t, e.alarms, a.ID)
		delUndo(t, e.conds, c.key)
		if a.Kind == KindPressureLow && a.Sensor != "" {
			setUndo(t, e.doors, a.Sensor, e.doors[a.Sensor]+1)
		}
	case a.Latched && a.State == StateActive:
		// The alarm waits for its acknowledgement, detached from its
		// condition: the next excursion is an alarm of its own.
		a.ConditionGone = true
		measure(&a, c)
		t.record(a, a.State, "", "condition gone; latched until acknowledged", false)
		delUndo(t, e.conds, c.key)
	default:
		measure(&a, c)
		t.clear(a, "condition gone")
	}
}

// open starts a new episode of a condition.
func (t *txn) open(c condition, suppressed bool) {
	e := t.e
	n := c.tmpl
	n.Level, n.Since = c.level, c.since
	n.Latched = e.latches(n.Kind, n.Level)
	n.Peak, n.PeakTime = n.Value, c.at
	if suppressed && e.suppressed[c.key] {
		return
	}
	n.ID = t.newID(c.key, c.since)
	switch {
	case suppressed:
		setUndo(t, e.suppressed, c.key, true)
		n.State = StateCleared
		at := t.now
		n.ClearedAt = &at
		note := fmt.Sprintf("suppressed: zone %s in maintenance", n.Zone)
		n.Message = note + ": " + n.Message
		t.record(n, "", "", note, false)
	case c.delay > 0 && t.elapsed(c) < c.delay:
		n.State = StateDelayed
		t.hold(n)
	default:
		n.State = StateActive
		act := c.since
		if c.delay > 0 {
			act = c.since.Add(c.delay)
		}
		n.ActiveSince = &act
		t.record(n, "", "", "", true)
	}
}

// hold keeps an alarm's new form in memory without a transition: a
// delayed alarm, or the peak of an open one.
func (t *txn) hold(a Alarm) {
	key, _ := conditionKey(a.ID)
	setUndo(t, t.e.alarms, a.ID, a)
	setUndo(t, t.e.conds, key, a.ID)
}

// peak keeps the worst value of the episode.
func (t *txn) peak(a *Alarm, c condition) {
	if a.PeakTime.IsZero() || worse(a.Kind, a.Unit, c.tmpl.Value, a.Peak, a.Threshold) {
		a.Peak, a.PeakTime = c.tmpl.Value, c.at
	}
}

// worse says whether v is a worse value than peak for an alarm of the
// kind: a lower DP, a flow farther from its nominal, else a higher value.
func worse(kind, unit string, v, peak, threshold float64) bool {
	switch {
	case kind == KindPressureLow || kind == KindPressureReversal:
		return v < peak
	case kind == KindEnvironment:
		return math.Abs(v-threshold) > math.Abs(peak-threshold)
	case unit == "L/min":
		return math.Abs(v-threshold) > math.Abs(peak-threshold)
	}
	return v > peak
}

// elapsed is how long the condition has lasted by the instrument's own
// clock: from its first observation to the newest one. The wall clock is
// not used: readings that arrive late (a gateway replaying its buffer
// after an outage, the demo's backfill) would otherwise turn every
// recovered door dip into an alarm before its recovering sample is read.
// A sensor that falls silent while low is caught by the stale rule.
func (t *txn) elapsed(c condition) time.Duration {
	return c.at.Sub(c.since)
}

// Limits on an acknowledgement's text, so that a client cannot fill the
// journal.
const (
	maxAckBy      = 200
	maxAckComment = 2000
)

// Ack acknowledges an open alarm: by (required) is who, comment why or
// what was done. A latched alarm whose condition has gone, and an alarm
// whose subject is no longer configured, is cleared by it. It returns the
// alarm as it is afterwards.
func (e *Engine) Ack(ctx context.Context, id, by, comment string) (Alarm, error) {
	by = strings.TrimSpace(by)
	switch {
	case by == "":
		return Alarm{}, fmt.Errorf("%w: by: say who acknowledges (it is kept for the audit trail)", ErrAck)
	case utf8.RuneCountInString(by) > maxAckBy:
		return Alarm{}, fmt.Errorf("%w: by: longer than %d characters", ErrAck, maxAckBy)
	case utf8.RuneCountInString(comment) > maxAckComment:
		return Alarm{}, fmt.Errorf("%w: comment: longer than %d characters", ErrAck, maxAckComment)
	case !utf8.ValidString(by) || !utf8.ValidString(comment):
		return Alarm{}, fmt.Errorf("%w: by or comment is not valid UTF-8", ErrAck)
	}
	e.mu.Lock()
	a, ok := e.alarms[id]
	if !ok {
		defer e.mu.Unlock()
		for _, c := range e.cleared {
			if c.ID == id {
				return cloneAlarm(c), fmt.Errorf("%w: %s", ErrAlarmCleared, id)
			}
		}
		return Alarm{}, fmt.Errorf("%w: %s", ErrNoAlarm, id)
	}
	switch {
	case a.State == StateDelayed:
		e.mu.Unlock()
		return cloneAlarm(a), fmt.Errorf("%w: %s", ErrAlarmPending, id)
	case a.State == StateAcknowledged:
		e.mu.Unlock()
		return cloneAlarm(a), fmt.Errorf("%w: %s by %s", ErrAlreadyAcked, id, a.AcknowledgedBy)
	case a.Level == LevelAction && strings.TrimSpace(comment) == "":
		e.mu.Unlock()
		return cloneAlarm(a), fmt.Errorf("%w: %w: say what was found or done (%s)", ErrAck, ErrCommentRequired, id)
	}
	e.touched = true
	t := e.begin()
	from := a.State
	a.State = StateAcknowledged
	at := t.now
	a.AcknowledgedBy, a.AcknowledgedAt, a.Comment = by, &at, comment
	a = t.record(a, from, by, comment, true)
	switch {
	case a.ConditionGone:
		a = t.clear(a, "acknowledged after its condition had gone")
	case !e.known(a):
		a = t.clear(a, "acknowledged; its subject is no longer configured")
	}
	if err := t.commit(ctx); err != nil {
		e.mu.Unlock()
		return Alarm{}, err
	}
	out := cloneAlarm(a)
	e.publish(t.ts)
	return out, nil
}

// known says whether an alarm's subject is still in the configuration, so
// that its rule can still clear it.
func (e *Engine) known(a Alarm) bool {
	z, ok := e.zones[a.Zone]
	if !ok {
		return false
	}
	switch a.Kind {
	case KindExcursion, KindConsecutive, KindOutOfClass, KindTrend:
		if a.SizeUM == nil || !z.locs[a.Location] {
			return false
		}
		for _, s := range z.sizes {
			if s == *a.SizeUM {
				return true
			}
		}
		return false
	case KindPressureLow, KindPressureReversal:
		s, ok := e.sensors[a.Sensor]
		return ok && s.High == a.Zone
	case KindStale, KindInstrument:
		if a.Sensor != "" {
			s, ok := e.sensors[a.Sensor]
			return ok && s.High == a.Zone
		}
		c, ok := e.counters[a.Counter]
		return ok && c.Zone == a.Zone
	}
	return false
}

func cloneAlarm(a Alarm) Alarm {
	cp := func(t *time.Time) *time.Time {
		if t == nil {
			return nil
		}
		v := *t
		return &v
	}
	if a.SizeUM != nil {
		v := *a.SizeUM
		a.SizeUM = &v
	}
	a.ActiveSince, a.AcknowledgedAt, a.ClearedAt = cp(a.ActiveSince), cp(a.AcknowledgedAt), cp(a.ClearedAt)
	return a
}
