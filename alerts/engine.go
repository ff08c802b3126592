package alerts

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
	"sync"
	"time"

	"cleanmon/classify"
)

// Defaults of the engine where its configuration is silent.
const (
	// DefaultConsecutive is N of the consecutive rule.
	DefaultConsecutive = 3
	// DefaultTrendRun is the steady rise, in samples each higher than the
	// one before, that raises a trend alert (the "six in a row
	// increasing" trend rule of control charts; common practice, no
	// source). Calibrated on the simulator's strongly correlated
	// background: 3 to 7 trend alerts in 24 h of normal data at the demo
	// site, where eight in a row above the centre line gave 180.
	DefaultTrendRun = 6
	// DefaultTrendBaseline is how many samples make a trend baseline.
	DefaultTrendBaseline = 100
	// DefaultCounterInterval is a counter's expected sample period.
	DefaultCounterInterval = time.Minute
	// DefaultSensorInterval is a DP sensor's expected reporting period.
	DefaultSensorInterval = 10 * time.Second
	// DefaultPressureDelay is how long a DP may stay below its minimum
	// before the pressure-low alarm becomes active: long enough for a door
	// to be opened and shut (common practice, no source).
	DefaultPressureDelay = 30 * time.Second
	// FlowTolerance is the allowed deviation of a counter's sample flow
	// from its nominal flow (ISO 21501-4: ±5 %).
	FlowTolerance = 0.05
	// ClearedKept is how many cleared alarms the engine keeps in memory for
	// Alarms(true); the complete history is in the journal.
	ClearedKept = 1000
)

// Errors of the alarm engine.
var (
	ErrEngineConfig = errors.New("alerts: invalid engine configuration")
	ErrObservation  = errors.New("alerts: invalid observation")
	ErrJournal      = errors.New("alerts: alarm journal failed")
	ErrNoAlarm      = errors.New("alerts: no such alarm")
	ErrAlreadyAcked = errors.New("alerts: alarm already acknowledged")
	ErrAlarmCleared = errors.New("alerts: alarm already cleared")
	// ErrAlarmDelayed: the alarm's delay is still running.
	ErrAlarmDelayed = errors.New("alerts: alarm still delayed (its delay is running): nothing to acknowledge yet")
	// ErrAlarmPending is the former name of ErrAlarmDelayed.
	ErrAlarmPending = ErrAlarmDelayed
	ErrAck          = errors.New("alerts: invalid acknowledgement")
	// ErrCommentRequired: an action alarm is acknowledged with a comment
	// saying what was found or done. Returned wrapped together with ErrAck.
	ErrCommentRequired = errors.New("alerts: acknowledging an action alarm needs a comment")
	ErrRestore         = errors.New("alerts: cannot restore alarms")
)

// EngineConfig is what the alarm rules need, built by the daemon from the
// site configuration.
type EngineConfig struct {
	// Zones are checked and compiled exactly as NewZoneTracker does, so the
	// limits and levels in force are the ones the zone state shows.
	Zones    []ZoneConfig
	Counters []CounterRule
	Sensors  []SensorRule
	// Environment are the temperature, humidity and airflow-velocity
	// sensors (rules_environment.go).
	Environment []EnvironmentRule
	// Consecutive is N of the consecutive rule (default 3, at least 2).
	Consecutive int
	// TrendRun is the rise length of the trend rule (default 6, at least 2).
	TrendRun int
	// TrendBaseline is how many samples before the run make the baseline
	// (default 100, at least 10); the trend rule waits until it has them.
	TrendBaseline int
	// CountRuleCounts and CountRuleSamples set the count rule of grade A
	// and B at rest at ≥5 µm: that many particles within that many
	// samples raise an action (defaults 2 within 3).
	CountRuleCounts  int
	CountRuleSamples int
	// Notifiers are the names passed to Journal.RecordTransitions for
	// transitions that are announced.
	Notifiers []string
	// Latch says per kind whether alarms of that kind latch; a kind left
	// out latches when its alarm is at the action level.
	Latch map[string]bool
	// Tracker, when set, is the live zone state the engine judges on (the
	// daemon's own, so that the zone state shown and the out-of-class
	// alarm come from one computation, kept once in memory). Its owner
	// feeds it readings and operating states; the engine only reads it.
	// Nil: the engine keeps a tracker of its own and feeds it.
	Tracker *ZoneTracker
}

