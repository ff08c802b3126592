package investigate

import (
	"math"
	"math/rand/v2"
	"time"
)

// Cause is the known cause of a simulated incident.
type Cause string

// Causes the simulator can stage.
const (
	CauseDoorHeldOpen Cause = "door-held-open" // the door from assembly to gowning held open for minutes
	CauseFanFailure   Cause = "fan-failure"    // the supply fan fails: every DP and the hood airflow fall
	CauseCounterFault Cause = "counter-fault"  // one counter's flow or status goes bad and it alone reads high
	CauseNeighbour    Cause = "neighbour"      // a neighbouring zone has an excursion first
)

// Causes lists every Cause, for loops in tests and demos.
var Causes = []Cause{CauseDoorHeldOpen, CauseFanFailure, CauseCounterFault, CauseNeighbour}

// Kind is the kind of event that names c when it ranks first.
func (c Cause) Kind() Kind {
	switch c {
	case CauseDoorHeldOpen:
		return KindDoor
	case CauseFanFailure:
		return KindAirSupply
	case CauseCounterFault:
		return KindInstrument
	case CauseNeighbour:
		return KindNeighbour
	}
	return ""
}

// Incident is a simulated alarm with its true cause and when that began.
type Incident struct {
	Cause Cause
	Onset time.Time
	Input Input
}

// Simulated site: the assembly room of the demo site with its three
// counters, the three DP sensors on its boundary, the hood airflow, its
// T/RH sensor and two neighbours. The values are invented for the demo.
const (
	simDPPeriod   = 10 * time.Second
	simReadPeriod = time.Minute
	simEnvPeriod  = 30 * time.Second
	simNominalLPM = 28.3
)

var (
	simLocations = []string{"asm-1", "asm-2", "asm-3"}
	simDP        = []struct {
		sensor, high, low string
		min, nominal      float64
	}{
		{"dp-asm", "assembly", "gowning", 8, 12},
		{"dp-hood", "coating-hood", "assembly", 5, 8},
		{"dp-met", "metrology", "assembly", 5, 9},
	}
)

// sim holds the shapes of one incident: functions of time giving each
// series' departure from its background.
type sim struct {
	rng       *rand.Rand
	from, to  time.Time
	dp        map[string]func(time.Time) float64 // Pa, replacing the nominal
	zone      map[string]func(time.Time) float64 // extra factor on each location
	neighbour map[string]func(time.Time) float64 // extra factor on gowning, metrology
	airflow   func(time.Time) float64
	flow      func(time.Time) float64
	status    func(time.Time) string
	faultyAt  string
}

// ramp is 0 before t0, rises linearly to 1 over rise, holds until t1 (zero:
// forever) and decays with time constant tau after it.
func ramp(t0 time.Time, rise time.Duration, t1 time.Time, tau time.Duration) func(time.Time) float64 {
	return func(t time.Time) float64 {
		if t.Before(t0) {
			return 0
		}
		v := 1.0
		if d := t.Sub(t0); d < rise {
			v = float64(d) / float64(rise)
		}
		if !t1.IsZero() && t.After(t1) {
			v *= math.Exp(-float64(t.Sub(t1)) / float64(tau))
		}
		return v
	}
}

func (s *sim) uniform(lo, hi float64) float64 { return lo + (hi-lo)*s.rng.Float64() }

func (s *sim) minutes(lo, hi float64) time.Duration {
	return time.Duration(s.uniform(lo, hi) * float64(time.Minute))
}

// SimulateIncident stages one incident of cause whose alarm begins at
// alarm, with noise on every series and, at random, a brief door passage
// and an operating-state change that have nothing to do with it. The same
// rng state gives the same incident.
func SimulateIncident(rng *rand.Rand, cause Cause, alarm time.Time) Incident {
	s := &sim{rng: rng, from: alarm.Add(-60 * time.Minute), to: alarm.Add(30 * time.Minute),
		dp: map[string]func(time.Time) float64{}, zone: map[string]func(time.Time) float64{}, neighbour: map[string]func(time.Time) float64{}}
	at := simLocations[rng.IntN(len(simLocations))]
	rise := alarm.Add(-s.minutes(1, 6))
	var onset time.Time
	switch cause {
	case CauseDoorHeldOpen:
		onset = s.doorHeldOpen(rise, at)
	case CauseFanFailure:
		onset = s.fanFailure(rise)
	case CauseCounterFault:
		onset = s.counterFault(rise, at)
	case CauseNeighbour:
		onset = s.neighbourExcursion(rise, at)
	}
	in := s.series(alarm, at)
	s.distractors(&in)
	return Incident{Cause: cause, Onset: onset, Input: in}
}

