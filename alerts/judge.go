package alerts

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"time"
)

// Judge is the one place where cleanmon judges what its instruments
// report. Every committed particle reading, DP sample and instrument event
// goes in once, through Observe; the operating state of each zone with its
// history, each location's rolling window, the latest DP of each sensor
// and the health of each instrument are kept here and nowhere else; the
// API, the pages and the metrics read zone reports from it.
//
// A zone report carries the zone's attention: the worst of its particle
// state, of every open alarm of the zone, of every DP sensor that protects
// it and of every counter in it. Attention is none only when nothing
// needs a person.
type Judge struct {
	e   *Engine
	tr  *ZoneTracker
	now func() time.Time
}

// ErrJudgeConfig: the judge keeps its own zone tracker; EngineConfig.Tracker
// must be nil.
var ErrJudgeConfig = errors.New("alerts: invalid judge configuration")

// NewJudge checks the configuration (as NewEngine) and returns a judge
// with no data and no alarms. Call Restore before anything is observed.
// now is the clock (nil: time.Now).
func NewJudge(cfg EngineConfig, j Journal, now func() time.Time) (*Judge, error) {
	if cfg.Tracker != nil {
		return nil, fmt.Errorf("%w: tracker: the judge keeps its own", ErrJudgeConfig)
	}
	if now == nil {
		now = time.Now
	}
	e, err := NewEngine(cfg, j, now)
	if err != nil {
		return nil, err
	}
	return &Judge{e: e, tr: e.tracker, now: now}, nil
}

// DeviceObservation is what a poller learns of an instrument beyond its
// readings (see Engine.ObserveDevice).
type DeviceObservation struct {
	ID     string
	Fault  bool
	Reason string
	Time   time.Time
}

// Input is one batch of committed observations: hand it over only after
// the store has made it durable.
type Input struct {
	Readings []CounterReading
	Pressure []PressureObservation
	Devices  []DeviceObservation
}

// Observe judges one batch, whatever order its readings were taken in.
// Bad input is refused whole, naming the observation and field, and
// changes nothing.
func (j *Judge) Observe(ctx context.Context, in Input) error {
	if err := validatePressure(in.Pressure); err != nil {
		return err
	}
	for i, d := range in.Devices {
		if d.Time.IsZero() {
			return fmt.Errorf("%w: device %d (%s): time: missing", ErrObservation, i, d.ID)
		}
	}
	if len(in.Readings) > 0 {
		if err := j.e.ObserveCounterReadings(ctx, in.Readings); err != nil {
			return err
		}
	}
	if len(in.Pressure) > 0 {
		if err := j.e.ObservePressure(ctx, in.Pressure); err != nil {
			return err
		}
	}
	for _, d := range in.Devices {
		if err := j.e.ObserveDevice(ctx, d.ID, d.Fault, d.Reason, d.Time); err != nil {
			return err
		}
	}
	return nil
}

// ObserveIntegrity raises (fault) or clears the integrity alarm of the
// store (see Engine.ObserveIntegrity).
func (j *Judge) ObserveIntegrity(ctx context.Context, fault bool, reason string, at time.Time) error {
	return j.e.ObserveIntegrity(ctx, fault, reason, at)
}

// Tick runs the rules time drives (delays running out, silence, windows
// moving on). Call it every second or so.
func (j *Judge) Tick(ctx context.Context) error { return j.e.Tick(ctx) }

// Restore brings back, after a start, the operating-state changes on
// record (any order) and the open alarms of the journal.
func (j *Judge) Restore(ctx context.Context, changes []OperatingChange) error {
	for _, ch := range sortedChanges(changes) {
		if err := j.tr.RestoreOperatingState(ch); err != nil {
			return fmt.Errorf("%w: operating state of %s at %s: %w", ErrRestore, ch.Zone, ch.Time.UTC().Format(time.RFC3339), err)
		}
		j.e.mu.Lock()
		if z := j.e.zones[ch.Zone]; z != nil {
			z.op = ch.State
		}
		j.e.mu.Unlock()
	}
	return j.e.Restore(ctx)
}