// CounterRule is what the rules know of one particle counter.
type CounterRule struct {
	ID       string
	Zone     string
	Location string
	// NominalFlowLPM is the counter's nominal sample flow; 0 disables the
	// flow check.
	NominalFlowLPM float64
	// MaxPerM3 is the counter's stated maximum concentration (its
	// coincidence limit, ISO 21501-4); 0 disables the check.
	MaxPerM3 float64
	// Interval is the expected sample period (default 1m).
	Interval time.Duration
	// StaleAfter is the silence after which the counter is stale (default
	// 3 × Interval).
	StaleAfter time.Duration
}

// SensorRule is what the rules know of one differential-pressure sensor.
type SensorRule struct {
	ID string
	// High is the zone on the high-pressure side, whose protection the DP
	// is; the sensor's alarms belong to it. Low is the area on the other
	// side: a zone or any other area id.
	High, Low string
	// MinPa is the lowest acceptable DP; 0 disables the pressure-low rule
	// (the reversal rule still applies).
	MinPa float64
	// MaxPa is the highest DP the sensor can plausibly show (its range);
	// a reading above it is an instrument alarm. 0 means none.
	MaxPa float64
	// Delay is how long the DP may stay below MinPa before the alarm
	// becomes active (default 30s).
	Delay time.Duration
	// Interval is the expected reporting period (default 10s) and
	// StaleAfter the allowed silence (default 3 × Interval).
	Interval   time.Duration
	StaleAfter time.Duration
	// MustBePositive: a DP below zero is a flow reversal. Nil means true:
	// a cleanroom is kept above its surroundings.
	MustBePositive *bool
}

// PressureObservation is one committed DP reading.
type PressureObservation struct {
	Sensor string
	Time   time.Time
	Pa     float64
}

// CounterReading is a committed reading with the sample flow the counter
// reported, which the instrument rule needs beyond the zone state's
// Observation.
type CounterReading struct {
	Observation
	// FlowLPM is the reported sample flow; 0 when the counter reports none.
	FlowLPM float64
}

// Engine turns observations and the passing of time into alarms. It is
// safe for concurrent use.
//
// Every change of an alarm is a Transition, recorded through
// Journal.RecordTransitions before it becomes visible in Alarms or reaches
// a subscriber. Transitions that announce something (an alarm becoming
// active, changing level, being acknowledged or cleared) are recorded with
// the configured notifiers; the others (a latched alarm's condition
// going, a condition suppressed by maintenance) are recorded with none:
// they are in the audit record, and nobody is paged for them. A delayed
// alarm is not recorded at all until its delay runs out: a condition that
// goes before leaves no record, and a DP dip is counted as a door opening
// (DoorOpenings). When the journal fails, the method returns the error and
// the engine is as it was before the call, so the same call may be retried.
type Engine struct {
	j       Journal
	now     func() time.Time
	tracker *ZoneTracker
	// ownTracker: the engine feeds its tracker (else its owner does).
	ownTracker bool
	notifiers  []string
	latch      map[string]bool
	nConsec    int
	trendRun   int
	trendBase  int
	// countCounts particles within countSamples samples: the count rule.
	countCounts  int
	countSamples int

	zones    map[string]*engineZone
	counters map[string]*counterSpec
	sensors  map[string]*sensorSpec
	env      envRules // environment sensors (rules_environment.go)
	order    []string // counter IDs, then sensor IDs, in configuration order
	zoneIDs  []string // configuration order

	mu         sync.Mutex
	alarms     map[string]Alarm  // open alarms by ID
	conds      map[string]string // condition key → open alarm ID
	cleared    []Alarm           // recent cleared alarms, oldest first
	lastID     map[string]string // condition key → last ID issued
	suppressed map[string]bool   // condition keys suppressed in maintenance
	doors      map[string]uint64 // sensor → DP dips shorter than the delay
	series     map[string]seriesState
	counterSt  map[string]instrState
	sensorSt   map[string]instrState
	stamp      int64
	start      time.Time // silence is counted from here at the latest
	touched    bool      // something was observed or changed: too late to restore
	subs       []func([]Transition)

	subMu sync.Mutex // keeps subscribers in transition order
}

type engineZone struct {
	id    string
	grade string
	sizes []float64
	locs  map[string]bool
	op    string
}

type counterSpec struct {
	CounterRule
	stale time.Duration
	keys  []string // seriesKey at each of the zone's sizes, made at first use
}