func (s *sim) doorHeldOpen(rise time.Time, at string) time.Time {
	open := rise.Add(-s.minutes(0.5, 3))
	shut := open.Add(s.minutes(3, 10))
	low := s.uniform(0.5, 4)
	door := ramp(open, 10*time.Second, shut, 10*time.Second)
	s.dp["dp-asm"] = func(t time.Time) float64 { return 12 - (12-low)*door(t) }
	s.zoneRise(rise, time.Minute, shut.Add(2*time.Minute), at, s.uniform(20, 50))
	return open
}

func (s *sim) fanFailure(rise time.Time) time.Time {
	fail := rise.Add(-s.minutes(2, 6))
	fall := ramp(fail, s.minutes(1, 2), time.Time{}, 0)
	for _, d := range simDP {
		frac, nominal := s.uniform(0.1, 0.3), d.nominal
		s.dp[d.sensor] = func(t time.Time) float64 { return nominal - nominal*(1-frac)*fall(t) }
	}
	left := s.uniform(0.15, 0.25)
	s.airflow = func(t time.Time) float64 { return 0.45 - (0.45-left)*fall(t) }
	a := s.uniform(20, 50)
	for _, loc := range simLocations {
		f, amp := ramp(rise, 10*time.Minute, time.Time{}, 0), a*s.uniform(0.5, 1)
		s.zone[loc] = func(t time.Time) float64 { return amp * f(t) }
	}
	g, amp := ramp(rise.Add(s.minutes(-1, 3)), 5*time.Minute, time.Time{}, 0), s.uniform(2, 5)
	s.neighbour["gowning"] = func(t time.Time) float64 { return amp * g(t) }
	return fail
}

func (s *sim) counterFault(rise time.Time, at string) time.Time {
	end := rise.Add(s.minutes(2, 8))
	kind := s.rng.IntN(3)
	off := s.uniform(0.08, 0.25)
	if s.rng.IntN(2) == 0 {
		off = -off
	}
	s.faultyAt = at
	s.flow = func(t time.Time) float64 {
		if kind != 1 && !t.Before(rise) && t.Before(end) {
			return simNominalLPM * (1 + off)
		}
		return simNominalLPM
	}
	s.status = func(t time.Time) string {
		if kind != 0 && !t.Before(rise) && t.Before(end) {
			return "fault"
		}
		return "ok"
	}
	f, amp := ramp(rise, time.Second, end, 20*time.Second), s.uniform(20, 50)
	s.zone[at] = func(t time.Time) float64 { return amp * f(t) }
	return rise
}

func (s *sim) neighbourExcursion(rise time.Time, at string) time.Time {
	start := rise.Add(-s.minutes(1, 4))
	who := "gowning"
	if s.rng.IntN(3) == 0 {
		who = "metrology"
	}
	g, amp := ramp(start, time.Minute, start.Add(s.minutes(10, 20)), 3*time.Minute), s.uniform(10, 40)
	s.neighbour[who] = func(t time.Time) float64 { return amp * g(t) }
	s.zoneRise(rise, 2*time.Minute, start.Add(s.minutes(12, 20)), at, s.uniform(10, 30))
	return start
}

// zoneRise raises every location of the zone, the alarm location most.
func (s *sim) zoneRise(rise time.Time, up time.Duration, until time.Time, at string, amp float64) {
	for _, loc := range simLocations {
		a := amp
		if loc != at {
			a *= s.uniform(0.2, 0.6)
		}
		var delay time.Duration
		if loc != at {
			delay = s.minutes(0, 1.5)
		}
		f := ramp(rise.Add(delay), up, until, 3*time.Minute)
		s.zone[loc] = func(t time.Time) float64 { return a * f(t) }
	}
}
