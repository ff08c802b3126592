package alerts

import (
	"context"
	"time"
)

// Alarm kinds (README, "Alarms"), plus trend from the control-chart run rule.
const (
	KindExcursion        = "excursion"
	KindConsecutive      = "consecutive"
	KindOutOfClass       = "out-of-class"
	KindPressureLow      = "pressure-low"
	KindPressureReversal = "pressure-reversal"
	KindStale            = "stale"
	KindInstrument       = "instrument"
	KindTrend            = "trend"
)

// Alarm levels: alert is an early warning of drift, action calls for
// corrective action (ISO 14644-2 terms).
const (
	LevelAlert  = "alert"
	LevelAction = "action"
)

// Alarm states. An alarm moves delayed (its delay running) → active →
// acknowledged → cleared; a latched alarm whose condition has gone stays
// active until someone acknowledges it. A delayed alarm lives in memory
// only: a condition that goes before its delay ends (a door opened and
// shut) leaves no record, and is counted instead.
const (
	StateDelayed      = "delayed"
	StateActive       = "active"
	StateAcknowledged = "acknowledged"
	StateCleared      = "cleared"
)

// Alarm is one alarm condition on one subject (a zone's location and size,
// a DP sensor, a counter): the engine keeps one alarm per condition, not
// one per sample. Its JSON form is the alarm object of the API.
type Alarm struct {
	ID       string   `json:"id"`
	Zone     string   `json:"zone"`
	Kind     string   `json:"kind"`
	Level    string   `json:"level"`
	State    string   `json:"state"`
	Location string   `json:"location"`
	Counter  string   `json:"counter,omitempty"`
	Sensor   string   `json:"sensor,omitempty"`
	SizeUM   *float64 `json:"size_um"`
	// Since is when the condition was first seen (the start of the delay).
	Since       time.Time  `json:"since"`
	ActiveSince *time.Time `json:"active_since,omitempty"`
	// ConditionGone is set when the condition has cleared but the alarm is
	// latched and waits for an acknowledgement.
	ConditionGone  bool       `json:"condition_gone"`
	Latched        bool       `json:"latched"`
	AcknowledgedBy string     `json:"acknowledged_by"`
	AcknowledgedAt *time.Time `json:"acknowledged_at,omitempty"`
	Comment        string     `json:"comment"`
	ClearedAt      *time.Time `json:"cleared_at,omitempty"`
	// Value is the observation that raised or last updated the alarm and
	// Threshold what it was compared with, in the rule's unit (particles/m³,
	// Pa, L/min, seconds of silence).
	Value     float64 `json:"value"`
	Threshold float64 `json:"threshold"`
	Unit      string  `json:"unit"`
	// Peak is the worst value seen during the episode (the highest
	// concentration, the lowest DP, the longest silence) and PeakTime when
	// it was seen.
	Peak     float64   `json:"peak"`
	PeakTime time.Time `json:"peak_time"`
	Message  string    `json:"message"`
	// Updated is the time of the last transition.
	Updated time.Time `json:"updated"`
}

// Transition is one change of an alarm's state. It is journaled durably
// before anything announces it, and each notifier delivers it once.
type Transition struct {
	// Key is unique per transition (alarm ID, sequence within the alarm,
	// target state): receivers use it to drop repeated deliveries.
	Key     string    `json:"key"`
	AlarmID string    `json:"alarm_id"`
	Time    time.Time `json:"time"`
	From    string    `json:"from"`
	To      string    `json:"to"`
	By      string    `json:"by,omitempty"`
	Comment string    `json:"comment,omitempty"`
	// Alarm is the alarm as it is after the transition.
	Alarm Alarm `json:"alarm"`
}

// Journal is what the alarm engine needs from storage. RecordTransitions
// must be durable, and atomic with the outbox entries it creates (one per
// named notifier per transition), before it returns: a transition that
// was announced is always in the record, and one in the record is always
// delivered.
type Journal interface {
	RecordTransitions(ctx context.Context, ts []Transition, notifiers []string) error
	// OpenAlarms returns the latest form of every alarm not yet cleared,
	// to restore the engine after a restart.
	OpenAlarms(ctx context.Context) ([]Alarm, error)
}

// Delivery is one pending notification of one transition to one
// notifier, as kept in the persistent outbox.
type Delivery struct {
	ID          uint64
	Notifier    string
	Transition  Transition
	Attempts    int
	NextAttempt time.Time
	LastError   string
}

// Outbox is what the dispatcher needs from storage.
type Outbox interface {
	// Due returns up to limit deliveries for the notifier whose next
	// attempt is at or before now, oldest first.
	Due(ctx context.Context, notifier string, now time.Time, limit int) ([]Delivery, error)
	// Done removes a delivered entry.
	Done(ctx context.Context, id uint64) error
	// Retry records a failed attempt and when to try again.
	Retry(ctx context.Context, id uint64, attempts int, next time.Time, lastErr string) error
	// Pending counts the notifier's entries, due or not, without reading
	// them: the queue length /readyz and the metrics show.
	Pending(ctx context.Context, notifier string) (int, error)
}

// ValueText is the alarm's value as a person reads it, with its unit and
// what it was compared with: "-3.5 Pa (threshold 8 Pa)", "420000
// particles/m³ (threshold 250000 particles/m³)". Empty when the alarm has
// no measured value.
func (a Alarm) ValueText() string {
	if a.Unit == "" {
		return ""
	}
	v := num(a.Value) + " " + a.Unit + " (threshold " + num(a.Threshold) + " " + a.Unit + ")"
	if !a.PeakTime.IsZero() && a.Peak != a.Value {
		v += "; peak " + num(a.Peak) + " " + a.Unit + " at " + a.PeakTime.UTC().Format(time.RFC3339)
	}
	return v
}