// seriesKeys are the counter's series keys at its zone's sizes, made once
// rather than for every reading. The engine's lock is held.
func (c *counterSpec) seriesKeys(sizes []float64) []string {
	if len(c.keys) != len(sizes) {
		c.keys = make([]string, len(sizes))
		for i, size := range sizes {
			c.keys[i] = seriesKey(c.Zone, c.Location, size)
		}
	}
	return c.keys
}

type sensorSpec struct {
	SensorRule
	stale    time.Duration
	delay    time.Duration
	positive bool
}

// instrState is what the engine remembers of a counter or a sensor.
type instrState struct {
	last time.Time // newest reading's time, from history or live; zero before any
	live bool      // a reading was judged since the start
	pa   float64   // sensors: the newest DP
	flow float64   // counters: the flow reported with the newest reading (0: none)
	why  string    // counters: why the newest reading is not trusted ("" if it is)
}

// NewEngine checks the configuration and returns an engine with no alarms;
// call Restore before anything else to bring back the open alarms of a
// previous run. now is the clock (nil: time.Now). Every problem of the
// configuration is reported, each with its path ("counters[2].zone").
func NewEngine(cfg EngineConfig, j Journal, now func() time.Time) (*Engine, error) {
	if j == nil {
		return nil, fmt.Errorf("%w: no journal: every transition must be recorded", ErrEngineConfig)
	}
	if now == nil {
		now = time.Now
	}
	if errs := ValidateZones(cfg.Zones); len(errs) > 0 {
		return nil, configError(errs)
	}
	e := &Engine{
		j: j, now: now,
		nConsec: cfg.Consecutive, trendRun: cfg.TrendRun, trendBase: cfg.TrendBaseline,
		countCounts: cfg.CountRuleCounts, countSamples: cfg.CountRuleSamples,
		latch:    map[string]bool{},
		zones:    map[string]*engineZone{},
		counters: map[string]*counterSpec{},
		sensors:  map[string]*sensorSpec{},
		alarms:   map[string]Alarm{}, conds: map[string]string{}, lastID: map[string]string{},
		suppressed: map[string]bool{}, series: map[string]seriesState{}, doors: map[string]uint64{},
		counterSt: map[string]instrState{}, sensorSt: map[string]instrState{},
	}
	var errs []FieldError
	bad := func(path, format string, a ...any) {
		errs = append(errs, FieldError{path, fmt.Sprintf(format, a...)})
	}
	zoneLocs := map[string]map[string]bool{}
	for _, z := range cfg.Zones {
		locs := map[string]bool{}
		for _, l := range z.Locations {
			locs[l.ID] = true
		}
		zoneLocs[z.ID] = locs
	}
	seen := map[string]string{}
	bindings := e.compileCounters(cfg.Counters, zoneLocs, seen, bad)
	e.compileSensors(cfg.Sensors, zoneLocs, seen, bad)
	e.compileEnvironment(cfg.Environment, zoneLocs, bad)
	for _, f := range []struct {
		path string
		v    *int
		def  int
		min  int
	}{
		{"consecutive", &e.nConsec, DefaultConsecutive, 2},
		{"trend_run", &e.trendRun, DefaultTrendRun, 2},
		{"trend_baseline", &e.trendBase, DefaultTrendBaseline, 10},
		{"count_rule_counts", &e.countCounts, DefaultCountRuleCounts, 1},
		{"count_rule_samples", &e.countSamples, DefaultCountRuleSamples, 1},
	} {
		switch {
		case *f.v == 0:
			*f.v = f.def
		case *f.v < f.min:
			bad(f.path, "%d: must be at least %d", *f.v, f.min)
		}
	}
	seenN := map[string]int{}
	for i, n := range cfg.Notifiers {
		p := fmt.Sprintf("notifiers[%d]", i)
		if strings.TrimSpace(n) == "" {
			bad(p, "empty notifier name")
		} else if j, dup := seenN[n]; dup {
			bad(p, "%q already named at notifiers[%d]", n, j)
		} else {
			seenN[n] = i
			e.notifiers = append(e.notifiers, n)
		}
	}
	kinds := map[string]bool{KindExcursion: true, KindConsecutive: true, KindOutOfClass: true, KindPressureLow: true,
		KindPressureReversal: true, KindStale: true, KindInstrument: true, KindTrend: true, KindEnvironment: true}
	for _, k := range sortedKeys(cfg.Latch) {
		v := cfg.Latch[k]
		if !kinds[k] {
			bad("latch."+k, "%q is not an alarm kind", k)
			continue
		}
		e.latch[k] = v
	}
	if len(errs) > 0 {
		return nil, configError(errs)
	}
	tr := cfg.Tracker
	e.ownTracker = tr == nil
	if tr == nil {
		var err error
		if tr, err = NewZoneTracker(cfg.Zones, bindings, ZoneTrackerOptions{Now: now}); err != nil {
			return nil, fmt.Errorf("%w: %w", ErrEngineConfig, err)
		}
	}
	e.tracker = tr
	for _, v := range tr.Zones() {
		z := &engineZone{id: v.ID, grade: v.Grade, sizes: v.Sizes, locs: map[string]bool{}, op: v.OperatingState}
		for _, l := range v.Locations {
			z.locs[l.ID] = true
		}
		e.zones[v.ID] = z
		e.zoneIDs = append(e.zoneIDs, v.ID)
	}
	e.start = now()
	return e, nil
}

