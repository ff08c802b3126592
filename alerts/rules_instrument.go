package alerts

import (
	"fmt"
	"math"
	"time"

	"cleanmon/classify"
)

// The rules on instruments and pressure.
//
//   - stale: no reading from a counter or sensor for more than its
//     StaleAfter, judged by the readings' own times against the clock (a
//     backlog of old readings does not make a silent counter current).
//     Silence counts from the newest reading or the engine's start,
//     whichever is later; a stale alarm restored after a restart clears
//     only when a reading arrives.
//   - instrument: a counter's reported flow more than FlowTolerance (±5 %,
//     ISO 21501-4) off its nominal flow; a reading with status fault; a
//     concentration at or beyond the counter's stated maximum (coincidence
//     loss, ISO 21501-4: such counts are flagged, not trusted); a DP above
//     the sensor's MaxPa. Each cause is its own condition.
//   - pressure-reversal: a DP below 0 across a sensor that must be
//     positive: action at once.
//   - pressure-low: a DP below MinPa, delayed for Delay, then action. A
//     shorter dip (a door opened and shut) leaves no alarm record: it is
//     counted as a door opening of its sensor.
//
// Stale and instrument alarms are alerts, but actions in a grade A or B
// zone, which EU GMP Annex 1 asks to be monitored continuously (from
// memory): there a blind counter is itself a deviation. Pressure alarms are
// actions: MinPa is the specified minimum, as the limit is for particles.

func (e *Engine) instrumentLevel(zone string) string {
	if z := e.zones[zone]; z != nil && (z.grade == "A" || z.grade == "B") {
		return LevelAction
	}
	return LevelAlert
}

// judgeStale judges the silence of a counter (counter set) or a sensor.
func (e *Engine) judgeStale(t *txn, zone, sensor, counter string, st instrState, gap time.Duration) {
	subject := counter
	if sensor != "" {
		subject = sensor
	}
	// Silence counts from the newest reading, but not from before the
	// start: a daemon that was down for an hour does not find every
	// counter stale the moment it is back.
	ref := st.last
	if ref.Before(e.start) {
		ref = e.start
	}
	silence := max(t.now.Sub(ref), 0)
	present := silence > gap
	if !present && !st.live {
		// Nothing heard since the start: a restored stale alarm stays
		// until a reading shows the instrument is back.
		return
	}
	a := Alarm{Zone: zone, Kind: KindStale, Counter: counter, Sensor: sensor,
		Value: silence.Seconds(), Threshold: gap.Seconds(), Unit: "s"}
	msg := func() string {
		switch {
		case !present:
			return fmt.Sprintf("%s reports again (last reading %s)", subject, st.last.UTC().Format(time.RFC3339))
		case !st.last.IsZero():
			return fmt.Sprintf("no reading from %s for %s (allowed %s); last at %s", subject, silence.Round(time.Second), gap, st.last.UTC().Format(time.RFC3339))
		}
		return fmt.Sprintf("no reading from %s since monitoring started %s ago (allowed %s)", subject, silence.Round(time.Second), gap)
	}
	t.judge(condition{key: zone + ":" + subject + ":" + KindStale, present: present, level: e.instrumentLevel(zone),
		tmpl: a, since: ref.Add(gap), at: t.now, msg: msg})
}

// judgeInstrument judges the causes of an instrument alarm on one counter
// reading.
func (e *Engine) judgeInstrument(t *txn, c *counterSpec, r *CounterReading) {
	level := e.instrumentLevel(c.Zone)
	key := c.Zone + ":" + c.ID + ":" + KindInstrument + ":"
	base := Alarm{Zone: c.Zone, Kind: KindInstrument, Location: c.Location, Counter: c.ID}

	a := base
	fault := r.Status == StatusFault
	status := r.Status
	t.judge(condition{key: key + "fault", present: fault, level: level, tmpl: a, since: r.Time, at: r.Time, msg: func() string {
		m := fmt.Sprintf("%s reports status %q", c.ID, status)
		if fault {
			m += ": its readings are not trusted"
		}
		return m
	}})

	if c.MaxPerM3 > 0 {
		peak, at := 0.0, 0.0
		for j, v := range r.PerM3 {
			if v > peak {
				peak, at = v, r.Sizes[j]
			}
		}
		a := base
		a.Value, a.Threshold, a.Unit = peak, c.MaxPerM3, unitPerM3
		over := peak >= c.MaxPerM3
		t.judge(condition{key: key + "overrange", present: over, level: level, tmpl: a, since: r.Time, at: r.Time, msg: func() string {
			if over {
				return fmt.Sprintf("%s: %s /m³ at %s µm is at or beyond the counter's maximum %s /m³: coincidence makes the counts untrustworthy", c.ID, num(peak), classify.FormatSize(at), num(c.MaxPerM3))
			}
			return fmt.Sprintf("%s: concentrations back below the counter's maximum %s /m³", c.ID, num(c.MaxPerM3))
		}})
	}

	if c.NominalFlowLPM > 0 && r.FlowLPM > 0 {
		dev := (r.FlowLPM - c.NominalFlowLPM) / c.NominalFlowLPM
		a := base
		a.Value, a.Threshold, a.Unit = r.FlowLPM, c.NominalFlowLPM, "L/min"
		off := math.Abs(dev) > FlowTolerance
		flow := r.FlowLPM
		t.judge(condition{key: key + "flow", present: off, level: level, tmpl: a, since: r.Time, at: r.Time, msg: func() string {
			rel := "within"
			if off {
				rel = "outside"
			}
			return fmt.Sprintf("%s: flow %s L/min is %+.1f %% off the nominal %s L/min, %s the ±%g %% allowed", c.ID, num(flow), dev*100, num(c.NominalFlowLPM), rel, FlowTolerance*100)
		}})
	}
}

