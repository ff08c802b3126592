package investigate

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// ErrInput is wrapped by every error about the series handed in; the
// message names the series and the index of the bad point.
var ErrInput = errors.New("investigate: bad input")

// Point is one sample of a series: a time and a value in the series' unit.
type Point struct {
	Time  time.Time
	Value float64
}

// LocationSeries is the concentration (particles/m³, cumulative ≥ SizeUM)
// at one sampling location of the zone, or of a neighbouring zone.
type LocationSeries struct {
	Location string
	SizeUM   float64
	Points   []Point
}

// PressureSeries is one DP sensor on the zone's boundary: the pressure of
// room High over room Low in pascals, and the minimum the site set for it.
type PressureSeries struct {
	Sensor    string
	High, Low string  // zone names on either side
	MinPa     float64 // the minimum; a sample below it is a door opening
	Points    []Point
}

// NeighbourSeries is the concentration of a neighbouring zone on the
// cascade. Lower is true when the neighbour is held at a lower pressure
// than the zone (air reaches the zone from it only when the cascade gives
// way).
type NeighbourSeries struct {
	Zone     string
	Location string
	SizeUM   float64
	Lower    bool
	Points   []Point
}

// StateChange is a change of the zone's operating state.
type StateChange struct {
	Time     time.Time
	From, To string
	By       string
}

// EnvironmentSeries is one environment channel of the zone: Quantity is
// "temperature_c", "humidity_pct" or "velocity_m_s"; Low and High its band.
type EnvironmentSeries struct {
	Sensor    string
	Quantity  string
	Low, High float64
	Points    []Point
}

// StatusPoint is the status a counter reported with a reading ("ok" or a
// fault word of the counter).
type StatusPoint struct {
	Time   time.Time
	Status string
}

// InstrumentSeries is the health of the counter at one location: the
// sample flow it reported against its nominal flow, and its status.
type InstrumentSeries struct {
	Counter    string
	Location   string
	NominalLPM float64
	Flow       []Point
	Status     []StatusPoint
}

// The window around an alarm that an investigation reads by default: an
// hour before it, for the baseline and the lead-up, and half an hour
// after, for what followed.
const (
	DefaultBefore = 60 * time.Minute
	DefaultAfter  = 30 * time.Minute
)

// DefaultWindow is the window read around an alarm that began at alarm.
func DefaultWindow(alarm time.Time) (from, to time.Time) {
	return alarm.Add(-DefaultBefore), alarm.Add(DefaultAfter)
}

// Input is everything recorded around one alarm. From and To bound the
// window (the daemon's default is 60 min before the alarm to 30 min after);
// AlarmTime is when the alarm began, AlarmLocation and SizeUM where it
// was raised (empty location: the zone as a whole).
type Input struct {
	Zone          string
	AlarmTime     time.Time
	AlarmLocation string
	SizeUM        float64
	From, To      time.Time

	Locations   []LocationSeries
	Pressure    []PressureSeries
	Neighbours  []NeighbourSeries
	States      []StateChange
	Environment []EnvironmentSeries
	Instruments []InstrumentSeries
}

func inputError(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrInput}, args...)...)
}

// checkPoints refuses a series whose times go backwards or whose values
// are not finite: a ranking over a garbled series would mislead.
func checkPoints(name string, pts []Point) error {
	for i, p := range pts {
		if p.Time.IsZero() {
			return inputError("%s.Points[%d].Time: zero time", name, i)
		}
		if math.IsNaN(p.Value) || math.IsInf(p.Value, 0) {
			return inputError("%s.Points[%d].Value: %v is not a finite number", name, i, p.Value)
		}
		if i > 0 && p.Time.Before(pts[i-1].Time) {
			return inputError("%s.Points[%d].Time: %s is before the point before it", name, i, p.Time.UTC().Format(time.RFC3339))
		}
	}
	return nil
}

// Check reports the first problem of in, naming the field and index.
func (in *Input) Check() error {
	switch {
	case in.AlarmTime.IsZero():
		return inputError("AlarmTime: zero time")
	case in.From.IsZero() || in.To.IsZero():
		return inputError("From/To: the window needs both ends")
	case !in.From.Before(in.AlarmTime) || !in.AlarmTime.Before(in.To):
		return inputError("From/To: the window %s to %s does not hold the alarm time %s",
			in.From.UTC().Format(time.RFC3339), in.To.UTC().Format(time.RFC3339), in.AlarmTime.UTC().Format(time.RFC3339))
	}
	for i, s := range in.Locations {
		if err := checkPoints(fmt.Sprintf("Locations[%d]", i), s.Points); err != nil {
			return err
		}
	}
	for i, s := range in.Pressure {
		if err := checkPoints(fmt.Sprintf("Pressure[%d]", i), s.Points); err != nil {
			return err
		}
	}
	for i, s := range in.Neighbours {
		if err := checkPoints(fmt.Sprintf("Neighbours[%d]", i), s.Points); err != nil {
			return err
		}
	}
	for i, s := range in.Environment {
		if err := checkPoints(fmt.Sprintf("Environment[%d]", i), s.Points); err != nil {
			return err
		}
	}
	for i, s := range in.Instruments {
		if err := checkPoints(fmt.Sprintf("Instruments[%d].Flow", i), s.Flow); err != nil {
			return err
		}
		for j := 1; j < len(s.Status); j++ {
			if s.Status[j].Time.Before(s.Status[j-1].Time) {
				return inputError("Instruments[%d].Status[%d].Time: before the status before it", i, j)
			}
		}
	}
	for i := 1; i < len(in.States); i++ {
		if in.States[i].Time.Before(in.States[i-1].Time) {
			return inputError("States[%d].Time: before the change before it", i)
		}
	}
	return nil
}