// compileCounters checks the counters and keeps them; it returns where
// each is bound.
func (e *Engine) compileCounters(cs []CounterRule, zoneLocs map[string]map[string]bool, seen map[string]string, bad func(string, string, ...any)) []Binding {
	var bindings []Binding
	for i, c := range cs {
		p := fmt.Sprintf("counters[%d]", i)
		checkID(bad, p+".id", c.ID, seen, p)
		locs, ok := zoneLocs[c.Zone]
		switch {
		case c.Zone == "":
			bad(p+".zone", "missing: the zone the counter samples")
		case !ok:
			bad(p+".zone", "%q is not a configured zone", c.Zone)
		case c.Location == "":
			bad(p+".location", "missing: the sampling location of zone %q", c.Zone)
		case !locs[c.Location]:
			bad(p+".location", "%q is not a location of zone %q", c.Location, c.Zone)
		default:
			bindings = append(bindings, Binding{Counter: c.ID, Zone: c.Zone, Location: c.Location})
		}
		nonNegative(bad, p+".nominal_flow_lpm", c.NominalFlowLPM, "L/min")
		nonNegative(bad, p+".max_per_m3", c.MaxPerM3, "particles/m³")
		if c.Interval < 0 {
			bad(p+".interval", "%s: must be positive", c.Interval)
		}
		if c.StaleAfter < 0 {
			bad(p+".stale_after", "%s: must be positive", c.StaleAfter)
		}
		s := &counterSpec{CounterRule: c.WithDefaults()}
		s.stale = s.StaleAfter
		if _, dup := e.counters[c.ID]; !dup && c.ID != "" {
			e.counters[c.ID] = s
			e.order = append(e.order, c.ID)
		}
	}
	return bindings
}

// compileSensors checks the DP sensors and keeps them.
func (e *Engine) compileSensors(ss []SensorRule, zoneLocs map[string]map[string]bool, seen map[string]string, bad func(string, string, ...any)) {
	for i, r := range ss {
		p := fmt.Sprintf("sensors[%d]", i)
		checkID(bad, p+".id", r.ID, seen, p)
		switch {
		case r.High == "":
			bad(p+".high", "missing: the zone on the high-pressure side")
		case zoneLocs[r.High] == nil:
			bad(p+".high", "%q is not a configured zone", r.High)
		}
		switch {
		case strings.TrimSpace(r.Low) == "":
			bad(p+".low", "missing: the area on the low-pressure side")
		case r.Low == r.High:
			bad(p+".low", "%q is the high side too: a DP is between two areas", r.Low)
		}
		nonNegative(bad, p+".min_pa", r.MinPa, "Pa")
		nonNegative(bad, p+".max_pa", r.MaxPa, "Pa")
		if r.MaxPa > 0 && r.MaxPa <= r.MinPa {
			bad(p+".max_pa", "%g Pa is not above min_pa %g Pa", r.MaxPa, r.MinPa)
		}
		s := &sensorSpec{SensorRule: r, delay: r.Delay, positive: r.MustBePositive == nil || *r.MustBePositive}
		if r.Delay < 0 {
			bad(p+".delay", "%s: must be positive", r.Delay)
		} else if r.Delay == 0 {
			s.delay = DefaultPressureDelay
		}
		if r.Interval < 0 {
			bad(p+".interval", "%s: must be positive", r.Interval)
		} else if r.Interval == 0 {
			s.Interval = DefaultSensorInterval
		}
		s.stale = 3 * s.Interval
		if r.StaleAfter < 0 {
			bad(p+".stale_after", "%s: must be positive", r.StaleAfter)
		} else if r.StaleAfter > 0 {
			s.stale = r.StaleAfter
		}
		if _, dup := e.sensors[r.ID]; !dup && r.ID != "" {
			e.sensors[r.ID] = s
			e.order = append(e.order, r.ID)
		}
	}
}

