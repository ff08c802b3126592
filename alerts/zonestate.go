package alerts

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
	"sync"
	"time"

	"cleanmon/classify"
)

// ZoneStatus is the judgement of a zone (the API's `state`).
type ZoneStatus string

// Zone states, from best to worst; StatusUnknown stands apart: the zone
// cannot be shown in class because the data to say so is missing.
const (
	StatusInClass    ZoneStatus = "in-class"
	StatusAlert      ZoneStatus = "alert"
	StatusAction     ZoneStatus = "action"
	StatusOutOfClass ZoneStatus = "out-of-class"
	StatusUnknown    ZoneStatus = "unknown"
)

func (s ZoneStatus) rank() int {
	switch s {
	case StatusInClass:
		return 0
	case StatusAlert:
		return 1
	case StatusAction:
		return 2
	case StatusOutOfClass:
		return 3
	}
	return -1
}

// StatusFault is the reading status of a counter reporting a fault: such a
// reading is shown as the latest but not trusted for the rolling mean, and
// does not keep its location fresh.
const StatusFault = "fault"

// DefaultMaxSamples bounds the samples kept per location so that a counter
// flooding the daemon cannot exhaust memory; the oldest go first.
const DefaultMaxSamples = 100_000

// Observation is one committed reading as the zone state needs it.
type Observation struct {
	Counter string
	Time    time.Time
	VolumeL float64
	Status  string
	// Sizes are the counter's channel thresholds in µm, ascending.
	Sizes []float64
	// PerM3 is the cumulative concentration, particles/m³, aligned with
	// Sizes.
	PerM3 []float64
	// Untrusted, when set, says why the reading is not trusted (fault
	// status, at or beyond the counter's maximum, flow off its nominal):
	// it is kept and shown, but left out of every mean, and its location
	// is unknown until a trusted reading follows. CounterSpec.Judge sets it.
	Untrusted string
}

// untrustedReason is why a reading cannot be used in a mean, "" if it can.
func (o *Observation) untrustedReason() string {
	switch {
	case o.Untrusted != "":
		return o.Untrusted
	case o.Status == StatusFault:
		return "the counter reports status fault"
	case !(o.VolumeL > 0):
		return "no sampled volume"
	}
	return ""
}

// Binding places a counter at a sampling location of a zone.
type Binding struct {
	Counter  string
	Zone     string
	Location string
}

// OperatingChange is a change of a zone's operating state, as made by an
// operator and kept in the store.
type OperatingChange struct {
	Zone   string
	State  string
	By     string
	Reason string
	Time   time.Time
}

// ZoneTrackerOptions tune a ZoneTracker.
type ZoneTrackerOptions struct {
	// Now is the clock (default time.Now); tests inject their own.
	Now func() time.Time
	// MaxSamples per location (default DefaultMaxSamples).
	MaxSamples int
}

// ZoneView is the state of one zone at one instant.
type ZoneView struct {
	ID      string
	Name    string
	Class   *float64 // nil unless the zone has an ISO class
	Grade   string   // "" unless the zone has a GMP grade
	Edition string   // ISO 14644-1 edition of the class limits; "" when no class
	AreaM2  float64
	Sizes   []float64
	// OperatingState is the current state and StateBy, StateReason,
	// StateSince the change that set it (zero when it is the configured
	// state and nobody changed it).
	OperatingState string
	StateBy        string
	StateReason    string
	StateSince     time.Time
	// LimitsState is the operating state whose limits apply: the current
	// one, or during a clean-up period and in maintenance the state the
	// zone ran in before.
	LimitsState string
	// CleanUpUntil is set while the clean-up period after a switch to
	// at-rest runs; the at-rest window starts when it ends.
	CleanUpUntil time.Time
	State        ZoneStatus
	Limits       []SizeLimit
	Locations    []LocationView
	Window       time.Duration
	StaleAfter   time.Duration
	// Notes explain anything that qualifies State (maintenance, stale
	// locations, sizes without a limit).
	Notes []string
	At    time.Time
}

