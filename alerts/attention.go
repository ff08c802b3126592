package alerts

import (
	"fmt"
	"time"

	"cleanmon/classify"
)

// Attention says whether anything about a zone needs a person, and how
// urgently (the zone's headline).
type Attention string

// Attention levels, from least to most urgent. Unknown ranks above alert
// and below action: a zone that cannot be judged may be anything, so it
// is never shown as fine, but an open action calls for someone first.
const (
	AttentionNone       Attention = "none"
	AttentionAlert      Attention = "alert"
	AttentionUnknown    Attention = "unknown"
	AttentionAction     Attention = "action"
	AttentionOutOfClass Attention = "out-of-class"
)

// AttentionLevels are every attention level, least urgent first: one
// cleanmon_zone_attention series each.
var AttentionLevels = []Attention{AttentionNone, AttentionAlert, AttentionUnknown, AttentionAction, AttentionOutOfClass}

func (a Attention) rank() int {
	for i, l := range AttentionLevels {
		if l == a {
			return i
		}
	}
	return len(AttentionLevels) // not a level: worse than any, never none
}

type reason struct {
	level Attention
	text  string
}

// attention is the worst of a zone's particle state, its open alarms, the
// DP sensors protecting it and its counters, with every reason that is
// not none.
func attention(v ZoneView, alarms []Alarm, sensors []SensorView, instr []InstrumentView) (Attention, []string) {
	var rs []reason
	add := func(l Attention, format string, a ...any) {
		rs = append(rs, reason{l, fmt.Sprintf(format, a...)})
	}
	unclassified := v.Class == nil && v.Grade == ""
	if !(unclassified && len(v.Locations) == 0) {
		particleReasons(v, add)
	}
	for _, a := range alarms {
		l := Attention(a.Level)
		if a.Kind == KindOutOfClass {
			l = AttentionOutOfClass
		}
		state := a.State
		if a.ConditionGone {
			state += ", condition gone, waiting for its acknowledgement"
		}
		add(l, "%s %s alarm (%s): %s", a.Level, a.Kind, state, a.Message)
	}
	for _, s := range sensors {
		switch s.Status {
		case SensorReversed:
			add(AttentionAction, "DP %s (%s → %s) reversed: %s Pa", s.Sensor, s.High, s.Low, num(s.Pa))
		case SensorLow:
			add(AttentionAlert, "DP %s (%s → %s) low: %s Pa below the minimum %s Pa", s.Sensor, s.High, s.Low, num(s.Pa), num(s.MinPa))
		case SensorSilent:
			add(AttentionUnknown, "DP %s (%s → %s) silent: %s", s.Sensor, s.High, s.Low, lastSeen(s.Time))
		}
	}
	for _, c := range instr {
		switch c.Status {
		case InstrumentSilent:
			add(AttentionUnknown, "counter %s at %s silent: %s", c.Counter, c.Location, lastSeen(c.Time))
		case InstrumentUntrusted:
			add(AttentionUnknown, "counter %s at %s: newest reading not trusted (%s)", c.Counter, c.Location, c.Untrusted)
		}
	}
	worst := AttentionNone
	for _, r := range rs {
		if r.level.rank() > worst.rank() {
			worst = r.level
		}
	}
	return worst, sortReasons(rs)
}

// particleReasons adds the zone's particle state and why.
func particleReasons(v ZoneView, add func(Attention, string, ...any)) {
	switch v.State {
	case StatusInClass:
		return
	case StatusUnknown:
		switch {
		case v.OperatingState == Maintenance:
			add(AttentionUnknown, "in maintenance: readings are recorded, not judged")
		case len(v.Locations) == 0:
			add(AttentionUnknown, "no sampling location")
		default:
			for _, l := range v.Locations {
				if !l.Fresh {
					add(AttentionUnknown, "location %s: %s", l.ID, locationProblem(l, v.StaleAfter))
				}
			}
			if !anyLocationStale(v) {
				add(AttentionUnknown, "particle state unknown: no limit to be in at the %s state", v.LimitsState)
			}
		}
	default:
		for _, l := range v.Locations {
			if l.Fresh && l.State != StatusInClass {
				add(Attention(l.State), "location %s: mean %s (%s)", l.ID, l.State, worstSize(v, l))
			}
		}
	}
}

func anyLocationStale(v ZoneView) bool {
	for _, l := range v.Locations {
		if !l.Fresh {
			return true
		}
	}
	return false
}

func locationProblem(l LocationView, stale time.Duration) string {
	switch {
	case !l.Trusted:
		return "newest reading not trusted (" + l.Untrusted + ")"
	case l.Time.IsZero():
		return "no reading yet"
	case l.Samples == 0:
		return "no trusted reading in the window of the state in force"
	}
	return fmt.Sprintf("no trusted reading within %s (latest %s)", stale, l.Time.UTC().Format(time.RFC3339))
}

// worstSize names the sizes whose mean is above a level.
func worstSize(v ZoneView, l LocationView) string {
	out := ""
	for i, size := range v.Sizes {
		if i >= len(v.Limits) {
			break
		}
		key := classify.FormatSize(size)
		mean, ok := l.MeanPerM3[key]
		if !ok {
			continue
		}
		sl := v.Limits[i]
		var over *float64
		switch {
		case sl.Limit != nil && mean > *sl.Limit:
			over = sl.Limit
		case sl.Action != nil && mean > *sl.Action:
			over = sl.Action
		case sl.Alert != nil && mean > *sl.Alert:
			over = sl.Alert
		}
		if over != nil {
			if out != "" {
				out += "; "
			}
			out += fmt.Sprintf("%s µm: %s /m³ above %s /m³", key, num(mean), num(*over))
		}
	}
	return out
}

func lastSeen(t time.Time) string {
	if t.IsZero() {
		return "no reading yet"
	}
	return "last reading " + t.UTC().Format(time.RFC3339)
}