func configError(errs []FieldError) error {
	msgs := make([]string, len(errs))
	for i, e := range errs {
		msgs[i] = e.Error()
	}
	return fmt.Errorf("%w: %s", ErrEngineConfig, strings.Join(msgs, "; "))
}

// checkID checks a counter or sensor id: it becomes part of alarm IDs,
// which appear in API paths, and counters and sensors share one namespace
// there.
func checkID(bad func(string, string, ...any), path, id string, seen map[string]string, at string) {
	switch {
	case strings.TrimSpace(id) == "":
		bad(path, "missing")
	case strings.ContainsAny(id, "/?#%: \t"):
		bad(path, "%q: an id may not contain '/', '?', '#', '%%', ':' or spaces (it is part of alarm ids)", id)
	default:
		if prev, dup := seen[id]; dup {
			bad(path, "%q already used at %s", id, prev)
			return
		}
		seen[id] = at
	}
}

func nonNegative(bad func(string, string, ...any), path string, v float64, unit string) {
	if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
		bad(path, "%v: must be a number ≥ 0 %s", v, unit)
	}
}

// Restore brings back the open alarms of a previous run from the journal
// (Journal.OpenAlarms). Call it once, before anything is observed (Prime
// may come before or after it). Their conditions are judged again as new
// readings arrive: a restored consecutive or trend alarm counts its run as
// still going on, a delayed alarm (never journaled) starts its delay again
// with the next reading, a latched alarm whose condition went waits for its
// acknowledgement beside a newer episode of its condition, a stale alarm stays
// until its instrument reports. An open alarm whose subject is no longer
// configured stays open until it is acknowledged, and is then cleared.
// Malformed records are refused whole, naming the record.
func (e *Engine) Restore(ctx context.Context) error {
	as, err := e.j.OpenAlarms(ctx)
	if err != nil {
		return fmt.Errorf("%w: %w", ErrJournal, err)
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.touched {
		return fmt.Errorf("%w: the engine has already observed or changed something", ErrRestore)
	}
	byKey := map[string]int{}
	var keep []Alarm
	for i, a := range as {
		key, ok := conditionKey(a.ID)
		switch {
		case !ok:
			return fmt.Errorf("%w: open alarm %d: id %q is not an alarm id of this engine", ErrRestore, i, a.ID)
		case a.State == StateDelayed || a.State == "pending":
			// A delay that was running when the daemon stopped starts
			// again with the next reading (older journals kept them).
			continue
		case a.State != StateActive && a.State != StateAcknowledged:
			return fmt.Errorf("%w: open alarm %d (%s): state %q is not open", ErrRestore, i, a.ID, a.State)
		}
		keep = append(keep, a)
		if a.ConditionGone {
			continue
		}
		// Two open alarms of one condition (a journal written by a daemon
		// that died between two transitions) must not keep the daemon
		// from starting: both stay open and shown, the newer one owns the
		// condition, and the older waits for its acknowledgement only.
		if j, dup := byKey[key]; dup {
			older, newer := j, len(keep)-1
			if keep[newer].ID < keep[older].ID {
				older, newer = newer, older
			}
			keep[older] = cloneAlarm(keep[older])
			keep[older].ConditionGone = true
			byKey[key] = newer
			continue
		}
		byKey[key] = len(keep) - 1
	}
	for _, a := range keep {
		key, _ := conditionKey(a.ID)
		a = cloneAlarm(a)
		e.alarms[a.ID] = a
		if last := e.lastID[key]; last < a.ID {
			e.lastID[key] = a.ID
		}
		if a.ConditionGone {
			continue
		}
		e.conds[key] = a.ID
		if a.Kind == KindConsecutive || a.Kind == KindTrend {
			sk, _ := strings.CutSuffix(key, ":"+a.Kind)
			s := e.series[sk]
			if a.Kind == KindConsecutive {
				s.run = e.nConsec
			} else {
				s.trendRun = e.trendRun
			}
			e.series[sk] = s
		}
	}
	e.touched = true
	return nil
}

// Prime hands stored history to the engine after a start, newest last or
// in any order: it fills the zones' rolling windows, the trend baselines
// and the counters' last-heard times, and raises nothing.
func (e *Engine) Prime(obs []Observation) error {
	if err := validateObservations(obs); err != nil {
		return err
	}
	sorted := sortedByTime(obs)
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.ownTracker {
		e.tracker.Observe(sorted...)
	}
	for _, o := range sorted {
		c, ok := e.counters[o.Counter]
		if !ok {
			continue
		}
		st := e.counterSt[o.Counter]
		if o.Time.After(st.last) {
			st.last = o.Time
			e.counterSt[o.Counter] = st
		}
		z := e.zones[c.Zone]
		if e.maintenanceAt(c.Zone, o.Time) || o.untrustedReason() != "" || c.distrust(o, 0) != "" {
			continue
		}
		for _, size := range z.sizes {
			v, ok := valueAt(&o, size)
			if !ok {
				continue
			}
			k := seriesKey(c.Zone, c.Location, size)
			s := e.series[k]
			if !o.Time.After(s.last) {
				continue
			}
			s.last = o.Time
			s.hist = s.push(histPoint{count: v * o.VolumeL / 1000, volL: o.VolumeL}, e.trendBase+e.trendRun-1)
			e.series[k] = s
		}
	}
	return nil
}

// ObserveReadings judges committed readings (call it after the store has
// made them durable). Readings of unknown counters are ignored; a reading
// not newer than its counter's newest is history, kept in the rolling
// window but not judged again. Bad input is refused whole, naming the
// reading and field, and changes nothing.
func (e *Engine) ObserveReadings(ctx context.Context, obs []Observation) error {
	rs := make([]CounterReading, len(obs))
	for i := range obs {
		rs[i].Observation = obs[i]
	}
	return e.ObserveCounterReadings(ctx, rs)
}

// ObserveCounterReadings is ObserveReadings with the flows the counters
// reported, for the flow check of the instrument rule.
func (e *Engine) ObserveCounterReadings(ctx context.Context, rs []CounterReading) error {
	rs = slices.Clone(rs)
	obs := make([]Observation, len(rs))
	for i := range rs {
		obs[i] = rs[i].Observation
		if f := rs[i].FlowLPM; math.IsNaN(f) || math.IsInf(f, 0) || f < 0 {
			return fmt.Errorf("%w: reading %d: flow_lpm %v: must be ≥ 0 (0 when not reported)", ErrObservation, i, f)
		}
	}
	if err := validateObservations(obs); err != nil {
		return err
	}
	order := make([]int, len(rs))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return rs[order[a]].Time.Before(rs[order[b]].Time) })

	e.mu.Lock()
	e.touched = true
	for i := range rs {
		if c, ok := e.counters[rs[i].Counter]; ok {
			why := c.distrust(rs[i].Observation, rs[i].FlowLPM)
			rs[i].Untrusted, obs[i].Untrusted = why, why
		}
	}
	if e.ownTracker {
		e.tracker.Observe(obs...)
	}
	t := e.begin()
	for _, i := range order {
		r := &rs[i]
		if c, ok := e.counters[r.Counter]; ok {
			e.judgeReading(t, c, r)
		}
	}
	// Only the locations this batch touched are judged for their means:
	// a zone of thousands of locations is not recomputed for every
	// request; Tick judges the whole zone every second.
	touched := map[string]map[string]bool{}
	for i := range rs {
		if c, ok := e.counters[rs[i].Counter]; ok {
			if touched[c.Zone] == nil {
				touched[c.Zone] = map[string]bool{}
			}
			touched[c.Zone][c.Location] = true
		}
	}
	views := make(map[string]ZoneView, len(touched))
	for zone, locs := range touched {
		views[zone], _ = e.tracker.ZonePart(zone, locs)
	}
	for _, id := range e.zoneIDs {
		if v, ok := views[id]; ok {
			e.judgeOutOfClass(t, v)
		}
	}
	return e.finish(ctx, t)
}

