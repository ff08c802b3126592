package alerts

import (
	"fmt"
	"math"
	"strconv"
	"time"

	"cleanmon/classify"
)

// The rules on particle readings, per sampling location and zone size.
//
//   - excursion: one sample above the alert level (alert) or the action
//     level (action) in force for the zone's operating state. Defaults are
//     those of the zone state: action level = the class or grade limit, no
//     alert level. One alarm per location and size, escalating in place.
//   - consecutive: Consecutive samples in a row above the alert level raise
//     an action alarm; a sample at or below it ends the run. A size without
//     an alert level has no such rule.
//   - out-of-class: the location's rolling mean over the zone's window above
//     the class or grade limit, judged on the very ZoneView the zone state
//     is shown from (only while the location is fresh, as there), so the
//     alarm and the zone's out-of-class state agree. A location that falls
//     stale leaves its alarm as it is: its stale alarm tells the rest.
//   - trend: TrendRun samples in a row, each higher than the one before,
//     ending above a line between the location's baseline (see control.go)
//     and the lowest level, raise an alert before anything exceeds a level.
//
// Readings whose status is fault, or with no volume, are not trusted and
// are judged by the instrument rule only. A reading not newer than its
// counter's newest is history and is not judged again.

const unitPerM3 = "particles/m³"

type seriesState struct {
	last       time.Time // newest sample judged
	run        int       // samples in a row above the alert level
	runStart   time.Time
	trendRun   int // samples in a row each higher than the one before
	trendStart time.Time
	// hist holds the latest TrendBaseline+TrendRun−1 trusted samples. No
	// element inside any state's window is ever written again (push only
	// appends past the end, and moves the start), so a copy of the state is
	// an undo, without copying the history on every sample.
	hist []histPoint
	// recent are the latest particle counts of the count rule.
	recent []countPoint
}

type histPoint struct{ count, volL float64 }

func (s seriesState) push(p histPoint, max int) []histPoint {
	// Appending writes past this state's window only; when the backing
	// array is full, append moves the window to a new one (amortised).
	h := append(s.hist, p)
	if len(h) > max {
		h = h[len(h)-max:]
	}
	return h
}

func seriesKey(zone, loc string, size float64) string {
	return zone + ":" + loc + ":" + classify.FormatSize(size)
}

// valueAt is an observation's concentration at a zone size.
func valueAt(o *Observation, size float64) (float64, bool) {
	for j, s := range o.Sizes {
		if math.Abs(s-size) < 1e-9 && j < len(o.PerM3) {
			return o.PerM3[j], true
		}
	}
	return 0, false
}

// judgeReading runs every rule on one reading of a known counter, against
// the limits of the operating state in force when it was taken. A reading
// older than its counter's newest (a counter clock running fast, a
// gateway replaying its buffer) is judged by the excursion rule alone: if
// it exceeds a level, its excursion is raised as an episode of its own
// (or raises the peak of the open one).
func (e *Engine) judgeReading(t *txn, c *counterSpec, r *CounterReading) {
	st := e.counterSt[c.ID]
	late := !r.Time.After(st.last)
	if !late {
		st = instrState{last: r.Time, live: true, flow: r.FlowLPM, why: r.untrustedReason()}
		setUndo(t, e.counterSt, c.ID, st)
		e.judgeStale(t, c.Zone, "", c.ID, st, c.stale)
		e.judgeInstrument(t, c, r)
	}
	if r.untrustedReason() != "" {
		return
	}
	limits, sa, ok := e.tracker.LimitsAt(c.Zone, r.Time)
	if !ok || !sa.Judged {
		return // maintenance: kept, not judged
	}
	z := e.zones[c.Zone]
	counting := e.countRuleApplies(z, sa.Limits)
	keys := c.seriesKeys(z.sizes)
	for i, size := range z.sizes {
		val, ok := valueAt(&r.Observation, size)
		if !ok || i >= len(limits) {
			continue
		}
		k := keys[i]
		s := e.series[k]
		sz := size
		tmpl := Alarm{Zone: c.Zone, Location: c.Location, Counter: c.ID, SizeUM: &sz, Value: val, Unit: unitPerM3}
		where := func() string { return fmt.Sprintf("%s µm at %s (%s)", classify.FormatSize(size), c.Location, c.ID) }
		sl := limits[i]
		countRule := counting && size >= 5
		if !r.Time.After(s.last) {
			e.judgeLateExcursion(t, k, tmpl, sl, where, r.Time, countRule)
			continue
		}
		s.last = r.Time
		e.judgeExcursion(t, k, tmpl, sl, where, r.Time, countRule)
		if countRule {
			s = e.judgeCounts(t, k, s, tmpl, where, r)
		} else if sl.Alert != nil {
			s = e.judgeConsecutive(t, k, s, tmpl, *sl.Alert, where, r.Time)
		}
		s = e.judgeTrend(t, k, s, tmpl, where, r, val, lowestLevel(sl))
		setUndo(t, e.series, k, s)
	}
}

