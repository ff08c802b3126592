package investigate

import (
	"cmp"
	"fmt"
	"slices"
	"time"
)

// Kind names what a coincident event is taken to be.
type Kind string

// Kinds of coincident event.
const (
	KindDoor        Kind = "door-open"    // one DP sensor fell below its minimum
	KindPressureDip Kind = "pressure-dip" // one DP sensor fell, but stayed above its minimum
	KindAirSupply   Kind = "air-supply"   // several DP sensors and/or airflow fell together: a fan or supply failure
	KindAirflow     Kind = "airflow"      // airflow velocity alone fell
	KindInstrument  Kind = "instrument"   // the counter's flow left its band or it reported a fault
	KindNeighbour   Kind = "neighbour"    // a neighbouring zone on the cascade rose
	KindState       Kind = "state-change" // the zone's operating state changed
	KindEnvironment Kind = "environment"  // temperature or humidity left its baseline
)

// Plausibility of each kind as a cause of a particle rise, before the
// data-dependent adjustments described in the package documentation
// (common practice, no source: the order an engineer checks things in).
var plausibility = map[Kind]float64{
	KindDoor:        1.0,
	KindPressureDip: 0.5,
	KindAirSupply:   1.0,
	KindAirflow:     0.7,
	KindInstrument:  1.0,
	KindNeighbour:   0.9,
	KindState:       0.6,
	KindEnvironment: 0.3,
}

// Fixed deviations given to events that are not a measured series: a
// fault status and an operating-state change are either there or not.
const (
	statusFaultZ = 20
	stateChangeZ = 6
)

// Options tune Investigate; the zero value takes the defaults.
type Options struct {
	Lookback         time.Duration // events are searched from AlarmTime−Lookback to To (default 30 min); the baseline is From to there
	Threshold        float64       // robust z-score at which a series counts as away from its baseline (default 4)
	MinSpan          time.Duration // shortest stretch of a fast series that counts (default 15 s)
	Simultaneous     time.Duration // events this close to the rise count as at the rise (default 1 min)
	MaxLead          time.Duration // events starting earlier than this before the rise lose weight (default 15 min)
	Decay            time.Duration // time constant of that loss, and of events over before the rise (default 5 min)
	DoorHysteresisPa float64       // see DefaultDoorHysteresisPa
}

func (o Options) withDefaults() Options {
	def := func(d *time.Duration, v time.Duration) {
		if *d <= 0 {
			*d = v
		}
	}
	def(&o.Lookback, 30*time.Minute)
	def(&o.MinSpan, 15*time.Second)
	def(&o.Simultaneous, time.Minute)
	def(&o.MaxLead, 15*time.Minute)
	def(&o.Decay, 5*time.Minute)
	if o.Threshold <= 0 {
		o.Threshold = 4
	}
	if o.DoorHysteresisPa <= 0 {
		o.DoorHysteresisPa = DefaultDoorHysteresisPa
	}
	return o
}

// Event is one coincident event, ranked by Score.
type Event struct {
	Kind      Kind
	Subjects  []string      // the sensors, counters or zones involved
	Start     time.Time     // when the series left its baseline
	End       time.Time     // when it came back; zero if still away at the end of the window
	Lead      time.Duration // the rise minus Start: positive when the event came first
	Deviation float64       // peak robust z-score against the series' own baseline
	Weight    float64       // the lead-time weight
	Plausible float64       // the plausibility factor
	Score     float64       // ln(1+Deviation) × Weight × Plausible
	Evidence  string        // what happened, in words
}

// Result is the investigation of one alarm.
type Result struct {
	Zone         string
	AlarmTime    time.Time
	Rise         time.Time // onset of the zone's rise; AlarmTime when none was found
	RiseLocation string
	RiseFound    bool
	Doors        []DoorCount // door openings per DP sensor in the window
	Events       []Event     // best first
	Unknown      []string    // series that could not be judged, and why
}

// Investigate ranks what happened around the alarm of in. It never
// invents a cause: with no event found, Events is empty and Unknown says
// which series were missing or too short to judge.
func Investigate(in Input, opt Options) (Result, error) {
	if err := in.Check(); err != nil {
		return Result{}, err
	}
	o := opt.withDefaults()
	x := &investigation{in: &in, o: o, searchFrom: in.AlarmTime.Add(-o.Lookback)}
	if x.searchFrom.Before(in.From) {
		x.searchFrom = in.From
	}
	x.res = Result{Zone: in.Zone, AlarmTime: in.AlarmTime}
	x.findRise()
	for _, p := range in.Pressure {
		x.res.Doors = append(x.res.Doors, DoorCount{Sensor: p.Sensor, MinPa: p.MinPa,
			Openings: DoorOpenings(p.Sensor, p.MinPa, o.DoorHysteresisPa, p.Points, in.From, in.To)})
	}
	if len(in.Pressure) == 0 {
		x.unknown("no DP sensor on the zone's boundary was given: door openings and the cascade cannot be judged")
	}
	x.air()
	x.instruments()
	x.neighbours()
	x.states()
	x.environment()
	for _, c := range x.events {
		x.res.Events = append(x.res.Events, x.score(c))
	}
	slices.SortStableFunc(x.res.Events, func(a, b Event) int {
		if c := cmp.Compare(b.Score, a.Score); c != 0 {
			return c
		}
		return a.Start.Compare(b.Start)
	})
	return x.res, nil
}