// ObservePressure judges committed DP readings. Readings of unknown
// sensors are ignored, and so is a reading not newer than its sensor's
// newest. Bad input is refused whole and changes nothing.
func (e *Engine) ObservePressure(ctx context.Context, ps []PressureObservation) error {
	if err := validatePressure(ps); err != nil {
		return err
	}
	sorted := append([]PressureObservation(nil), ps...)
	sort.SliceStable(sorted, func(a, b int) bool { return sorted[a].Time.Before(sorted[b].Time) })
	e.mu.Lock()
	e.touched = true
	t := e.begin()
	for _, p := range sorted {
		if s, ok := e.sensors[p.Sensor]; ok {
			e.judgePressure(t, s, p)
		}
	}
	return e.finish(ctx, t)
}

// Tick runs the rules that time drives: a delayed alarm whose delay has
// run out becomes active, a silent counter or sensor becomes stale, and a
// rolling mean whose high readings have left the window is judged again.
// Call it every second or so.
func (e *Engine) Tick(ctx context.Context) error {
	e.mu.Lock()
	e.touched = true
	t := e.begin()
	for _, id := range e.order {
		if c, ok := e.counters[id]; ok {
			e.judgeStale(t, c.Zone, "", c.ID, e.counterSt[id], c.stale)
			continue
		}
		s := e.sensors[id]
		st := e.sensorSt[id]
		e.judgeStale(t, s.High, s.ID, "", st, s.stale)
		if st.live && s.MinPa > 0 && st.pa < s.MinPa {
			e.judgePressureLow(t, s, st.last, st.pa)
		}
	}
	for _, v := range e.tracker.Zones() {
		e.judgeOutOfClass(t, v)
	}
	e.tickEnvironment(t)
	return e.finish(ctx, t)
}