// LocationView is the state of one sampling location.
type LocationView struct {
	ID      string
	Name    string
	Counter string // counter of the latest reading, else the bound one
	// Time, Status and PerM3 describe the latest reading (zero when none);
	// PerM3 is keyed by size (classify.FormatSize) over all of the
	// counter's channels.
	Time   time.Time
	Status string
	PerM3  map[string]float64
	// MeanPerM3 is the rolling mean over the window at the zone's sizes;
	// Samples the trusted readings in it.
	MeanPerM3 map[string]float64
	Samples   int
	// Fresh: a trusted reading came within StaleAfter.
	Fresh bool
	// Trusted is false while the newest reading is not trusted; Untrusted
	// then says why. The location is unknown until a trusted reading
	// follows.
	Trusted   bool
	Untrusted string
	State     ZoneStatus
}

// ZoneTracker keeps the live state of every zone. It is safe for
// concurrent use.
//
// The rule that turns locations into a zone state is fail-safe: a zone is
// in-class only when every one of its locations is fresh and in class. A
// location is judged on the mean concentration of its trusted readings
// within the window at every zone size (the plain mean of the readings'
// concentrations, as ISO 14644-1:2015 A.5.2 averages a location's samples,
// so the live state and a certification of the same readings agree), against the limit, action and alert level
// in force: out-of-class above the limit, action above the action level,
// alert above the alert level, in-class otherwise. The zone takes the worst
// of its fresh locations; when some locations are stale and the fresh ones
// are all in class, or none is fresh, or the zone has no location or no
// limit to be in, the zone is unknown. Maintenance changes nothing here:
// readings are still judged against the limits of the state the zone ran
// in before, and a note says so.
type ZoneTracker struct {
	now        func() time.Time
	maxSamples int
	zones      []*liveZone
	byID       map[string]*liveZone
	byCounter  map[string][]*liveLocation

	changeMu sync.Mutex // serialises operating-state changes with their persistence
	mu       sync.Mutex
}

type liveZone struct {
	spec   *zoneSpec
	op     OperatingChange
	hist   []OperatingChange // every change, in time order
	locs   []*liveLocation
	byLocs map[string]*liveLocation
}

type liveLocation struct {
	zone    *liveZone
	cfg     LocationConfig
	counter string
	latest  *Observation
	samples []sample // ascending by time
	fresh   time.Time
	// untrusted is the newest untrusted reading's time and reason; it
	// makes the location unknown unless a trusted reading is newer.
	untrustedAt time.Time
	untrusted   string
}

type sample struct {
	t       time.Time
	counter string
	perM3   []float64 // zone sizes; NaN where the counter has no such channel
}

// NewZoneTracker checks the zones (as ValidateZones) and the bindings and
// returns a tracker with every zone in its configured operating state and
// no data.
func NewZoneTracker(zones []ZoneConfig, bindings []Binding, opt ZoneTrackerOptions) (*ZoneTracker, error) {
	specs, errs := compileZones(zones)
	if len(errs) > 0 {
		msgs := make([]string, len(errs))
		for i, e := range errs {
			msgs[i] = e.Error()
		}
		return nil, fmt.Errorf("%w: %s", ErrZoneConfig, strings.Join(msgs, "; "))
	}
	t := &ZoneTracker{
		now:        opt.Now,
		maxSamples: opt.MaxSamples,
		byID:       map[string]*liveZone{},
		byCounter:  map[string][]*liveLocation{},
	}
	if t.now == nil {
		t.now = time.Now
	}
	if t.maxSamples <= 0 {
		t.maxSamples = DefaultMaxSamples
	}
	for _, s := range specs {
		z := &liveZone{spec: s, byLocs: map[string]*liveLocation{}}
		z.op = OperatingChange{Zone: s.cfg.ID, State: s.base}
		for _, lc := range s.cfg.Locations {
			l := &liveLocation{zone: z, cfg: lc}
			z.locs = append(z.locs, l)
			z.byLocs[lc.ID] = l
		}
		t.zones = append(t.zones, z)
		t.byID[s.cfg.ID] = z
	}
	for i, b := range bindings {
		z, ok := t.byID[b.Zone]
		if !ok {
			return nil, fmt.Errorf("%w: binding %d: counter %q names unknown zone %q", ErrZoneConfig, i, b.Counter, b.Zone)
		}
		l, ok := z.byLocs[b.Location]
		if !ok {
			return nil, fmt.Errorf("%w: binding %d: counter %q names location %q, not a location of zone %q", ErrZoneConfig, i, b.Counter, b.Location, b.Zone)
		}
		if l.counter == "" {
			l.counter = b.Counter
		}
		t.byCounter[b.Counter] = append(t.byCounter[b.Counter], l)
	}
	return t, nil
}