type investigation struct {
	in             *Input
	o              Options
	searchFrom     time.Time
	res            Result
	events         []candidate
	alsoRose       []string // other locations of the zone that rose with the rise
	otherLocations int      // other locations of the zone at the alarm size
}

func (x *investigation) unknown(format string, args ...any) {
	x.res.Unknown = append(x.res.Unknown, fmt.Sprintf(format, args...))
}

// seriesDeviations computes the baseline of pts and its stretches away
// from it in the search span; ok is false (and the gap is noted) when the
// series is too short to have a baseline.
func (x *investigation) seriesDeviations(name string, pts []Point, floor float64, tr func(float64) float64, dir int) ([]deviation, bool) {
	b, ok := robustBaseline(pts, x.in.From, x.searchFrom, floor, tr)
	if !ok {
		x.unknown("%s: %d samples before %s, too few to know its baseline", name, b.n, clock(x.searchFrom))
		return nil, false
	}
	x.gaps(name, pts)
	return deviations(pts, b, tr, dir, x.searchFrom, x.in.To, x.o.Threshold, x.o.MinSpan), true
}

// findRise sets the onset of the zone's rise: the stretch of the alarm
// location (or the earliest of all locations) at the alarm size that is
// under way at the alarm time.
func (x *investigation) findRise() {
	x.res.Rise = x.in.AlarmTime
	var best *deviation
	for _, s := range x.in.Locations {
		if x.in.SizeUM != 0 && s.SizeUM != x.in.SizeUM {
			continue
		}
		devs, ok := x.seriesDeviations(fmt.Sprintf("%s %s µm", s.Location, sig(s.SizeUM)), s.Points, 0.05, logConc, +1)
		if !ok {
			continue
		}
		var cur *deviation
		for i := range devs {
			if !devs[i].start.After(x.in.AlarmTime.Add(x.o.Simultaneous)) {
				cur = &devs[i]
			}
		}
		if cur == nil {
			continue
		}
		if s.Location == x.in.AlarmLocation {
			best = cur
			x.res.RiseLocation = s.Location
			break
		}
		if best == nil || cur.start.Before(best.start) {
			best, x.res.RiseLocation = cur, s.Location
		}
	}
	if best == nil {
		x.res.RiseLocation = x.in.AlarmLocation
		x.unknown("no rise of the zone's concentration was found before the alarm: lead times are taken from the alarm time")
		return
	}
	x.res.Rise, x.res.RiseFound = best.start, true
	x.othersRising()
}

// othersRising lists the zone's other locations whose concentration at
// the alarm size rose within 5 min of the rise: a counter fault shows at
// one location only, air from outside reaches several.
func (x *investigation) othersRising() {
	for _, s := range x.in.Locations {
		if s.Location == x.res.RiseLocation || (x.in.SizeUM != 0 && s.SizeUM != x.in.SizeUM) {
			continue
		}
		x.otherLocations++
		b, ok := robustBaseline(s.Points, x.in.From, x.searchFrom, 0.05, logConc)
		if !ok {
			continue
		}
		for _, d := range deviations(s.Points, b, logConc, +1, x.searchFrom, x.in.To, x.o.Threshold, x.o.MinSpan) {
			if d.start.Sub(x.res.Rise).Abs() <= 5*time.Minute {
				x.alsoRose = append(x.alsoRose, s.Location)
				break
			}
		}
	}
}

// gaps notes where a series fell silent in the search span for longer
// than five of its sample periods (and at least two minutes): what
// happened there is unknown, not quiet.
func (x *investigation) gaps(name string, pts []Point) {
	limit := max(5*samplePeriod(pts), 2*time.Minute)
	prev := x.searchFrom
	for _, p := range pts {
		if p.Time.Before(x.searchFrom) {
			continue
		}
		if p.Time.After(x.in.To) {
			break
		}
		if p.Time.Sub(prev) > limit {
			x.unknown("%s: no samples from %s to %s", name, clock(prev), clock(p.Time))
		}
		prev = p.Time
	}
	if x.in.To.Sub(prev) > limit {
		x.unknown("%s: no samples from %s to %s", name, clock(prev), clock(x.in.To))
	}
}