// judgeConsecutive is the run rule above the alert level.
func (e *Engine) judgeConsecutive(t *txn, k string, s seriesState, tmpl Alarm, alert float64, where func() string, at time.Time) seriesState {
	val := tmpl.Value
	if val > alert {
		if s.run == 0 {
			s.runStart = at
		}
		s.run++
	} else {
		s.run = 0
	}
	a := tmpl
	a.Kind, a.Threshold = KindConsecutive, alert
	run := s.run
	msg := func() string {
		if run >= e.nConsec {
			return fmt.Sprintf("%s: %d samples in a row above the alert level %s /m³ (latest %s /m³)", where(), run, num(alert), num(val))
		}
		return fmt.Sprintf("%s: %s /m³, the run above the alert level %s /m³ is broken", where(), num(val), num(alert))
	}
	t.judge(condition{key: k + ":" + KindConsecutive, present: s.run >= e.nConsec, level: LevelAction, tmpl: a, since: s.runStart, at: at, msg: msg})
	return s
}

// judgeLateExcursion judges a reading older than the newest of its
// series. Over a level, it raises its own excursion when none is open
// (which then ends at once, as a newer reading already came: a latched
// action waits for its acknowledgement), or raises the open one's peak.
func (e *Engine) judgeLateExcursion(t *txn, k string, tmpl Alarm, sl SizeLimit, where func() string, at time.Time, countRule bool) {
	key := k + ":" + KindExcursion
	_, wasOpen := t.e.conds[key]
	if !e.judgeExcursion(t, k, tmpl, sl, where, at, countRule) || wasOpen {
		return
	}
	back := tmpl
	back.Kind = KindExcursion
	t.judge(condition{key: key, present: false, tmpl: back, since: at, at: at, msg: func() string {
		return fmt.Sprintf("%s: %s /m³ at %s arrived late; later readings are back within the levels", where(), num(tmpl.Value), at.UTC().Format(time.RFC3339))
	}})
}
func (e *Engine) judgeExcursion(t *txn, k string, tmpl Alarm, sl SizeLimit, where func() string, at time.Time, countRule bool) bool {
	if sl.Alert == nil && sl.Action == nil {
		return false
	}
	val := tmpl.Value
	a := tmpl
	a.Kind = KindExcursion
	level, how := "", ""
	switch {
	case sl.Action != nil && val > *sl.Action:
		level, a.Threshold, how = LevelAction, *sl.Action, "is above the action level"
	case sl.Alert != nil && val > *sl.Alert:
		level, a.Threshold, how = LevelAlert, *sl.Alert, "is above the alert level"
	default:
		low := sl.Action
		if sl.Alert != nil {
			low = sl.Alert
		}
		a.Threshold, how = *low, "is back at or below"
	}
	if countRule && level == LevelAction {
		// A single count at ≥5 µm in grade A (or B at rest) may be a
		// false count: the count rule decides on action.
		level, how = LevelAlert, how+" (a single sample: the count rule decides on action)"
	}
	threshold := a.Threshold
	msg := func() string { return fmt.Sprintf("%s: %s /m³ %s %s /m³", where(), num(val), how, num(threshold)) }
	t.judge(condition{key: k + ":" + KindExcursion, present: level != "", level: level, tmpl: a, since: at, at: at, msg: msg})
	return level != ""
}