// Prime fills the windows and baselines from stored readings after a
// start, raising nothing.
func (j *Judge) Prime(obs []Observation) error { return j.e.Prime(obs) }

// SetOperatingState checks a change, hands it to persist (the store) and
// only when that succeeds applies it, then lets the rules follow it. A
// zero Time is now. It returns the zone as it is afterwards.
func (j *Judge) SetOperatingState(ctx context.Context, ch OperatingChange, persist func(OperatingChange) error) (ZoneReport, error) {
	if _, err := j.tr.SetOperatingState(ch, persist); err != nil {
		return ZoneReport{}, err
	}
	if err := j.e.setOperatingState(ctx, ch.Zone, ch.State, false); err != nil {
		return ZoneReport{}, err
	}
	r, _ := j.Zone(ch.Zone)
	return r, nil
}

// Ack acknowledges an open alarm (see Engine.Ack): an action alarm needs
// a comment (ErrCommentRequired).
func (j *Judge) Ack(ctx context.Context, id, by, comment string) (Alarm, error) {
	return j.e.Ack(ctx, id, by, comment)
}

// Alarms returns the open alarms, with all also the recent cleared ones.
func (j *Judge) Alarms(all bool) []Alarm { return j.e.Alarms(all) }

// Alarm returns one alarm, open or recently cleared.
func (j *Judge) Alarm(id string) (Alarm, bool) { return j.e.Alarm(id) }

// Subscribe registers f for every batch of journaled transitions.
func (j *Judge) Subscribe(f func([]Transition)) { j.e.Subscribe(f) }

// Tracker is the judge's live zone state, for the collectors that read
// zone views (NewZoneCollector). It is fed by the judge only.
func (j *Judge) Tracker() *ZoneTracker { return j.tr }

// OperatingAt tells which operating state and limits applied to a zone at
// a time.
func (j *Judge) OperatingAt(zone string, at time.Time) StateAt { return j.tr.OperatingAt(zone, at) }

// DoorOpenings returns per DP sensor the dips shorter than the delay.
func (j *Judge) DoorOpenings() map[string]uint64 { return j.e.DoorOpenings() }

// Statuses of a DP sensor in a zone report.
const (
	SensorOK       = "ok"
	SensorLow      = "low"
	SensorReversed = "reversed"
	SensorSilent   = "silent"
)

// SensorView is a DP sensor as the judge sees it now.
type SensorView struct {
	SensorDP
	// Status is ok, low (below its minimum: a door open, or worse once
	// its delay has run out), reversed or silent (no reading within its
	// allowed silence, or none yet: Pa then means nothing).
	Status string
	// DoorOpenings counts the dips below the minimum that ended before
	// the delay since the start.
	DoorOpenings uint64
}

// Statuses of a counter in a zone report.
const (
	InstrumentOK        = "ok"
	InstrumentSilent    = "silent"
	InstrumentUntrusted = "untrusted"
)

// InstrumentView is a particle counter as the judge sees it now.
type InstrumentView struct {
	Counter, Zone, Location string
	// Time is the newest reading's time (zero: none yet); FlowLPM the flow
	// it reported (0: none) against NominalFlowLPM.
	Time           time.Time
	FlowLPM        float64
	NominalFlowLPM float64
	// Status is ok, silent or untrusted (Untrusted says why).
	Status    string
	Untrusted string
}

// Sensors returns every DP sensor, in configuration order.
func (j *Judge) Sensors() []SensorView {
	e := j.e
	e.mu.Lock()
	defer e.mu.Unlock()
	now := e.now()
	var out []SensorView
	for _, id := range e.order {
		s, ok := e.sensors[id]
		if !ok {
			continue
		}
		st := e.sensorSt[id]
		v := SensorView{SensorDP: SensorDP{Sensor: id, High: s.High, Low: s.Low, MinPa: s.MinPa}, Status: SensorOK, DoorOpenings: e.doors[id]}
		switch {
		case st.last.IsZero() || now.Sub(st.last) > s.stale:
			v.Status = SensorSilent // no number: Pa stays 0
			v.Time = st.last
		default:
			v.Pa, v.Time = st.pa, st.last
			if s.positive && st.pa < 0 {
				v.Status = SensorReversed
			} else if s.MinPa > 0 && st.pa < s.MinPa {
				v.Status = SensorLow
			}
		}
		out = append(out, v)
	}
	return out
}