// judgePressure runs the pressure rules on one DP reading.
func (e *Engine) judgePressure(t *txn, s *sensorSpec, p PressureObservation) {
	st := e.sensorSt[s.ID]
	if !p.Time.After(st.last) {
		e.judgeLateReversal(t, s, p)
		return
	}
	st = instrState{last: p.Time, live: true, pa: p.Pa}
	setUndo(t, e.sensorSt, s.ID, st)
	e.judgeStale(t, s.High, s.ID, "", st, s.stale)
	base := Alarm{Zone: s.High, Sensor: s.ID, Value: p.Pa, Unit: "Pa"}
	between := fmt.Sprintf("DP %s → %s (%s)", s.High, s.Low, s.ID)

	if s.MaxPa > 0 {
		a := base
		a.Kind, a.Threshold = KindInstrument, s.MaxPa
		over := p.Pa > s.MaxPa
		a.Message = fmt.Sprintf("%s: %s Pa is within the sensor's range (max %s Pa)", between, num(p.Pa), num(s.MaxPa))
		if over {
			a.Message = fmt.Sprintf("%s: %s Pa is above the sensor's plausible maximum %s Pa: check the sensor", between, num(p.Pa), num(s.MaxPa))
		}
		t.judge(condition{key: s.High + ":" + s.ID + ":" + KindInstrument + ":range", present: over,
			level: e.instrumentLevel(s.High), tmpl: a, since: p.Time, at: p.Time})
	}
	if s.positive {
		a := base
		a.Kind = KindPressureReversal
		rev := p.Pa < 0
		a.Message = fmt.Sprintf("%s: %s Pa, positive again", between, num(p.Pa))
		if rev {
			a.Message = fmt.Sprintf("%s: %s Pa: air flows from %s into %s", between, num(p.Pa), s.Low, s.High)
		}
		t.judge(condition{key: s.High + ":" + s.ID + ":" + KindPressureReversal, present: rev, level: LevelAction,
			tmpl: a, since: p.Time, at: p.Time})
	}
	if s.MinPa > 0 {
		e.judgePressureLow(t, s, p.Time, p.Pa)
	}
}

// judgePressureLow judges the newest DP of a sensor against its minimum;
// Tick calls it too, so that the delay runs out without a new reading.
func (e *Engine) judgePressureLow(t *txn, s *sensorSpec, at time.Time, pa float64) {
	a := Alarm{Zone: s.High, Kind: KindPressureLow, Sensor: s.ID, Value: pa, Threshold: s.MinPa, Unit: "Pa"}
	low := pa < s.MinPa
	a.Message = fmt.Sprintf("DP %s → %s (%s): %s Pa, back at or above the minimum %s Pa", s.High, s.Low, s.ID, num(pa), num(s.MinPa))
	if low {
		a.Message = fmt.Sprintf("DP %s → %s (%s): %s Pa is below the minimum %s Pa", s.High, s.Low, s.ID, num(pa), num(s.MinPa))
	}
	t.judge(condition{key: s.High + ":" + s.ID + ":" + KindPressureLow, present: low, level: LevelAction,
		tmpl: a, since: at, at: at, delay: s.delay})
}

// judgeLateReversal judges a DP reading older than its sensor's newest: a
// reversal it shows is raised as an episode of its own (ended at once, as a
// newer reading came: the action latches until acknowledged), unless one
// is open.
func (e *Engine) judgeLateReversal(t *txn, s *sensorSpec, p PressureObservation) {
	key := s.High + ":" + s.ID + ":" + KindPressureReversal
	if !s.positive || p.Pa >= 0 {
		return
	}
	_, wasOpen := e.conds[key]
	a := Alarm{Zone: s.High, Sensor: s.ID, Kind: KindPressureReversal, Value: p.Pa, Unit: "Pa"}
	a.Message = fmt.Sprintf("DP %s → %s (%s): %s Pa at %s (arrived late): air flowed from %s into %s", s.High, s.Low, s.ID, num(p.Pa), p.Time.UTC().Format(time.RFC3339), s.Low, s.High)
	t.judge(condition{key: key, present: true, level: LevelAction, tmpl: a, since: p.Time, at: p.Time})
	if !wasOpen {
		t.judge(condition{key: key, present: false, tmpl: a, since: p.Time, at: p.Time})
	}
}
