package investigate

import (
	"fmt"
	"math"
	"time"
)

// instruments finds, per counter, the stretches where its flow left its
// baseline or it reported a fault, and judges them by whether the rise is
// at its location alone.
func (x *investigation) instruments() {
	for _, s := range x.in.Instruments {
		var spans []candidate
		if len(s.Flow) > 0 {
			floor := math.Max(0.005*s.NominalLPM, 0.01)
			devs, _ := x.seriesDeviations(s.Counter+" flow", s.Flow, floor, identity, 0)
			for _, d := range devs {
				off := 0.0
				if s.NominalLPM > 0 {
					off = (d.peak.Value - s.NominalLPM) / s.NominalLPM
				}
				what := fmt.Sprintf("%s flow %s L/min", s.Counter, sig(d.peak.Value))
				if s.NominalLPM > 0 {
					what += fmt.Sprintf(", %s %% off its nominal %s L/min", sig(math.Abs(off)*100), sig(s.NominalLPM))
					if math.Abs(off) > flowBand {
						what += " (outside ±5 %)"
					}
				}
				spans = append(spans, candidate{ev: Event{Start: d.start, End: d.end, Deviation: d.peakZ}, what: what})
			}
		}
		spans = append(spans, x.statusFaults(s)...)
		for _, c := range mergeSpans(spans) {
			x.events = append(x.events, x.instrumentEvent(s, c))
		}
	}
}

// statusFaults are the stretches in the search span where the counter
// reported anything but "ok".
func (x *investigation) statusFaults(s InstrumentSeries) []candidate {
	var out []candidate
	var cur *candidate
	faultBefore := false
	for _, st := range s.Status {
		if st.Time.Before(x.searchFrom) {
			faultBefore = faultBefore || (st.Status != "" && st.Status != "ok")
			continue
		}
		if st.Time.After(x.in.To) {
			continue
		}
		bad := st.Status != "" && st.Status != "ok"
		switch {
		case bad && cur == nil:
			cur = &candidate{ev: Event{Start: st.Time, Deviation: statusFaultZ}, what: fmt.Sprintf("%s reported status %q", s.Counter, st.Status)}
		case !bad && cur != nil:
			cur.ev.End = st.Time
			out = append(out, *cur)
			cur = nil
		}
	}
	if cur != nil {
		out = append(out, *cur)
	}
	if faultBefore {
		x.unknown("%s at %s reported a fault before %s: its readings there are not to be trusted", s.Counter, s.Location, clock(x.searchFrom))
	}
	return out
}

// mergeSpans joins overlapping stretches of one counter (flow and status
// together) into one, keeping the larger deviation and both words.
func mergeSpans(spans []candidate) []candidate {
	var out []candidate
	for _, c := range spans {
		merged := false
		for i := range out {
			if overlaps(out[i].ev.Start, out[i].ev.End, c.ev.Start, c.ev.End) {
				o := &out[i]
				if c.ev.Start.Before(o.ev.Start) {
					o.ev.Start = c.ev.Start
				}
				if o.ev.End.IsZero() || c.ev.End.IsZero() {
					o.ev.End = time.Time{}
				} else if c.ev.End.After(o.ev.End) {
					o.ev.End = c.ev.End
				}
				o.ev.Deviation = math.Max(o.ev.Deviation, c.ev.Deviation)
				o.what += "; " + c.what
				merged = true
				break
			}
		}
		if !merged {
			out = append(out, c)
		}
	}
	return out
}

// overlaps tells whether [s1, e1] and [s2, e2] share a moment; a zero end
// is open.
func overlaps(s1, e1, s2, e2 time.Time) bool {
	return (e2.IsZero() || !s1.After(e2)) && (e1.IsZero() || !s2.After(e1))
}