// LatestDP lists every DP sensor with its latest reading and its time, for
// the pressure collector: the time stays exposed for a silent sensor, so
// that a rule on its age still fires. Pages show SensorView.Status
// instead, and no number for a silent sensor.
func (j *Judge) LatestDP() []SensorDP {
	e := j.e
	e.mu.Lock()
	defer e.mu.Unlock()
	var out []SensorDP
	for _, id := range e.order {
		if s, ok := e.sensors[id]; ok {
			st := e.sensorSt[id]
			out = append(out, SensorDP{Sensor: id, High: s.High, Low: s.Low, MinPa: s.MinPa, Pa: st.pa, Time: st.last})
		}
	}
	return out
}

// Instruments returns every particle counter, in configuration order.
func (j *Judge) Instruments() []InstrumentView {
	e := j.e
	e.mu.Lock()
	defer e.mu.Unlock()
	now := e.now()
	var out []InstrumentView
	for _, id := range e.order {
		c, ok := e.counters[id]
		if !ok {
			continue
		}
		st := e.counterSt[id]
		v := InstrumentView{Counter: id, Zone: c.Zone, Location: c.Location, Time: st.last, FlowLPM: st.flow,
			NominalFlowLPM: c.NominalFlowLPM, Status: InstrumentOK, Untrusted: st.why}
		switch {
		case st.last.IsZero() || now.Sub(st.last) > c.stale:
			v.Status = InstrumentSilent
		case st.why != "":
			v.Status = InstrumentUntrusted
		}
		out = append(out, v)
	}
	return out
}

// ZoneReport is a zone as a person should see it.
type ZoneReport struct {
	ZoneView
	// Attention is the worst of everything about the zone;
	// AttentionReasons say what, worst first. Empty reasons: none.
	Attention        Attention
	AttentionReasons []string
	// ActiveAlarms are the zone's alarms that are not cleared (delayed
	// ones, whose delay runs, are not), oldest first.
	ActiveAlarms []Alarm
	// Sensors are the DP sensors protecting the zone (the zone on their
	// high side); Instruments the zone's counters.
	Sensors     []SensorView
	Instruments []InstrumentView
}

// Zones returns every zone's report, in configuration order.
func (j *Judge) Zones() []ZoneReport {
	views := j.tr.Zones()
	alarms, sensors, instr := j.e.Alarms(false), j.Sensors(), j.Instruments()
	out := make([]ZoneReport, len(views))
	for i, v := range views {
		out[i] = report(v, alarms, sensors, instr)
	}
	return out
}

// Zone returns one zone's report.
func (j *Judge) Zone(id string) (ZoneReport, bool) {
	v, ok := j.tr.Zone(id)
	if !ok {
		return ZoneReport{}, false
	}
	return report(v, j.e.Alarms(false), j.Sensors(), j.Instruments()), true
}

func report(v ZoneView, alarms []Alarm, sensors []SensorView, instr []InstrumentView) ZoneReport {
	r := ZoneReport{ZoneView: v}
	for _, a := range alarms {
		if a.Zone == v.ID && a.State != StateDelayed {
			r.ActiveAlarms = append(r.ActiveAlarms, a)
		}
	}
	for _, s := range sensors {
		if s.High == v.ID {
			r.Sensors = append(r.Sensors, s)
		}
	}
	for _, c := range instr {
		if c.Zone == v.ID {
			r.Instruments = append(r.Instruments, c)
		}
	}
	r.Attention, r.AttentionReasons = attention(v, r.ActiveAlarms, r.Sensors, r.Instruments)
	return r
}

// sortReasons orders reasons worst first, stably.
func sortReasons(rs []reason) []string {
	sort.SliceStable(rs, func(a, b int) bool { return rs[a].level.rank() > rs[b].level.rank() })
	out := make([]string, len(rs))
	for i, r := range rs {
		out[i] = r.text
	}
	return out
}