// judgeTrend is the trend rule: TrendRun samples in a row each higher
// than the one before (a steady rise, as the control-chart trend rule
// reads it: common practice, no source), the last of them above a line,
// raise a trend alert; it stays while the samples stay above the line.
// The line is the baseline's centre plus twice its spread, and at least
// halfway from the centre to the lowest level of the size: a trend warns
// of a rise toward a level, not of the background's own wandering. A background that wanders
// (cleanroom counts are strongly correlated from one minute to the next)
// makes long runs on one side of a centre line every hour or so, but
// seldom a steady rise; a drift toward a level does. The baseline is the
// TrendBaseline samples before the rise. The sample then joins the
// history.
func (e *Engine) judgeTrend(t *txn, k string, s seriesState, tmpl Alarm, where func() string, r *CounterReading, val, level float64) seriesState {
	need := e.trendBase + e.trendRun - 1
	count := val * r.VolumeL / 1000
	if n := len(s.hist); n > 0 {
		prev := s.hist[n-1]
		// Higher by more than rounding: a steady concentration is no rise.
		if count/r.VolumeL > prev.count/prev.volL*(1+1e-9)+1e-12 {
			if s.trendRun == 0 {
				s.trendStart = r.Time
			}
			s.trendRun++
		} else {
			s.trendRun = 0
		}
	}
	if len(s.hist) == need {
		base := s.hist[:e.trendBase]
		var sumC, sumV float64
		for _, p := range base {
			sumC += p.count
			sumV += p.volL
		}
		centre := sumC / sumV * 1000
		// The line a rise must cross: the centre plus twice the spread of
		// the baseline's concentrations.
		var ss float64
		for _, p := range base {
			d := p.count/p.volL*1000 - centre
			ss += d * d
		}
		line := centre + 2*math.Sqrt(ss/float64(len(base)))
		if level > centre {
			line = max(line, centre+(level-centre)/2)
		}
		above := val > line*(1+1e-9)+1e-9
		_, open := t.e.conds[k+":"+KindTrend]
		present := above && (s.trendRun >= e.trendRun || open)
		a := tmpl
		a.Kind, a.Threshold = KindTrend, line
		run := s.trendRun
		msg := func() string {
			if present {
				counts := make([]float64, len(base))
				for i, p := range base {
					counts[i] = p.count
				}
				cl := Baseline(counts)
				return fmt.Sprintf("%s: rising for %d samples in a row to %s /m³, above %s /m³ (centre line %s /m³ of the %d samples before: %s counts per sample, UCL %s)", where(), run, num(val), num(line), num(centre), cl.Samples, num(cl.Centre), num(cl.UCL))
			}
			return fmt.Sprintf("%s: %s /m³ is at or below the centre line %s /m³", where(), num(val), num(centre))
		}
		t.judge(condition{key: k + ":" + KindTrend, present: present, level: LevelAlert, tmpl: a, since: s.trendStart, at: r.Time, msg: msg})
	}
	s.hist = s.push(histPoint{count: count, volL: r.VolumeL}, need)
	return s
}

// judgeOutOfClass judges every fresh location of a zone view.
func (e *Engine) judgeOutOfClass(t *txn, v ZoneView) {
	if v.OperatingState == Maintenance {
		return
	}
	for _, lv := range v.Locations {
		if !lv.Fresh {
			continue
		}
		for i, size := range v.Sizes {
			if i >= len(v.Limits) || v.Limits[i].Limit == nil {
				continue
			}
			limit := *v.Limits[i].Limit
			mean, ok := lv.MeanPerM3[classify.FormatSize(size)]
			if !ok {
				continue
			}
			sz := size
			a := Alarm{Zone: v.ID, Kind: KindOutOfClass, Location: lv.ID, Counter: lv.Counter, SizeUM: &sz,
				Value: mean, Threshold: limit, Unit: unitPerM3}
			rel := "above"
			if mean <= limit {
				rel = "back at or below"
			}
			a.Message = fmt.Sprintf("%s µm at %s: mean %s /m³ of %d samples over %s is %s the %s limit %s /m³",
				classify.FormatSize(size), lv.ID, num(mean), lv.Samples, v.Window, rel, targetName(v), num(limit))
			t.judge(condition{key: seriesKey(v.ID, lv.ID, size) + ":" + KindOutOfClass, present: mean > limit,
				level: LevelAction, tmpl: a, since: lv.Time, at: lv.Time})
		}
	}
}

func targetName(v ZoneView) string {
	switch {
	case v.Class != nil:
		return "ISO class " + classify.FormatClass(*v.Class)
	case v.Grade != "":
		return "grade " + v.Grade + " " + v.LimitsState
	}
	return "zone"
}

// num writes a measurement for a message: whole numbers above 100, three
// significant figures below.
func num(v float64) string {
	if math.Abs(v) >= 100 {
		return strconv.FormatFloat(math.Round(v), 'f', -1, 64)
	}
	return strconv.FormatFloat(v, 'g', 3, 64)
}

// lowestLevel is the lowest level of a size (alert, else action, else the
// limit), 0 when it has none.
func lowestLevel(sl SizeLimit) float64 {
	for _, l := range []*float64{sl.Alert, sl.Action, sl.Limit} {
		if l != nil {
			return *l
		}
	}
	return 0
}