func (x *investigation) instrumentEvent(s InstrumentSeries, c candidate) candidate {
	c.ev.Kind = KindInstrument
	c.ev.Subjects = []string{s.Counter}
	var why string
	switch {
	case s.Location != x.res.RiseLocation:
		c.ev.Plausible = 0.3 * plausibility[KindInstrument]
		why = fmt.Sprintf("its location %s is not where the zone rose", s.Location)
	case len(x.alsoRose) > 0:
		c.ev.Plausible = 0.3 * plausibility[KindInstrument]
		why = fmt.Sprintf("but %s rose too: the room, not only the counter", list(x.alsoRose))
	case x.otherLocations == 0:
		c.ev.Plausible = 0.7 * plausibility[KindInstrument]
		why = "no other location of the zone to compare with: the counter may be at fault"
	default:
		c.ev.Plausible = plausibility[KindInstrument]
		why = "the other locations stayed flat: the counter, not the room"
	}
	what := c.what
	c.say = func(lead time.Duration) string { return what + ", " + x.rel(lead) + ": " + why }
	return c
}

// neighbours finds the rises of the neighbouring zones on the cascade.
func (x *investigation) neighbours() {
	for _, s := range x.in.Neighbours {
		name := fmt.Sprintf("%s (%s, %s µm)", s.Zone, s.Location, sig(s.SizeUM))
		devs, ok := x.seriesDeviations(name, s.Points, 0.05, logConc, +1)
		if !ok {
			continue
		}
		for _, d := range devs {
			what := fmt.Sprintf("%s rose to %s /m³ ≥%s µm at %s", s.Zone, sig(d.extreme.Value), sig(s.SizeUM), s.Location)
			from := "air from the upstream room"
			if s.Lower {
				from = "air from the lower room"
			}
			zone := s.Zone
			x.events = append(x.events, candidate{
				ev:   Event{Kind: KindNeighbour, Subjects: []string{s.Zone}, Start: d.start, End: d.end, Deviation: d.peakZ, Plausible: plausibility[KindNeighbour]},
				what: what,
				say: func(lead time.Duration) string {
					switch {
					case lead >= x.o.Simultaneous:
						return fmt.Sprintf("%s rose %s earlier: %s", zone, span(lead), from)
					case lead <= -x.o.Simultaneous:
						return fmt.Sprintf("%s rose %s later: more likely carried from this zone than into it", zone, span(lead))
					}
					return fmt.Sprintf("%s rose at the same time: a common cause more likely than %s", zone, from)
				},
			})
		}
	}
}

// states lists the zone's operating-state changes in the search span.
func (x *investigation) states() {
	for _, st := range x.in.States {
		if st.Time.Before(x.searchFrom) || st.Time.After(x.in.To) {
			continue
		}
		what := fmt.Sprintf("%s went from %s to %s at %s", x.in.Zone, st.From, st.To, clock(st.Time))
		if st.By != "" {
			what += " (by " + st.By + ")"
		}
		x.events = append(x.events, candidate{
			ev:   Event{Kind: KindState, Subjects: []string{x.in.Zone}, Start: st.Time, Deviation: stateChangeZ, Plausible: plausibility[KindState]},
			what: what,
			say:  func(lead time.Duration) string { return what + ", " + x.rel(lead) },
		})
	}
}

// environment finds temperature and humidity leaving their baselines.
func (x *investigation) environment() {
	for _, e := range x.in.Environment {
		floor, unit := 0.0, ""
		switch e.Quantity {
		case QuantityTemperature:
			floor, unit = 0.05, " °C"
		case QuantityHumidity:
			floor, unit = 0.5, " %"
		default:
			continue
		}
		devs, ok := x.seriesDeviations(e.Sensor+" "+e.Quantity, e.Points, floor, identity, 0)
		if !ok {
			continue
		}
		for _, d := range devs {
			what := fmt.Sprintf("%s %s reached %s%s", e.Sensor, e.Quantity, sig(d.peak.Value), unit)
			if d.peak.Value < e.Low || d.peak.Value > e.High {
				what += fmt.Sprintf(" (band %s–%s%s)", sig(e.Low), sig(e.High), unit)
			}
			x.events = append(x.events, candidate{
				ev:   Event{Kind: KindEnvironment, Subjects: []string{e.Sensor}, Start: d.start, End: d.end, Deviation: d.peakZ, Plausible: plausibility[KindEnvironment]},
				what: what,
				say:  func(lead time.Duration) string { return what + ", " + x.rel(lead) },
			})
		}
	}
}