// SetOperatingState tells the engine that a zone's operating state
// changed (the daemon records the change itself, with who and why, through
// ZoneTracker.SetOperatingState). Limits follow the state: a graded zone's
// limits are those of at-rest or in-operation, and in maintenance those of
// the state before. In maintenance the excursion, consecutive,
// out-of-class and trend rules raise nothing: each condition they would
// have raised is journaled once as a cleared alarm whose comment says it
// was suppressed. On entering maintenance, open alarms of those kinds that
// do not latch are cleared (their rules no longer run); latched ones stay
// until acknowledged. Runs of the consecutive and trend rules start afresh
// after any change.
func (e *Engine) SetOperatingState(ctx context.Context, zone, state string) error {
	return e.setOperatingState(ctx, zone, state, e.ownTracker)
}

// setOperatingState is SetOperatingState; feed says whether to apply the
// change to the tracker too (the judge applies it there itself, with who
// and why).
func (e *Engine) setOperatingState(ctx context.Context, zone, state string, feed bool) error {
	if _, err := ParseOperatingState(state); err != nil {
		return err
	}
	e.mu.Lock()
	z, ok := e.zones[zone]
	if !ok {
		e.mu.Unlock()
		return fmt.Errorf("%w: %q", ErrUnknownZone, zone)
	}
	e.touched = true
	t := e.begin()
	if state != z.op {
		if state == Maintenance {
			for _, id := range sortedKeys(e.alarms) {
				a := e.alarms[id]
				if a.Zone != zone || !suppressible(a.Kind) || a.Latched {
					continue
				}
				t.clear(a, fmt.Sprintf("zone %s entered maintenance: the %s rule is suspended", zone, a.Kind))
			}
		}
	}
	if err := t.commit(ctx); err != nil {
		e.mu.Unlock()
		return err
	}
	if state != z.op {
		if feed {
			if err := e.tracker.RestoreOperatingState(OperatingChange{Zone: zone, State: state, Time: t.now}); err != nil {
				e.mu.Unlock()
				return err
			}
		}
		z.op = state
		for k, s := range e.series {
			if strings.HasPrefix(k, zone+":") {
				s.run, s.trendRun = 0, 0
				e.series[k] = s
			}
		}
		for k := range e.suppressed {
			if strings.HasPrefix(k, zone+":") {
				delete(e.suppressed, k)
			}
		}
	}
	e.publish(t.ts)
	return nil
}

// Subscribe registers f to receive every batch of transitions after it has
// been journaled, in order. f runs on the caller's goroutine, one batch at
// a time; it may read (Alarms, Alarm) but must not call the methods that
// change the engine, and it should return quickly.
func (e *Engine) Subscribe(f func([]Transition)) {
	e.mu.Lock()
	defer e.mu.Unlock()
	e.subs = append(e.subs, f)
}

// Alarms returns the open alarms (delayed, active or acknowledged), or
// with all also the most recent cleared ones (up to ClearedKept), sorted by
// Since and then ID.
func (e *Engine) Alarms(all bool) []Alarm {
	e.mu.Lock()
	defer e.mu.Unlock()
	out := make([]Alarm, 0, len(e.alarms))
	for _, a := range e.alarms {
		out = append(out, cloneAlarm(a))
	}
	if all {
		for _, a := range e.cleared {
			out = append(out, cloneAlarm(a))
		}
	}
	sort.Slice(out, func(i, j int) bool {
		if !out[i].Since.Equal(out[j].Since) {
			return out[i].Since.Before(out[j].Since)
		}
		return out[i].ID < out[j].ID
	})
	return out
}