// Observe takes committed readings. Readings of unbound counters are
// ignored; readings older than their zone's window only update the latest
// reading if newer than it, so a backfill in any order is harmless, and the
// same counter and time seen twice counts once.
func (t *ZoneTracker) Observe(obs ...Observation) {
	t.mu.Lock()
	defer t.mu.Unlock()
	now := t.now()
	for i := range obs {
		o := &obs[i]
		for _, l := range t.byCounter[o.Counter] {
			l.observe(o, now, t.maxSamples)
		}
	}
}

func (l *liveLocation) observe(o *Observation, now time.Time, max int) {
	if l.latest == nil || !o.Time.Before(l.latest.Time) {
		cp := *o
		cp.Sizes = append([]float64(nil), o.Sizes...)
		cp.PerM3 = append([]float64(nil), o.PerM3...)
		l.latest = &cp
	}
	if why := o.untrustedReason(); why != "" {
		if o.Time.After(l.untrustedAt) {
			l.untrustedAt, l.untrusted = o.Time, why
		}
		return
	}
	spec := l.zone.spec
	if !o.Time.After(now.Add(-spec.window)) {
		return
	}
	if o.Time.After(l.fresh) {
		l.fresh = o.Time
	}
	s := sample{t: o.Time, counter: o.Counter, perM3: make([]float64, len(spec.sizes))}
	for i, size := range spec.sizes {
		s.perM3[i] = math.NaN()
		for j, cs := range o.Sizes {
			if math.Abs(cs-size) < 1e-9 && j < len(o.PerM3) {
				s.perM3[i] = o.PerM3[j]
			}
		}
	}
	n := len(l.samples)
	at := sort.Search(n, func(i int) bool { return !l.samples[i].t.Before(s.t) })
	for k := at; k < n && l.samples[k].t.Equal(s.t); k++ {
		if l.samples[k].counter == s.counter {
			l.samples[k] = s
			return
		}
	}
	l.samples = append(l.samples, sample{})
	copy(l.samples[at+1:], l.samples[at:])
	l.samples[at] = s
	l.prune(now)
	if len(l.samples) > max {
		l.samples = append(l.samples[:0], l.samples[len(l.samples)-max:]...)
	}
}

// prune drops the samples that fell out of the window.
func (l *liveLocation) prune(now time.Time) {
	cut := now.Add(-l.zone.spec.window)
	k := 0
	for k < len(l.samples) && !l.samples[k].t.After(cut) {
		k++
	}
	if k > 0 {
		l.samples = append(l.samples[:0], l.samples[k:]...)
	}
}

// Zones returns the state of every zone, in configuration order.
func (t *ZoneTracker) Zones() []ZoneView {
	t.mu.Lock()
	defer t.mu.Unlock()
	now := t.now()
	out := make([]ZoneView, len(t.zones))
	for i, z := range t.zones {
		out[i] = z.view(now)
	}
	return out
}

// Zone returns the state of one zone.
func (t *ZoneTracker) Zone(id string) (ZoneView, bool) {
	t.mu.Lock()
	defer t.mu.Unlock()
	z, ok := t.byID[id]
	if !ok {
		return ZoneView{}, false
	}
	return z.view(t.now()), true
}

// ZonePart returns the view of zone id restricted to the given locations:
// its limits, levels and those locations' rolling means. Its State and
// Notes describe only those locations; use Zone for the zone's state.
func (t *ZoneTracker) ZonePart(id string, locations map[string]bool) (ZoneView, bool) {
	t.mu.Lock()
	defer t.mu.Unlock()
	z, ok := t.byID[id]
	if !ok {
		return ZoneView{}, false
	}
	return z.partView(t.now(), locations), true
}

