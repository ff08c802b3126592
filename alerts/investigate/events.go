package investigate

import (
	"fmt"
	"math"
	"slices"
	"strings"
	"time"
)

// Quantities of an EnvironmentSeries.
const (
	QuantityTemperature = "temperature_c"
	QuantityHumidity    = "humidity_pct"
	QuantityVelocity    = "velocity_m_s"
)

// flowBand is the permitted deviation of a counter's sample flow from its
// nominal flow: ±5 % (ISO 21501-4:2018, from memory).
const flowBand = 0.05

// candidate is an event before scoring; say words its evidence once the
// lead time against the rise is known.
type candidate struct {
	ev   Event
	what string // the measurement part of the evidence, without the timing
	say  func(lead time.Duration) string
}

// score applies the lead-time weight and the plausibility to c.
func (x *investigation) score(c candidate) Event {
	e := c.ev
	e.Lead = x.res.Rise.Sub(e.Start)
	e.Weight = x.o.weight(x.res.Rise, e.Start, e.End)
	e.Score = math.Log1p(e.Deviation) * e.Weight * e.Plausible
	e.Evidence = c.say(e.Lead)
	return e
}

// weight favours events under way at the rise: 1 from MaxLead before the
// rise to Simultaneous after it; decaying with Decay for an event that
// began earlier or was over before the rise; half, and decaying, for one
// that began after the rise (more likely an effect than a cause).
func (o Options) weight(rise, start, end time.Time) float64 {
	lead := rise.Sub(start)
	decay := func(d time.Duration) float64 { return math.Exp(-float64(d) / float64(o.Decay)) }
	switch {
	case lead < -o.Simultaneous:
		return 0.5 * decay(-lead-o.Simultaneous)
	case !end.IsZero() && end.Before(rise.Add(-o.Simultaneous)):
		return decay(rise.Sub(end) - o.Simultaneous)
	case lead > o.MaxLead:
		return decay(lead - o.MaxLead)
	}
	return 1
}

func (x *investigation) rel(lead time.Duration) string { return relative(lead, x.res.RiseLocation) }

// air finds the falls of DP and airflow and joins those that began
// together into one supply failure.
func (x *investigation) air() {
	var falls []candidate
	for _, p := range x.in.Pressure {
		devs, ok := x.seriesDeviations(p.Sensor, p.Points, 0.1, identity, -1)
		if !ok {
			continue
		}
		doors := DoorOpenings(p.Sensor, p.MinPa, x.o.DoorHysteresisPa, p.Points, x.searchFrom, x.in.To)
		for _, d := range devs {
			falls = append(falls, x.pressureFall(p, d, doors))
		}
	}
	for _, e := range x.in.Environment {
		if e.Quantity != QuantityVelocity {
			continue
		}
		devs, ok := x.seriesDeviations(e.Sensor, e.Points, 0.005, identity, -1)
		if !ok {
			continue
		}
		for _, d := range devs {
			what := fmt.Sprintf("airflow at %s fell to %s m/s", e.Sensor, sig(d.extreme.Value))
			if d.extreme.Value < e.Low {
				what += fmt.Sprintf(" (band %s–%s m/s)", sig(e.Low), sig(e.High))
			}
			falls = append(falls, candidate{
				ev:   Event{Kind: KindAirflow, Subjects: []string{e.Sensor}, Start: d.start, End: d.end, Deviation: d.peakZ, Plausible: plausibility[KindAirflow]},
				what: what,
				say:  func(lead time.Duration) string { return what + ", " + x.rel(lead) },
			})
		}
	}
	x.events = append(x.events, x.groupAir(falls)...)
}