// Alarm returns one alarm, open or recently cleared.
func (e *Engine) Alarm(id string) (Alarm, bool) {
	e.mu.Lock()
	defer e.mu.Unlock()
	if a, ok := e.alarms[id]; ok {
		return cloneAlarm(a), true
	}
	for i := len(e.cleared) - 1; i >= 0; i-- {
		if e.cleared[i].ID == id {
			return cloneAlarm(e.cleared[i]), true
		}
	}
	return Alarm{}, false
}

// finish commits a transaction, releases the engine and hands the
// transitions to the subscribers. It is called with e.mu held.
func (e *Engine) finish(ctx context.Context, t *txn) error {
	if err := t.commit(ctx); err != nil {
		e.mu.Unlock()
		return err
	}
	e.publish(t.ts)
	return nil
}

// publish releases e.mu and runs the subscribers; subMu is taken before
// e.mu is released so that batches reach them in the order they were
// journaled, while readers are free again.
func (e *Engine) publish(ts []Transition) {
	if len(ts) == 0 || len(e.subs) == 0 {
		e.mu.Unlock()
		return
	}
	subs := slices.Clone(e.subs)
	e.subMu.Lock()
	e.mu.Unlock()
	defer e.subMu.Unlock()
	for _, f := range subs {
		cp := make([]Transition, len(ts))
		for i, tr := range ts {
			cp[i] = tr
			cp[i].Alarm = cloneAlarm(tr.Alarm)
		}
		f(cp)
	}
}

func validatePressure(ps []PressureObservation) error {
	for i, p := range ps {
		switch {
		case strings.TrimSpace(p.Sensor) == "":
			return fmt.Errorf("%w: pressure reading %d: sensor: missing", ErrObservation, i)
		case p.Time.IsZero():
			return fmt.Errorf("%w: pressure reading %d (%s): time: missing", ErrObservation, i, p.Sensor)
		case math.IsNaN(p.Pa) || math.IsInf(p.Pa, 0):
			return fmt.Errorf("%w: pressure reading %d (%s): pa: %v is not a pressure", ErrObservation, i, p.Sensor, p.Pa)
		}
	}
	return nil
}

func validateObservations(obs []Observation) error {
	for i, o := range obs {
		// Named only in a refusal: formatting it for every reading showed
		// in the ingest's profile.
		where := func() string {
			if o.Counter != "" {
				return fmt.Sprintf("reading %d (%s)", i, o.Counter)
			}
			return fmt.Sprintf("reading %d", i)
		}
		switch {
		case strings.TrimSpace(o.Counter) == "":
			return fmt.Errorf("%w: %s: counter: missing", ErrObservation, where())
		case o.Time.IsZero():
			return fmt.Errorf("%w: %s: time: missing", ErrObservation, where())
		case math.IsNaN(o.VolumeL) || math.IsInf(o.VolumeL, 0) || o.VolumeL < 0:
			return fmt.Errorf("%w: %s: volume_l: %v is not a volume", ErrObservation, where(), o.VolumeL)
		case len(o.Sizes) != len(o.PerM3):
			return fmt.Errorf("%w: %s: %d sizes but %d concentrations", ErrObservation, where(), len(o.Sizes), len(o.PerM3))
		}
		for j, v := range o.PerM3 {
			if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
				return fmt.Errorf("%w: %s: concentration at %s µm: %v is not a concentration", ErrObservation, where(), classify.FormatSize(o.Sizes[j]), v)
			}
		}
	}
	return nil
}

func sortedByTime(obs []Observation) []Observation {
	out := append([]Observation(nil), obs...)
	sort.SliceStable(out, func(a, b int) bool { return out[a].Time.Before(out[b].Time) })
	return out
}

func sortedKeys[V any](m map[string]V) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	sort.Strings(ks)
	return ks
}

// maintenanceAt says whether a zone was in maintenance at a time.
func (e *Engine) maintenanceAt(zone string, at time.Time) bool {
	return e.tracker.OperatingAt(zone, at).Operating == Maintenance
}

// DoorOpenings returns, per DP sensor, how many times its DP fell below
// its minimum and came back before the delay ran out since the start: door
// openings, counted instead of alarmed.
func (e *Engine) DoorOpenings() map[string]uint64 {
	e.mu.Lock()
	defer e.mu.Unlock()
	out := make(map[string]uint64, len(e.sensors))
	for id := range e.sensors {
		out[id] = e.doors[id]
	}
	return out
}
