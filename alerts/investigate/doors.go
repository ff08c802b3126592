package investigate

import "time"

// DefaultDoorHysteresisPa is how far above its minimum a DP must come back
// before a door opening counts as closed, so that a DP hovering at its
// minimum is not counted as many openings (common practice, no source).
const DefaultDoorHysteresisPa = 0.5

// DoorOpening is one stretch of a DP sensor below its minimum: the door
// (or hatch) between the two rooms open, or the cascade failing.
type DoorOpening struct {
	Sensor string
	Start  time.Time
	End    time.Time // first sample back above the minimum; zero while still below at the end of the series
	LowPa  float64   // the lowest DP of the stretch
}

// Duration is how long the opening lasted, up to until while it is still
// open.
func (d DoorOpening) Duration(until time.Time) time.Duration {
	if d.End.IsZero() {
		return until.Sub(d.Start)
	}
	return d.End.Sub(d.Start)
}

// DoorCount is the door openings seen at one DP sensor in a window.
type DoorCount struct {
	Sensor   string
	MinPa    float64
	Openings []DoorOpening
}

// DoorOpenings finds the stretches in [from, to] where the sensor's DP is
// below minPa. A stretch starts at the first sample below the minimum and
// ends at the first sample at or above minPa+hysteresisPa.
func DoorOpenings(sensor string, minPa, hysteresisPa float64, pts []Point, from, to time.Time) []DoorOpening {
	var out []DoorOpening
	var cur *DoorOpening
	for _, p := range pts {
		if p.Time.Before(from) || p.Time.After(to) {
			continue
		}
		switch {
		case cur == nil && p.Value < minPa:
			cur = &DoorOpening{Sensor: sensor, Start: p.Time, LowPa: p.Value}
		case cur != nil && p.Value >= minPa+hysteresisPa:
			cur.End = p.Time
			out = append(out, *cur)
			cur = nil
		case cur != nil && p.Value < cur.LowPa:
			cur.LowPa = p.Value
		}
	}
	if cur != nil {
		out = append(out, *cur)
	}
	return out
}