// pressureFall words one fall of a DP sensor: a door opening when it went
// below the minimum, held open longer being more plausible than a passage.
func (x *investigation) pressureFall(p PressureSeries, d deviation, doors []DoorOpening) candidate {
	until := d.end
	if until.IsZero() {
		until = x.in.To
	}
	var held time.Duration
	for _, o := range doors {
		oEnd := o.End
		if oEnd.IsZero() {
			oEnd = x.in.To
		}
		if !o.Start.After(until) && !oEnd.Before(d.start) {
			held += o.Duration(x.in.To)
		}
	}
	ev := Event{Kind: KindPressureDip, Subjects: []string{p.Sensor}, Start: d.start, End: d.end, Deviation: d.peakZ, Plausible: plausibility[KindPressureDip]}
	what := fmt.Sprintf("%s fell to %s Pa (minimum %s Pa) but stayed above its minimum", p.Sensor, pa(d.extreme.Value), pa(p.MinPa))
	why := "the cascade weakened"
	if held > 0 {
		ev.Kind = KindDoor
		ev.Plausible = plausibility[KindDoor] * (0.5 + 0.5*math.Min(1, float64(held)/float64(2*time.Minute)))
		what = fmt.Sprintf("%s fell to %s Pa (minimum %s Pa) for %s", p.Sensor, pa(d.extreme.Value), pa(p.MinPa), span(held))
		why = fmt.Sprintf("a door between %s and %s open", p.High, p.Low)
		if held < 2*time.Minute {
			why += " briefly (a passage)"
		}
	}
	if d.extreme.Value < 0 {
		why = fmt.Sprintf("flow reversed: air from %s into %s", p.Low, p.High)
		ev.Plausible = plausibility[KindDoor]
	}
	return candidate{ev: ev, what: what, say: func(lead time.Duration) string { return what + ", " + x.rel(lead) + ": " + why }}
}

// groupAir joins sustained falls of different sensors that began within
// two Simultaneous spans of the first into one supply failure; the others
// stay as they are.
func (x *investigation) groupAir(falls []candidate) []candidate {
	slices.SortFunc(falls, func(a, b candidate) int { return a.ev.Start.Compare(b.ev.Start) })
	var out []candidate
	used := make([]bool, len(falls))
	for i := range falls {
		if used[i] {
			continue
		}
		group := []int{i}
		names := map[string]bool{falls[i].ev.Subjects[0]: true}
		for j := i + 1; j < len(falls) && sustained(falls[i].ev); j++ {
			if used[j] || !sustained(falls[j].ev) || falls[j].ev.Start.Sub(falls[i].ev.Start) > 2*x.o.Simultaneous || names[falls[j].ev.Subjects[0]] {
				continue
			}
			group = append(group, j)
			names[falls[j].ev.Subjects[0]] = true
		}
		if len(group) < 2 {
			out = append(out, falls[i])
			continue
		}
		out = append(out, x.supplyFailure(falls, group))
		for _, j := range group {
			used[j] = true
		}
	}
	return out
}

// sustainedFall is the shortest fall that can be part of a supply
// failure: a fan that stops does not come back by itself within seconds,
// a door passage does.
const sustainedFall = 2 * time.Minute

func sustained(e Event) bool { return e.End.IsZero() || e.End.Sub(e.Start) >= sustainedFall }

func (x *investigation) supplyFailure(falls []candidate, group []int) candidate {
	ev := Event{Kind: KindAirSupply, Start: falls[group[0]].ev.Start, Plausible: plausibility[KindAirSupply]}
	var parts []string
	open := false
	for _, j := range group {
		f := falls[j].ev
		ev.Subjects = append(ev.Subjects, f.Subjects[0])
		ev.Deviation = math.Max(ev.Deviation, f.Deviation)
		if f.End.IsZero() {
			open = true
		} else if f.End.After(ev.End) {
			ev.End = f.End
		}
		parts = append(parts, falls[j].what)
	}
	if open {
		ev.End = time.Time{}
	}
	what := fmt.Sprintf("%s fell together (%s)", list(ev.Subjects), strings.Join(parts, "; "))
	return candidate{ev: ev, say: func(lead time.Duration) string {
		return what + ", " + x.rel(lead) + ": supply air lost, a fan or damper failing"
	}}
}