// ParseOperatingState checks an operating state name.
func ParseOperatingState(s string) (string, error) {
	switch s {
	case AtRest, InOperation, Maintenance:
		return s, nil
	}
	return "", fmt.Errorf("%w: %q (want at-rest, in-operation or maintenance)", ErrOperatingState, s)
}

// SetOperatingState checks a change, hands it to persist (the store) and
// only when that succeeds applies it, so the state shown is always one on
// record. Changes are serialised; readings keep flowing meanwhile. A zero
// Time is set to now. It returns the zone's new state.
func (t *ZoneTracker) SetOperatingState(ch OperatingChange, persist func(OperatingChange) error) (ZoneView, error) {
	t.changeMu.Lock()
	defer t.changeMu.Unlock()
	if _, ok := t.byID[ch.Zone]; !ok {
		return ZoneView{}, fmt.Errorf("%w: %q", ErrUnknownZone, ch.Zone)
	}
	if _, err := ParseOperatingState(ch.State); err != nil {
		return ZoneView{}, err
	}
	if strings.TrimSpace(ch.By) == "" {
		return ZoneView{}, fmt.Errorf("%w: by: say who makes the change (it is kept for the audit trail)", ErrOperatingState)
	}
	if ch.Time.IsZero() {
		ch.Time = t.now().UTC()
	}
	if persist != nil {
		if err := persist(ch); err != nil {
			return ZoneView{}, err
		}
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	z := t.byID[ch.Zone]
	z.apply(ch)
	return z.view(t.now()), nil
}

// RestoreOperatingState applies a change read back from the store at start.
// To restart into maintenance with the limits of the state before it,
// restore that earlier change first.
func (t *ZoneTracker) RestoreOperatingState(ch OperatingChange) error {
	if _, err := ParseOperatingState(ch.State); err != nil {
		return err
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	z, ok := t.byID[ch.Zone]
	if !ok {
		return fmt.Errorf("%w: %q", ErrUnknownZone, ch.Zone)
	}
	z.apply(ch)
	return nil
}

func (z *liveZone) apply(ch OperatingChange) {
	at := sort.Search(len(z.hist), func(i int) bool { return z.hist[i].Time.After(ch.Time) })
	z.hist = slices.Insert(z.hist, at, ch)
	if at == len(z.hist)-1 {
		z.op = ch
	}
}

// stateAt is the zone's operating state at a time.
func (z *liveZone) stateAt(at time.Time) StateAt {
	return OperatingAt(z.spec.base, z.hist, z.spec.cleanUp, at)
}

// OperatingAt tells which operating state and limits applied to a zone at
// a time (StateAt's zero value for an unknown zone).
func (t *ZoneTracker) OperatingAt(zone string, at time.Time) StateAt {
	t.mu.Lock()
	defer t.mu.Unlock()
	z, ok := t.byID[zone]
	if !ok {
		return StateAt{}
	}
	return z.stateAt(at)
}

// LimitsAt returns the limits and levels in force in a zone at a time,
// with the state they belong to.
func (t *ZoneTracker) LimitsAt(zone string, at time.Time) ([]SizeLimit, StateAt, bool) {
	t.mu.Lock()
	defer t.mu.Unlock()
	z, ok := t.byID[zone]
	if !ok {
		return nil, StateAt{}, false
	}
	st := z.stateAt(at)
	return slices.Clone(z.spec.limits[st.Limits]), st, true
}

// History returns a zone's operating-state changes, in time order, and
// its configured state and clean-up period: what OperatingAt needs to
// judge stored readings by the state of their time.
func (t *ZoneTracker) History(zone string) (initial string, changes []OperatingChange, cleanUp time.Duration, ok bool) {
	t.mu.Lock()
	defer t.mu.Unlock()
	z, ok := t.byID[zone]
	if !ok {
		return "", nil, 0, false
	}
	return z.spec.base, slices.Clone(z.hist), z.spec.cleanUp, true
}

func (z *liveZone) view(now time.Time) ZoneView { return z.partView(now, nil) }

// partView is view restricted to the locations in only (nil: all). The
// state and notes of a restricted view are not the zone's: it serves the
// alarm rules, which judge the locations a batch of readings touched
// without recomputing a zone of thousands of locations for every batch.
func (z *liveZone) partView(now time.Time, only map[string]bool) ZoneView {
	s := z.spec
	st := z.stateAt(now)
	v := ZoneView{
		ID:             s.cfg.ID,
		Name:           s.cfg.Name,
		Grade:          s.grade,
		AreaM2:         s.cfg.AreaM2,
		Sizes:          append([]float64(nil), s.sizes...),
		OperatingState: st.Operating,
		StateBy:        z.op.By,
		StateReason:    z.op.Reason,
		StateSince:     z.op.Time,
		LimitsState:    st.Limits,
		CleanUpUntil:   st.CleanUpUntil,
		Window:         s.window,
		StaleAfter:     s.stale,
		At:             now,
	}
	if s.hasClass {
		c := s.class
		v.Class = &c
		v.Edition = string(s.edition)
	}
	limits := s.limits[st.Limits]
	v.Limits = make([]SizeLimit, len(limits))
	copy(v.Limits, limits)
	anyLimit := false
	for _, sl := range limits {
		if sl.Limit != nil {
			anyLimit = true
		} else if s.hasClass || s.grade != "" {
			v.Notes = append(v.Notes, fmt.Sprintf("no %s limit at %s µm: %s", s.describeAt(st.Limits), classify.FormatSize(sl.SizeUM), strings.TrimPrefix(sl.Note, "no limit: ")))
		}
	}

	if !s.hasClass && s.grade == "" {
		v.Notes = append(v.Notes, "unclassified area: no class or grade to be in")
	}
	from := window{after: now.Add(-s.window), since: st.Since}
	from.maint = z.maintenanceAfter(from.after)
	worst, fresh := StatusInClass, 0
	for _, l := range z.locs {
		if only != nil && !only[l.cfg.ID] {
			continue
		}
		lv := l.view(now, from, limits)
		switch {
		case lv.Fresh:
			fresh++
			if lv.State.rank() > worst.rank() {
				worst = lv.State
			}
		case !lv.Trusted:
			v.Notes = append(v.Notes, fmt.Sprintf("location %s: newest reading not trusted (%s)", l.cfg.ID, lv.Untrusted))
		case lv.Time.IsZero():
			v.Notes = append(v.Notes, fmt.Sprintf("location %s: no reading yet", l.cfg.ID))
		default:
			v.Notes = append(v.Notes, fmt.Sprintf("location %s: no trusted reading at every zone size within %s (latest %s)", l.cfg.ID, s.stale, lv.Time.UTC().Format(time.RFC3339)))
		}
		v.Locations = append(v.Locations, lv)
	}
	v.State = zoneStatus(len(z.locs), fresh, worst, anyLimit, st.Judged)
	if worst == StatusInClass && fresh == len(z.locs) && !anyLimit && st.Judged && (s.hasClass || s.grade != "") {
		v.Notes = append(v.Notes, "no limit to be in at this operating state: only alert and action levels are judged")
	}
	if len(z.locs) == 0 {
		v.Notes = append(v.Notes, "no sampling location")
	}
	if !st.CleanUpUntil.IsZero() {
		v.Notes = append(v.Notes, fmt.Sprintf("clean-up after the switch to at-rest until %s: judged against the %s limits meanwhile", st.CleanUpUntil.UTC().Format(time.RFC3339), st.Limits))
	}
	if !st.Judged {
		v.Notes = append(v.Notes, fmt.Sprintf("in maintenance (by %s: %s): readings are recorded but not judged; the zone's state is unknown until it leaves maintenance", z.op.By, z.op.Reason))
	}
	return v
}

// zoneStatus is the fail-safe rule from the locations to the zone.
func zoneStatus(locs, fresh int, worst ZoneStatus, anyLimit, judged bool) ZoneStatus {
	switch {
	case !judged, locs == 0, fresh == 0:
		return StatusUnknown
	case worst == StatusInClass && (fresh < locs || !anyLimit):
		return StatusUnknown
	}
	return worst
}

func (s *zoneSpec) describeAt(state string) string {
	if s.hasClass {
		return "ISO class " + classify.FormatSize(s.class)
	}
	return "grade " + s.grade + " " + state
}

// window is the span of a rolling mean: after the start of the window and
// from the start of the limits regime in force, outside maintenance.
type window struct {
	after, since time.Time
	maint        [][2]time.Time // maintenance spans [from, to); to zero: still on
}

func (w window) holds(t time.Time) bool {
	if !t.After(w.after) || t.Before(w.since) {
		return false
	}
	for _, m := range w.maint {
		if !t.Before(m[0]) && (m[1].IsZero() || t.Before(m[1])) {
			return false
		}
	}
	return true
}

// maintenanceAfter lists the maintenance spans that reach past a time.
func (z *liveZone) maintenanceAfter(after time.Time) [][2]time.Time {
	k := sort.Search(len(z.hist), func(i int) bool { return z.hist[i].Time.After(after) }) - 1
	var out [][2]time.Time
	for i := max(k, 0); i < len(z.hist); i++ {
		if z.hist[i].State != Maintenance || i > 0 && z.hist[i-1].State == Maintenance && i-1 >= max(k, 0) {
			continue
		}
		span := [2]time.Time{z.hist[i].Time}
		for j := i + 1; j < len(z.hist); j++ {
			if z.hist[j].State != Maintenance {
				span[1] = z.hist[j].Time
				break
			}
		}
		out = append(out, span)
	}
	return out
}

func (l *liveLocation) view(now time.Time, from window, limits []SizeLimit) LocationView {
	spec := l.zone.spec
	lv := LocationView{ID: l.cfg.ID, Name: l.cfg.Name, Counter: l.counter, State: StatusUnknown, Trusted: true}
	if l.untrusted != "" && !l.fresh.After(l.untrustedAt) {
		lv.Trusted, lv.Untrusted = false, l.untrusted
	}
	if l.latest != nil {
		lv.Counter = l.latest.Counter
		lv.Time = l.latest.Time
		lv.Status = l.latest.Status
		lv.PerM3 = make(map[string]float64, len(l.latest.Sizes))
		for i, size := range l.latest.Sizes {
			if i < len(l.latest.PerM3) {
				lv.PerM3[classify.FormatSize(size)] = l.latest.PerM3[i]
			}
		}
	}
	l.prune(now)
	// The window of the regime in force, without readings taken in
	// maintenance, summed per size in one walk: a copy of the window for
	// every view was nine tenths of the judge's allocation.
	sums := make([]float64, len(spec.sizes))
	counts := make([]int, len(spec.sizes))
	for j := range l.samples {
		s := &l.samples[j]
		if !from.holds(s.t) {
			continue
		}
		lv.Samples++
		for i := range sums {
			if v := s.perM3[i]; !math.IsNaN(v) {
				sums[i] += v
				counts[i]++
			}
		}
	}
	if lv.Samples == 0 {
		return lv
	}
	lv.MeanPerM3 = make(map[string]float64, len(spec.sizes))
	complete := true
	state := StatusInClass
	for i, size := range spec.sizes {
		sum, n := sums[i], counts[i]
		if n == 0 {
			complete = false
			continue
		}
		mean := sum / float64(n)
		lv.MeanPerM3[classify.FormatSize(size)] = mean
		var st ZoneStatus = StatusInClass
		sl := limits[i]
		switch {
		case sl.Limit != nil && mean > *sl.Limit:
			st = StatusOutOfClass
		case sl.Action != nil && mean > *sl.Action:
			st = StatusAction
		case sl.Alert != nil && mean > *sl.Alert:
			st = StatusAlert
		}
		if st.rank() > state.rank() {
			state = st
		}
	}
	lv.Fresh = complete && lv.Trusted && !l.fresh.IsZero() && now.Sub(l.fresh) <= spec.stale
	if lv.Fresh {
		lv.State = state
	}
	return lv
}
